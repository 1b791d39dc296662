"""The embedded state store: jobs, models and versions in one SQLite file.

Layout of a state directory::

    DIR/state.sqlite3          jobs, models, versions (WAL journal)
    DIR/results/{job}.parquet  per-group results of each succeeded job

A job's results are written first (temp file + rename, by
``trendmill.io.results.write_results``); the job's SUCCEEDED state and its
model version are then recorded in one transaction. A crash in between
leaves only an unreferenced file, which :meth:`StateStore.recover` removes, so
a version never points at a missing or partial file.

Only this module speaks SQL; every statement is parameterised (user text is
never pasted into SQL).
"""

from __future__ import annotations

import json
import os
import re
import secrets
import sqlite3
import threading
import time
from dataclasses import dataclass, field

from ..engine.errors import Conflict, LimitError, NotFound, SpecError

__all__ = ["StateStore", "JobRecord", "ModelRecord", "VersionRecord", "check_model_id",
           "check_model_shape", "TERMINAL", "ACTIVE", "MODEL_ID"]

TERMINAL = frozenset({"SUCCEEDED", "FAILED", "CANCELLED"})
ACTIVE = frozenset({"QUEUED", "RUNNING"})
#: model ids: lower-case, digits and '-', starting with a letter
MODEL_ID = re.compile(r"[a-z][a-z0-9-]{0,62}\Z")
_SCHEMA_VERSION = "1"

_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS jobs (
    seq INTEGER PRIMARY KEY AUTOINCREMENT,
    id TEXT NOT NULL UNIQUE,
    request_id TEXT UNIQUE,
    spec TEXT NOT NULL,
    source_path TEXT NOT NULL,
    model TEXT,
    state TEXT NOT NULL,
    create_time REAL NOT NULL,
    start_time REAL,
    end_time REAL,
    progress TEXT NOT NULL DEFAULT '{}',
    error TEXT,
    summary TEXT,
    result_path TEXT,
    version INTEGER,
    attempts INTEGER NOT NULL DEFAULT 0,
    cancel_requested INTEGER NOT NULL DEFAULT 0
);
CREATE INDEX IF NOT EXISTS jobs_state ON jobs (state, seq);
CREATE INDEX IF NOT EXISTS jobs_model ON jobs (model, seq);
CREATE TABLE IF NOT EXISTS models (
    id TEXT PRIMARY KEY,
    create_time REAL NOT NULL,
    update_time REAL NOT NULL,
    latest_version INTEGER NOT NULL,
    spec TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS versions (
    model TEXT NOT NULL REFERENCES models (id),
    version INTEGER NOT NULL,
    job_id TEXT NOT NULL REFERENCES jobs (id),
    create_time REAL NOT NULL,
    spec TEXT NOT NULL,
    summary TEXT NOT NULL,
    result_path TEXT NOT NULL,
    key_columns TEXT NOT NULL,
    PRIMARY KEY (model, version)
);
"""

# Fields that make two fits of one model comparable group by group.
_MODEL_SHAPE = ("y", "x", "by", "weight", "intercept")


@dataclass(frozen=True, slots=True)
class JobRecord:
    id: str
    spec: dict
    source_path: str
    model: str | None
    state: str
    create_time: float
    start_time: float | None = None
    end_time: float | None = None
    progress: dict = field(default_factory=dict)
    error: dict | None = None
    summary: dict | None = None
    result_path: str | None = None
    version: int | None = None
    attempts: int = 0
    cancel_requested: bool = False
    request_id: str | None = None
    seq: int = 0

    @property
    def name(self) -> str:
        return f"fitJobs/{self.id}"

    @property
    def done(self) -> bool:
        return self.state in TERMINAL


@dataclass(frozen=True, slots=True)
class ModelRecord:
    id: str
    create_time: float
    update_time: float
    latest_version: int
    spec: dict

    @property
    def name(self) -> str:
        return f"models/{self.id}"


@dataclass(frozen=True, slots=True)
class VersionRecord:
    model: str
    version: int
    job_id: str
    create_time: float
    spec: dict
    summary: dict
    result_path: str
    key_columns: list

    @property
    def name(self) -> str:
        return f"models/{self.model}/versions/{self.version}"


def _job(row: sqlite3.Row) -> JobRecord:
    return JobRecord(
        id=row["id"], spec=json.loads(row["spec"]), source_path=row["source_path"],
        model=row["model"], state=row["state"], create_time=row["create_time"],
        start_time=row["start_time"], end_time=row["end_time"],
        progress=json.loads(row["progress"] or "{}"),
        error=json.loads(row["error"]) if row["error"] else None,
        summary=json.loads(row["summary"]) if row["summary"] else None,
        result_path=row["result_path"], version=row["version"], attempts=row["attempts"],
        cancel_requested=bool(row["cancel_requested"]), request_id=row["request_id"],
        seq=row["seq"])


def _model(row: sqlite3.Row) -> ModelRecord:
    return ModelRecord(id=row["id"], create_time=row["create_time"],
                       update_time=row["update_time"], latest_version=row["latest_version"],
                       spec=json.loads(row["spec"]))


def _version(row: sqlite3.Row) -> VersionRecord:
    return VersionRecord(model=row["model"], version=row["version"], job_id=row["job_id"],
                         create_time=row["create_time"], spec=json.loads(row["spec"]),
                         summary=json.loads(row["summary"]), result_path=row["result_path"],
                         key_columns=json.loads(row["key_columns"]))


def check_model_id(model: str) -> str:
    """The bare model id of ``model`` (``models/`` prefix allowed), validated."""
    mid = model[len("models/"):] if model.startswith("models/") else model
    if not MODEL_ID.match(mid):
        raise SpecError("model", f"{model!r} is not a model id (lower-case letters, digits "
                                 "and '-', starting with a letter, at most 63 characters)")
    return mid


def check_model_shape(model: ModelRecord, spec: dict) -> None:
    """Raise Conflict when ``spec`` changes what versions of ``model`` are comparable on."""
    for key in _MODEL_SHAPE:
        if model.spec.get(key) != spec.get(key):
            raise Conflict(
                f"model: {model.name} fits {key}={model.spec.get(key)!r}, this spec has "
                f"{key}={spec.get(key)!r}; use a new model for a different fit",
                field="model")


class StateStore:
    """Jobs, models and versions of one state directory.

    One connection, serialised by a lock: writes are a few per job, reads are
    by primary key or a short index range, so contention is negligible.
    """

    def __init__(self, directory: str) -> None:
        self.directory = os.path.abspath(directory)
        os.makedirs(os.path.join(self.directory, "results"), exist_ok=True)
        self._lock = threading.RLock()
        self._db = sqlite3.connect(os.path.join(self.directory, "state.sqlite3"),
                                   check_same_thread=False, isolation_level=None)
        self._db.row_factory = sqlite3.Row
        self._db.execute("PRAGMA journal_mode=WAL")
        self._db.execute("PRAGMA synchronous=FULL")
        self._db.execute("PRAGMA foreign_keys=ON")
        self._db.executescript(_SCHEMA)
        with self._tx() as db:
            row = db.execute("SELECT value FROM meta WHERE key = 'schema'").fetchone()
            if row is None:
                db.execute("INSERT INTO meta VALUES ('schema', ?)", (_SCHEMA_VERSION,))
            elif row["value"] != _SCHEMA_VERSION:
                raise Conflict(f"state: {self.directory!r} has schema {row['value']}, "
                               f"this server needs {_SCHEMA_VERSION}")

    # -- plumbing -----------------------------------------------------------
    class _Tx:
        def __init__(self, store: "StateStore") -> None:
            self.store = store

        def __enter__(self):
            self.store._lock.acquire()
            self.store._db.execute("BEGIN IMMEDIATE")
            return self.store._db

        def __exit__(self, exc_type, exc, tb):
            try:
                self.store._db.execute("ROLLBACK" if exc_type else "COMMIT")
            finally:
                self.store._lock.release()

    def _tx(self) -> "StateStore._Tx":
        return StateStore._Tx(self)

    def _one(self, sql: str, args=()) -> sqlite3.Row | None:
        with self._lock:
            return self._db.execute(sql, args).fetchone()

    def _all(self, sql: str, args=()) -> list[sqlite3.Row]:
        with self._lock:
            return self._db.execute(sql, args).fetchall()

    def result_file(self, job_id: str) -> str:
        """Where a job's results go (relative paths are stored: the dir can move)."""
        return os.path.join("results", f"{job_id}.parquet")

    def abspath(self, relative: str) -> str:
        return os.path.join(self.directory, relative)

    def close(self) -> None:
        with self._lock:
            self._db.close()

    # -- jobs ---------------------------------------------------------------
    def create_job(self, *, spec: dict, source_path: str, model: str | None,
                   request_id: str | None, max_queued: int) -> tuple[JobRecord, bool]:
        """Insert a QUEUED job; returns (job, created). An existing request id returns its job."""
        with self._tx() as db:
            if request_id:
                row = db.execute("SELECT * FROM jobs WHERE request_id = ?", (request_id,)).fetchone()
                if row is not None:
                    return _job(row), False
            queued = db.execute("SELECT count(*) FROM jobs WHERE state = 'QUEUED'").fetchone()[0]
            if queued >= max_queued:
                raise LimitError(f"max_queued_jobs: {queued} jobs are already waiting "
                                 f"(limit {max_queued}); retry when some have finished",
                                 limit=max_queued)
            job_id = secrets.token_hex(8)
            db.execute(
                "INSERT INTO jobs (id, request_id, spec, source_path, model, state, create_time)"
                " VALUES (?, ?, ?, ?, ?, 'QUEUED', ?)",
                (job_id, request_id or None, json.dumps(spec), source_path, model, time.time()))
            row = db.execute("SELECT * FROM jobs WHERE id = ?", (job_id,)).fetchone()
            return _job(row), True

    def get_job(self, job_id: str) -> JobRecord:
        row = self._one("SELECT * FROM jobs WHERE id = ?", (job_id,))
        if row is None:
            raise NotFound(f"name: fitJobs/{job_id} does not exist", name=f"fitJobs/{job_id}")
        return _job(row)

    def list_jobs(self, *, state: str | None, model: str | None, before_seq: int | None,
                  limit: int) -> list[JobRecord]:
        """Jobs newest first, with ``seq < before_seq`` when given."""
        where, args = [], []
        if state:
            where.append("state = ?")
            args.append(state)
        if model:
            where.append("model = ?")
            args.append(model)
        if before_seq is not None:
            where.append("seq < ?")
            args.append(before_seq)
        sql = "SELECT * FROM jobs"
        if where:
            sql += " WHERE " + " AND ".join(where)
        sql += " ORDER BY seq DESC LIMIT ?"
        args.append(limit)
        return [_job(r) for r in self._all(sql, args)]

    def update_job(self, job_id: str, *, expect: frozenset[str] | None = None, **values) -> JobRecord | None:
        """Set columns of a job; with ``expect``, only when its state is one of them.

        Returns the updated job, or None when ``expect`` did not match.
        """
        cols = []
        args = []
        for k, v in values.items():
            if k not in {"state", "start_time", "end_time", "progress", "error", "summary",
                         "result_path", "version", "attempts", "cancel_requested"}:
                raise KeyError(k)
            cols.append(f"{k} = ?")
            args.append(json.dumps(v) if k in {"progress", "error", "summary"} and v is not None else v)
        with self._tx() as db:
            row = db.execute("SELECT state FROM jobs WHERE id = ?", (job_id,)).fetchone()
            if row is None:
                raise NotFound(f"name: fitJobs/{job_id} does not exist")
            if expect is not None and row["state"] not in expect:
                return None
            db.execute(f"UPDATE jobs SET {', '.join(cols)} WHERE id = ?", (*args, job_id))
            return _job(db.execute("SELECT * FROM jobs WHERE id = ?", (job_id,)).fetchone())

    def finish_job(self, job_id: str, *, result_path: str, summary: dict,
                   key_columns: list, end_time: float, progress: dict) -> JobRecord:
        """Record success: the job turns SUCCEEDED and, when saved as a model, a version is added.

        Raises
        ------
        Conflict
            The job is no longer RUNNING, or its model's shape changed meanwhile.
        """
        with self._tx() as db:
            row = db.execute("SELECT * FROM jobs WHERE id = ?", (job_id,)).fetchone()
            job = _job(row)
            if job.state != "RUNNING":
                raise Conflict(f"fitJobs/{job_id} is {job.state}, not RUNNING")
            version = None
            if job.model:
                mrow = db.execute("SELECT * FROM models WHERE id = ?", (job.model,)).fetchone()
                if mrow is None:
                    version = 1
                    db.execute("INSERT INTO models VALUES (?, ?, ?, ?, ?)",
                               (job.model, end_time, end_time, 1, json.dumps(job.spec)))
                else:
                    check_model_shape(_model(mrow), job.spec)
                    version = mrow["latest_version"] + 1
                    db.execute("UPDATE models SET latest_version = ?, update_time = ?, spec = ?"
                               " WHERE id = ?", (version, end_time, json.dumps(job.spec), job.model))
                db.execute("INSERT INTO versions VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
                           (job.model, version, job_id, end_time, json.dumps(job.spec),
                            json.dumps(summary), result_path, json.dumps(key_columns)))
            db.execute("UPDATE jobs SET state = 'SUCCEEDED', end_time = ?, summary = ?,"
                       " result_path = ?, version = ?, progress = ? WHERE id = ?",
                       (end_time, json.dumps(summary), result_path, version,
                        json.dumps(progress), job_id))
            return _job(db.execute("SELECT * FROM jobs WHERE id = ?", (job_id,)).fetchone())

    def recover(self, *, max_attempts: int) -> tuple[list[JobRecord], list[JobRecord]]:
        """After a (re)start: jobs to run again, and jobs given up on.

        Jobs left QUEUED or RUNNING by the previous server are queued again,
        unless they were already started ``max_attempts`` times: those are
        marked FAILED (a job that keeps taking the server down must not loop).
        Result files no succeeded job refers to (a crash between writing the
        file and recording it) are deleted.
        """
        requeued, failed = [], []
        now = time.time()
        with self._tx() as db:
            for row in db.execute("SELECT * FROM jobs WHERE state IN ('QUEUED', 'RUNNING')"
                                  " ORDER BY seq").fetchall():
                job = _job(row)
                if job.state == "RUNNING" and job.attempts >= max_attempts:
                    err = {"code": "ABORTED", "reason": "INTERRUPTED", "field": "", "metadata": {},
                           "message": f"the server stopped while the job ran, {job.attempts} "
                                      "times; not retried again"}
                    db.execute("UPDATE jobs SET state = 'FAILED', end_time = ?, error = ? "
                               "WHERE id = ?", (now, json.dumps(err), job.id))
                    failed.append(job.id)
                else:
                    db.execute("UPDATE jobs SET state = 'QUEUED', progress = '{}' WHERE id = ?",
                               (job.id,))
                    requeued.append(job.id)
            referenced = {r[0] for r in db.execute(
                "SELECT result_path FROM jobs WHERE result_path IS NOT NULL")}
        results = os.path.join(self.directory, "results")
        for name in os.listdir(results):
            rel = os.path.join("results", name)
            if rel not in referenced:
                try:
                    os.remove(os.path.join(results, name))
                except OSError:
                    pass
        return [self.get_job(j) for j in requeued], [self.get_job(j) for j in failed]

    def count_jobs(self, state: str) -> int:
        return self._one("SELECT count(*) FROM jobs WHERE state = ?", (state,))[0]

    # -- models -------------------------------------------------------------
    def find_model(self, model_id: str) -> ModelRecord | None:
        row = self._one("SELECT * FROM models WHERE id = ?", (model_id,))
        return _model(row) if row else None

    def get_model(self, model_id: str) -> ModelRecord:
        m = self.find_model(model_id)
        if m is None:
            raise NotFound(f"name: models/{model_id} does not exist", name=f"models/{model_id}")
        return m

    def list_models(self, *, after: str | None, limit: int) -> list[ModelRecord]:
        if after is None:
            rows = self._all("SELECT * FROM models ORDER BY id LIMIT ?", (limit,))
        else:
            rows = self._all("SELECT * FROM models WHERE id > ? ORDER BY id LIMIT ?", (after, limit))
        return [_model(r) for r in rows]

    def get_version(self, model_id: str, version: int | None) -> VersionRecord:
        """A version of a model; ``None`` = the latest."""
        m = self.get_model(model_id)
        v = m.latest_version if version is None else version
        row = self._one("SELECT * FROM versions WHERE model = ? AND version = ?", (model_id, v))
        if row is None:
            raise NotFound(f"name: models/{model_id}/versions/{v} does not exist "
                           f"(latest is {m.latest_version})",
                           name=f"models/{model_id}/versions/{v}")
        return _version(row)

    def list_versions(self, model_id: str, *, before: int | None, limit: int) -> list[VersionRecord]:
        self.get_model(model_id)
        if before is None:
            rows = self._all("SELECT * FROM versions WHERE model = ? ORDER BY version DESC LIMIT ?",
                             (model_id, limit))
        else:
            rows = self._all("SELECT * FROM versions WHERE model = ? AND version < ?"
                             " ORDER BY version DESC LIMIT ?", (model_id, before, limit))
        return [_version(r) for r in rows]
