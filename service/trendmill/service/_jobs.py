"""Running fit jobs: a bounded pool of job threads beside the RPC threads.

Each job thread calls :func:`trendmill.local.run_fit` (which spreads the scan
over worker processes), so a long fit never holds an RPC thread. Every state
change is written to the state store first, then logged as one JSON line
and published to watchers (logger ``trendmill.service``)::

    {"event": "job_state", "job": "fitJobs/…", "state": "RUNNING", ...}

Cancelling sets a flag that ``run_fit`` polls between partitions. Stopping
the server sets the same kind of flag for every running job, but puts the
job back to QUEUED: the next server start runs it again from the beginning
(``StateStore.recover``), so no job is ever left RUNNING.
"""

from __future__ import annotations

import json
import logging
import os
import threading
import time
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field

from ..engine.errors import Cancelled, Conflict, LimitError, TrendmillError
from ..engine.spec import FitSpec
from ._errors import job_error
from ._state import TERMINAL, JobRecord, StateStore

__all__ = ["JobRunner", "LiveJob", "log_event"]

_log = logging.getLogger("trendmill.service")


def log_event(**fields) -> None:
    """One structured (JSON) log line."""
    fields = {"time": round(time.time(), 3), **fields}
    _log.info(json.dumps(fields, sort_keys=False, default=str))


@dataclass(slots=True, eq=False)
class LiveJob:
    """A job this server is running or about to run; watchers wait on ``cond``."""

    job: JobRecord
    run_spec: FitSpec
    progress: dict = field(default_factory=dict)
    cancel: threading.Event = field(default_factory=threading.Event)
    cond: threading.Condition = field(default_factory=threading.Condition)
    #: bumped on every change, so a watcher knows whether it has seen the latest
    changes: int = 0

    def snapshot(self) -> tuple[JobRecord, dict, int]:
        with self.cond:
            return self.job, dict(self.progress), self.changes


class JobRunner:
    """Runs queued jobs, at most ``max_running`` at a time.

    Parameters
    ----------
    store : StateStore
    max_running : int
        Jobs running at once; more wait QUEUED.
    workers : int or None
        Worker processes of each fit (None: the executor's default).
    max_groups : int
        A result with more groups fails the job with RESOURCE_EXHAUSTED.
    on_result : callable, optional
        ``on_result(path, table, spec)`` after a result is stored (the server
        keeps it in its result cache).
    """

    def __init__(self, store: StateStore, *, max_running: int, workers: int | None,
                 max_groups: int, on_result=None) -> None:
        self.store = store
        self.on_result = on_result
        self.workers = workers
        self.max_groups = max_groups
        self._pool = ThreadPoolExecutor(max_workers=max_running, thread_name_prefix="trendmill-job")
        self._live: dict[str, LiveJob] = {}
        self._lock = threading.Lock()
        self._stopping = threading.Event()

    # -- queries -------------------------------------------------------------
    def live(self, job_id: str) -> LiveJob | None:
        with self._lock:
            return self._live.get(job_id)

    def current(self, job_id: str) -> tuple[JobRecord, dict | None]:
        """The job with its live progress when it is running here."""
        live = self.live(job_id)
        if live is not None:
            job, progress, _ = live.snapshot()
            return job, progress
        return self.store.get_job(job_id), None

    # -- transitions ---------------------------------------------------------
    def _publish(self, live: LiveJob, job: JobRecord, **extra) -> None:
        # Log before waking watchers: whoever sees the new state can find its log line.
        log_event(event="job_state", job=job.name, state=job.state,
                  model=job.model, attempt=job.attempts, **extra)
        with live.cond:
            live.job = job
            live.changes += 1
            live.cond.notify_all()
        if job.state in TERMINAL:
            with self._lock:
                self._live.pop(job.id, None)

    def submit(self, job: JobRecord, run_spec: FitSpec, *, announce: bool = True) -> None:
        """Queue a stored QUEUED job for running."""
        live = LiveJob(job=job, run_spec=run_spec)
        with self._lock:
            self._live[job.id] = live
        if announce:
            log_event(event="job_state", job=job.name, state=job.state, model=job.model,
                      attempt=job.attempts, source=job.spec.get("source"))
        self._pool.submit(self._run, live)

    def cancel(self, job_id: str) -> tuple[JobRecord, dict | None]:
        """Cancel a queued or running job; see the CancelFitJob contract."""
        job = self.store.get_job(job_id)
        if job.state == "CANCELLED":
            return job, None
        if job.state in TERMINAL:
            raise Conflict(f"name: {job.name} already {job.state.lower()}; only queued or "
                           "running jobs can be cancelled", state=job.state)
        live = self.live(job_id)
        if live is not None:
            live.cancel.set()
        now = time.time()
        err = {"code": "CANCELLED", "reason": "CANCELLED", "field": "", "metadata": {},
               "message": "cancelled by CancelFitJob before it started"}
        done = self.store.update_job(job_id, expect=frozenset({"QUEUED"}), state="CANCELLED",
                                     end_time=now, error=err, cancel_requested=1)
        if done is not None:
            if live is not None:
                self._publish(live, done)
            return done, None
        running = self.store.update_job(job_id, expect=frozenset({"RUNNING"}), cancel_requested=1)
        if running is None:  # it finished meanwhile
            return self.current(job_id)
        if live is not None:
            with live.cond:
                live.job = running
                live.changes += 1
                live.cond.notify_all()
            return running, dict(live.progress)
        return running, None

    # -- the job thread ------------------------------------------------------
    def _run(self, live: LiveJob) -> None:
        if self._stopping.is_set():
            return  # stays QUEUED; the next start runs it
        job_id = live.job.id
        now = time.time()
        job = self.store.update_job(job_id, expect=frozenset({"QUEUED"}), state="RUNNING",
                                    start_time=now, attempts=live.job.attempts + 1,
                                    progress={})
        if job is None:  # cancelled while queued
            with self._lock:
                self._live.pop(job_id, None)
            return
        self._publish(live, job)
        try:
            self._fit(live, job_id)
        except Cancelled:
            now = time.time()
            if live.cancel.is_set():
                err = {"code": "CANCELLED", "reason": "CANCELLED", "field": "", "metadata": {},
                       "message": "cancelled by CancelFitJob while running"}
                job = self.store.update_job(job_id, state="CANCELLED", end_time=now, error=err,
                                            progress=live.progress)
            else:  # server stopping: hand the job to the next start
                job = self.store.update_job(job_id, state="QUEUED", progress={})
            self._publish(live, job)
            if job.state == "QUEUED":
                with self._lock:
                    self._live.pop(job_id, None)
        except Exception as exc:  # noqa: BLE001 - every failure becomes the job's error
            if not isinstance(exc, TrendmillError):
                _log.error("job %s failed with an internal error", job_id, exc_info=exc)
            err = job_error(exc)
            job = self.store.update_job(job_id, state="FAILED", end_time=time.time(), error=err,
                                        progress=live.progress)
            self._publish(live, job, code=err["code"], reason=err["reason"], error=err["message"])

    def _should_stop(self, live: LiveJob) -> bool:
        return live.cancel.is_set() or self._stopping.is_set()

    def _fit(self, live: LiveJob, job_id: str) -> None:
        from ..io.results import write_results
        from ..local import run_fit

        def progress(p) -> None:
            with live.cond:
                live.progress = {
                    "partitions_done": int(p.partitions_done),
                    "partitions_total": int(p.partitions_total),
                    "rows_read": int(p.rows_read), "bytes_read": int(p.bytes_read),
                    "elapsed_s": float(p.elapsed_s)}
                live.changes += 1
                live.cond.notify_all()

        run = run_fit(live.run_spec, workers=self.workers, progress=progress,
                      should_stop=lambda: self._should_stop(live))
        if self._should_stop(live):
            # Asked to stop after the last partition: keep nothing, as promised.
            raise Cancelled("the job was cancelled")
        table = run.table
        if table.num_rows > self.max_groups:
            raise LimitError(f"max_groups: the fit has {table.num_rows} groups, the server "
                             f"keeps at most {self.max_groups}", limit=self.max_groups)
        rel = self.store.result_file(job_id)
        path = self.store.abspath(rel)
        write_results(table, path)
        statuses = table.column("status").to_pylist() if "status" in table.column_names else []
        summary = {"groups": table.num_rows, "groups_ok": sum(s == "ok" for s in statuses),
                   "partitions": int(run.partitions), "rows_read": int(run.rows_read),
                   "bytes_read": int(run.bytes_read), "seconds": float(run.seconds)}
        spec = live.run_spec
        key_columns = [[n, str(table.schema.field(n).type)] for n in spec.by]
        with live.cond:
            live.progress = dict(live.progress, partitions_done=int(run.partitions),
                                 partitions_total=int(run.partitions),
                                 rows_read=int(run.rows_read), bytes_read=int(run.bytes_read),
                                 elapsed_s=float(run.seconds))
        try:
            job = self.store.finish_job(job_id, result_path=rel, summary=summary,
                                        key_columns=key_columns, end_time=time.time(),
                                        progress=live.progress)
        except BaseException:
            try:
                os.remove(path)
            except OSError:
                pass
            raise
        if self.on_result is not None:
            try:
                self.on_result(path, table, spec)
            except Exception:  # noqa: BLE001 - only a cache; the result is stored
                _log.exception("could not cache the result of %s", job_id)
        self._publish(live, job, groups=summary["groups"], groups_ok=summary["groups_ok"],
                      rows=summary["rows_read"], seconds=round(summary["seconds"], 3))

    # -- lifecycle -----------------------------------------------------------
    def shutdown(self, *, grace: float | None = 30.0) -> None:
        """Stop taking jobs; running ones stop at their next partition and go back to QUEUED."""
        self._stopping.set()
        deadline = None if grace is None else time.monotonic() + grace
        self._pool.shutdown(wait=False, cancel_futures=True)
        while True:
            with self._lock:
                running = [lv for lv in self._live.values() if lv.job.state == "RUNNING"]
            if not running or (deadline is not None and time.monotonic() > deadline):
                break
            time.sleep(0.05)
