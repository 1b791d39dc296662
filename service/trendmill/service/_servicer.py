"""The gRPC servicers: short methods over the store, the job runner and the result cache.

Each method validates its request, calls one piece of the service and
converts the answer (``_convert``). Errors are raised as trendmill exceptions
and turned into statuses in one place (``_errors``).
"""

from __future__ import annotations

import base64
import dataclasses
import functools
import hashlib
import json
import re
import threading
import time

from google.protobuf import timestamp_pb2

from trendmill_client._proto import (jobs_pb2, jobs_pb2_grpc, models_pb2, models_pb2_grpc,
                                     results_pb2, results_pb2_grpc)

from ..engine.errors import Conflict, LimitError, SpecError
from ..engine.spec import FitSpec
from . import _convert as C
from ._errors import abort
from ._jobs import JobRunner
from ._results import ResultCache
from ._roots import DataRoots
from ._state import StateStore, check_model_id, check_model_shape

__all__ = ["FitJobsServicer", "ModelsServicer", "ResultsServicer", "Limits"]

_DEFAULT_PAGE, _MAX_PAGE = 50, 1000
_DEFAULT_RESULT_PAGE = 8192
_MAX_POINTS = 10_000
#: least time between two watch events of one job (the last one is never held back)
_WATCH_INTERVAL_S = 0.2
_JOB_NAME = re.compile(r"fitJobs/([a-z0-9]{1,64})\Z")
_VERSION_NAME = re.compile(r"models/([^/]+)/versions/([^/]+)\Z")


@dataclasses.dataclass(frozen=True, slots=True)
class Limits:
    """Request limits of one server (each hit is RESOURCE_EXHAUSTED naming the limit)."""

    max_features: int = 64
    max_queued_jobs: int = 64
    max_watches: int = 16
    max_message_bytes: int = 16 << 20


def _unary(fn):
    @functools.wraps(fn)
    def wrapper(self, request, context):
        try:
            return fn(self, request, context)
        except Exception as exc:  # noqa: BLE001 - mapped to a status in one place
            abort(context, exc)
    return wrapper


def _stream(fn):
    @functools.wraps(fn)
    def wrapper(self, request, context):
        try:
            yield from fn(self, request, context)
        except Exception as exc:  # noqa: BLE001
            abort(context, exc)
    return wrapper


# -- names and pages ------------------------------------------------------------
def _job_id(name: str, field: str = "name") -> str:
    m = _JOB_NAME.match(name)
    if not m:
        raise SpecError(field, f"{name!r} is not a job name (fitJobs/{{id}})")
    return m.group(1)


def _model_id(name: str, field: str = "name") -> str:
    if not name.startswith("models/"):
        raise SpecError(field, f"{name!r} is not a model name (models/{{model}})")
    try:
        return check_model_id(name)
    except SpecError:
        raise SpecError(field, f"{name!r} is not a model name (models/{{model}})") from None


def _page_size(value: int, *, default: int, maximum: int, field: str = "page_size") -> int:
    if value < 0:
        raise SpecError(field, f"{value} is negative; use 0 for the default ({default})")
    return default if value == 0 else min(value, maximum)


def _fingerprint(**query) -> str:
    return hashlib.sha256(json.dumps(query, sort_keys=True).encode()).hexdigest()[:12]


def _encode_token(query: str, position) -> str:
    raw = json.dumps({"q": query, "p": position}, separators=(",", ":")).encode()
    return base64.urlsafe_b64encode(raw).decode().rstrip("=")


def _decode_token(token: str, query: str):
    """Position stored in a page token; the token must come from the same query."""
    if not token:
        return None
    try:
        raw = base64.urlsafe_b64decode(token + "=" * (-len(token) % 4))
        d = json.loads(raw)
        q, p = d["q"], d["p"]
    except (ValueError, KeyError, TypeError):
        raise SpecError("page_token", "not a token this server issued") from None
    if q != query:
        raise SpecError("page_token", "the token belongs to a request with other parameters")
    return p


class FitJobsServicer(jobs_pb2_grpc.FitJobsServicer):
    def __init__(self, store: StateStore, runner: JobRunner, roots: DataRoots,
                 limits: Limits) -> None:
        self.store, self.runner, self.roots, self.limits = store, runner, roots, limits
        self._watches = threading.BoundedSemaphore(limits.max_watches)

    def _job_proto(self, job_id: str) -> jobs_pb2.FitJob:
        job, progress = self.runner.current(job_id)
        return C.job_to_proto(job, progress=progress)

    @_unary
    def CreateFitJob(self, request, context):
        from ..local import check_fit

        if not request.HasField("spec"):
            raise SpecError("spec", "required")
        spec = C.spec_from_proto(request.spec)
        if len(spec.x) > self.limits.max_features:
            raise LimitError(f"x: {len(spec.x)} features, this server allows at most "
                             f"{self.limits.max_features}", field="x",
                             limit=self.limits.max_features)
        if len(request.request_id) > 64:
            raise SpecError("request_id", f"{len(request.request_id)} characters, at most 64")
        model = check_model_id(request.model) if request.model else None
        run_spec = dataclasses.replace(spec, source=self.roots.resolve(spec.source))
        check_fit(run_spec)
        if model:
            existing = self.store.find_model(model)
            if existing is not None:
                check_model_shape(existing, spec.to_dict())
        job, created = self.store.create_job(
            spec=spec.to_dict(), source_path=run_spec.source, model=model,
            request_id=request.request_id or None, max_queued=self.limits.max_queued_jobs)
        if created:
            self.runner.submit(job, run_spec)
        return self._job_proto(job.id)

    @_unary
    def GetFitJob(self, request, context):
        return self._job_proto(_job_id(request.name))

    @_unary
    def ListFitJobs(self, request, context):
        size = _page_size(request.page_size, default=_DEFAULT_PAGE, maximum=_MAX_PAGE)
        state = None
        if request.state:
            if request.state not in C.STATES.values():
                raise SpecError("state", f"enum value {request.state} is not a job state")
            state = jobs_pb2.FitJob.State.Name(request.state)
        model = check_model_id(request.model) if request.model else None
        query = _fingerprint(kind="jobs", state=state, model=model)
        before = _decode_token(request.page_token, query)
        jobs = self.store.list_jobs(state=state, model=model, before_seq=before, limit=size + 1)
        more = len(jobs) > size
        jobs = jobs[:size]
        out = []
        for j in jobs:
            live = self.runner.live(j.id)
            if live is not None:
                job, progress, _ = live.snapshot()
                out.append(C.job_to_proto(job, progress=progress))
            else:
                out.append(C.job_to_proto(j))
        return jobs_pb2.ListFitJobsResponse(
            fit_jobs=out, next_page_token=_encode_token(query, jobs[-1].seq) if more else "")

    @_unary
    def CancelFitJob(self, request, context):
        job, progress = self.runner.cancel(_job_id(request.name))
        return C.job_to_proto(job, progress=progress)

    @_stream
    def WatchFitJob(self, request, context):
        job_id = _job_id(request.name)
        self.store.get_job(job_id)  # NOT_FOUND before taking a watch slot
        if not self._watches.acquire(blocking=False):
            raise LimitError(f"max_watches: {self.limits.max_watches} watches are open on this "
                             "server; poll GetFitJob or retry later", limit=self.limits.max_watches)
        try:
            yield from self._watch(job_id, context)
        finally:
            self._watches.release()

    def _watch(self, job_id: str, context):
        seen, sent_at = -1, 0.0
        while context.is_active():
            live = self.runner.live(job_id)
            if live is None:
                # Not running here (done, or never started): the stored job is final.
                job = self.store.get_job(job_id)
                yield _event(C.job_to_proto(job))
                if job.done:
                    return
                # QUEUED but not live happens only while the server stops.
                time.sleep(_WATCH_INTERVAL_S)
                continue
            with live.cond:
                # Coalesce progress into at most one event per interval, but
                # send a terminal state the moment it is published.
                while context.is_active() and not live.job.done:
                    if live.changes != seen:
                        left = sent_at + _WATCH_INTERVAL_S - time.monotonic()
                        if left <= 0:
                            break
                        live.cond.wait(timeout=left)
                    else:
                        live.cond.wait(timeout=1.0)
                job, progress, seen = live.job, dict(live.progress), live.changes
            sent_at = time.monotonic()
            yield _event(C.job_to_proto(job, progress=progress))
            if job.done:
                return


def _event(job: jobs_pb2.FitJob) -> jobs_pb2.FitJobEvent:
    ts = timestamp_pb2.Timestamp()
    ts.GetCurrentTime()
    return jobs_pb2.FitJobEvent(job=job, event_time=ts)


class ModelsServicer(models_pb2_grpc.ModelsServicer):
    def __init__(self, store: StateStore) -> None:
        self.store = store

    @_unary
    def GetModel(self, request, context):
        return C.model_to_proto(self.store.get_model(_model_id(request.name)))

    @_unary
    def ListModels(self, request, context):
        size = _page_size(request.page_size, default=_DEFAULT_PAGE, maximum=_MAX_PAGE)
        query = _fingerprint(kind="models")
        after = _decode_token(request.page_token, query)
        models = self.store.list_models(after=after, limit=size + 1)
        more = len(models) > size
        models = models[:size]
        return models_pb2.ListModelsResponse(
            models=[C.model_to_proto(m) for m in models],
            next_page_token=_encode_token(query, models[-1].id) if more else "")

    @_unary
    def GetModelVersion(self, request, context):
        model, version = _parse_version(request.name, "name")
        return C.version_to_proto(self.store.get_version(model, version))

    @_unary
    def ListModelVersions(self, request, context):
        model = _model_id(request.parent, "parent")
        size = _page_size(request.page_size, default=_DEFAULT_PAGE, maximum=_MAX_PAGE)
        query = _fingerprint(kind="versions", model=model)
        before = _decode_token(request.page_token, query)
        versions = self.store.list_versions(model, before=before, limit=size + 1)
        more = len(versions) > size
        versions = versions[:size]
        return models_pb2.ListModelVersionsResponse(
            model_versions=[C.version_to_proto(v) for v in versions],
            next_page_token=_encode_token(query, versions[-1].version) if more else "")


def _parse_version(name: str, field: str) -> tuple[str, int | None]:
    m = _VERSION_NAME.match(name)
    if not m:
        raise SpecError(field, f"{name!r} is not a version name (models/{{model}}/versions/{{n}})")
    model = _model_id(f"models/{m.group(1)}", field)
    v = m.group(2)
    if v == "latest":
        return model, None
    if not v.isdigit() or int(v) < 1:
        raise SpecError(field, f"version {v!r} is not a positive number or 'latest'")
    return model, int(v)


class ResultsServicer(results_pb2_grpc.ResultsServicer):
    def __init__(self, store: StateStore, cache: ResultCache, limits: Limits) -> None:
        self.store, self.cache, self.limits = store, cache, limits

    def _load(self, parent: str):
        """(loaded result, its spec, resolved name) of a request's ``parent``."""
        if not parent:
            raise SpecError("parent", "required (models/{model}[/versions/{n}] or fitJobs/{id})")
        if parent.startswith("fitJobs/"):
            job = self.store.get_job(_job_id(parent, "parent"))
            if job.state != "SUCCEEDED":
                raise Conflict(f"parent: {job.name} is {job.state}; it has results once it "
                               "has succeeded", state=job.state)
            path, spec, resolved = job.result_path, FitSpec.from_dict(job.spec), job.name
        elif "/versions/" in parent:
            v = self.store.get_version(*_parse_version(parent, "parent"))
            path, spec, resolved = v.result_path, FitSpec.from_dict(v.spec), v.name
        else:
            v = self.store.get_version(_model_id(parent, "parent"), None)
            path, spec, resolved = v.result_path, FitSpec.from_dict(v.spec), v.name
        loaded = self.cache.get(self.store.abspath(path), key_names=spec.by, terms=spec.terms)
        return loaded, spec, resolved

    @_stream
    def ReadResults(self, request, context):
        loaded, spec, resolved = self._load(request.parent)
        size = _page_size(request.page_size, default=_DEFAULT_RESULT_PAGE, maximum=1 << 20)
        if request.max_pages < 0:
            raise SpecError("max_pages", f"{request.max_pages} is negative; 0 reads to the end")
        fmt = request.format or results_pb2.RESULT_FORMAT_ARROW_IPC
        if fmt not in (results_pb2.RESULT_FORMAT_ARROW_IPC, results_pb2.RESULT_FORMAT_ROWS):
            raise SpecError("format", f"enum value {fmt} is not a known format")
        # Typed rows take about twice the Arrow bytes; keep each message within
        # half the limit so the page, framing and key texts always fit.
        per_row = loaded.row_bytes * (2 if fmt == results_pb2.RESULT_FORMAT_ROWS else 1)
        size = max(1, min(size, self.limits.max_message_bytes // 2 // per_row))
        query = _fingerprint(kind="results", result=resolved, format=fmt)
        offset = _decode_token(request.page_token, query) or 0
        if not isinstance(offset, int) or not 0 <= offset <= loaded.num_rows:
            raise SpecError("page_token", "not a token this server issued")
        total = loaded.num_rows
        pages = 0
        while True:
            count = min(size, total - offset)
            page = results_pb2.ResultPage(row_offset=offset, row_count=count, total_rows=total,
                                          result=resolved)
            if fmt == results_pb2.RESULT_FORMAT_ARROW_IPC:
                page.arrow_ipc = loaded.page_ipc(offset, count)
            else:
                page.rows.extend(C.group_fit_to_proto(key, row, spec.terms)
                                 for key, row in loaded.page_rows(offset, count))
            offset += count
            page.next_page_token = _encode_token(query, offset) if offset < total else ""
            yield page
            pages += 1
            if offset >= total or (request.max_pages and pages >= request.max_pages):
                return
            if not context.is_active():
                return

    def _group(self, request):
        loaded, spec, resolved = self._load(request.parent)
        key = C.key_from_proto(request.key, loaded.key_types)
        i = loaded.index_of(key)
        return loaded, spec, resolved, i

    @_unary
    def LookupGroup(self, request, context):
        loaded, spec, _, i = self._group(request)
        return C.group_fit_to_proto(loaded.key_of(i), loaded.row(i), spec.terms)

    @_unary
    def Predict(self, request, context):
        from ..engine.predict import predict

        if not request.points:
            raise SpecError("points", "at least one point is required")
        if len(request.points) > _MAX_POINTS:
            raise LimitError(f"points: {len(request.points)} points, at most {_MAX_POINTS} "
                             "per call", field="points", limit=_MAX_POINTS)
        loaded, spec, resolved, i = self._group(request)
        row = loaded.row(i)
        key = loaded.key_of(i)
        if row["status"] != "ok":
            shown = ", ".join(f"{n}={v!r}" for n, v in key) or "the group"
            raise Conflict(f"key: {shown} has status {row['status']!r}; only groups with "
                           "status 'ok' can predict", field="key", status=row["status"])
        p = len(spec.x)
        for j, pt in enumerate(request.points):
            if len(pt.x) != p:
                raise SpecError(f"points[{j}].x", f"{len(pt.x)} value(s), the fit has {p} "
                                                  f"feature(s) ({', '.join(spec.x)})")
        confidence = request.confidence if request.HasField("confidence") else spec.confidence
        pred = predict(
            [list(pt.x) for pt in request.points],
            estimates=[row[f"{t}_estimate"] for t in spec.terms],
            covariance=row["covariance"], residual_std_error=row["residual_std_error"],
            df_residual=int(row["df_residual"]), confidence=confidence,
            intercept=spec.intercept,
            feature_means=([row[f"{x}_mean"] for x in spec.x]
                           if all(f"{x}_mean" in row for x in spec.x) else None),
            weight_sum=row.get("weight_sum"))
        return results_pb2.PredictResponse(
            predictions=[results_pb2.Prediction(
                mean=pred.mean[j], mean_std_error=pred.mean_std_error[j],
                mean_ci_low=pred.mean_ci_low[j], mean_ci_high=pred.mean_ci_high[j],
                prediction_std_error=pred.prediction_std_error[j],
                prediction_low=pred.prediction_low[j], prediction_high=pred.prediction_high[j])
                for j in range(len(request.points))],
            confidence=confidence, df_residual=int(row["df_residual"]), result=resolved,
            key=[results_pb2.KeyValue(column=n, value=C.value_to_proto(v)) for n, v in key])
