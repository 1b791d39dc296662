"""The client: typed calls to a trendmill server, with deadlines and retries.

Every unary call has a deadline (``timeout``, seconds, for the whole call
including retries). Calls that fail with UNAVAILABLE (server restarting,
connection refused) are retried with exponential backoff; creating a job is
retried safely because every create carries an idempotency key. Streams
resume where they broke: results from the last page token, watches by
reopening (the first event of a watch is always the job's current state).
"""

from __future__ import annotations

import random
import time
import uuid
from typing import Any, Callable, Iterator, Sequence

import grpc

from ._errors import ServiceError, Unavailable, from_rpc_error
from ._proto import (jobs_pb2, jobs_pb2_grpc, models_pb2, models_pb2_grpc, results_pb2,
                     results_pb2_grpc)
from ._types import (FitJob, FitSpec, GroupFit, Model, ModelVersion, PredictResult,
                     value_to_proto)

__all__ = ["Client"]

_STATES = ("QUEUED", "RUNNING", "SUCCEEDED", "FAILED", "CANCELLED")
_HEALTH = "/grpc.health.v1.Health/Check"
_HEALTH_NAMES = {0: "UNKNOWN", 1: "SERVING", 2: "NOT_SERVING", 3: "SERVICE_UNKNOWN"}


def _job_name(name: str) -> str:
    return name if name.startswith("fitJobs/") else f"fitJobs/{name}"


def _model_name(name: str) -> str:
    return name if name.startswith("models/") else f"models/{name}"


def _result_name(name: str) -> str:
    """A bare id names a model (its latest version)."""
    return name if "/" in name else f"models/{name}"


def _key(key: Any) -> list:
    if key is None:
        return []
    if isinstance(key, (list, tuple)):
        return [value_to_proto(v) for v in key]
    return [value_to_proto(key)]


class Client:
    """A connection to one trendmill server.

    Parameters
    ----------
    target : str
        ``HOST:PORT`` of the server.
    token : str, optional
        Bearer token (sent as ``authorization: Bearer <token>``).
    token_file : str, optional
        File whose first non-comment line is the token.
    tls : bool
        Use TLS (implied by ``tls_ca``); without ``tls_ca`` the system's
        trusted roots are used.
    tls_ca : str or bytes, optional
        PEM certificate(s) to trust: a path, or the PEM bytes.
    timeout : float
        Default deadline of unary calls, in seconds (retries included).
    retries : int
        Further attempts after an UNAVAILABLE failure.
    backoff : float
        First wait between attempts, in seconds; doubled each time (max 5 s).
    max_message_bytes : int
        Largest message sent or received.
    options : sequence of (str, value)
        Extra gRPC channel options.

    Examples
    --------
    >>> with Client("127.0.0.1:7070") as c:                      # doctest: +SKIP
    ...     job = c.fit(FitSpec("fleet", "cabinet_temp_c", ("ts",), by=("freezer_id",)))
    ...     rows = list(c.read_rows(job.result))
    """

    def __init__(self, target: str, *, token: str | None = None, token_file: str | None = None,
                 tls: bool = False, tls_ca: str | bytes | None = None, timeout: float = 30.0,
                 retries: int = 4, backoff: float = 0.2, max_message_bytes: int = 64 << 20,
                 options: Sequence[tuple[str, Any]] = ()) -> None:
        if token is not None and token_file is not None:
            raise ValueError("token and token_file are exclusive")
        if token_file is not None:
            token = _read_token(token_file)
        if retries < 0:
            raise ValueError(f"retries == {retries}, must be >= 0")
        self.target = target
        self.timeout = timeout
        self.retries = retries
        self.backoff = backoff
        self._metadata = (("authorization", f"Bearer {token}"),) if token else ()
        opts = [("grpc.max_send_message_length", max_message_bytes),
                ("grpc.max_receive_message_length", max_message_bytes),
                # Reconnect about as eagerly as the call retries back off, so a
                # restarted server is found within the retries.
                ("grpc.initial_reconnect_backoff_ms", max(int(backoff * 1000), 50)),
                ("grpc.min_reconnect_backoff_ms", max(int(backoff * 1000), 50)),
                ("grpc.max_reconnect_backoff_ms", 5000), *options]
        if tls or tls_ca is not None:
            ca = tls_ca
            if isinstance(ca, str):
                with open(ca, "rb") as f:
                    ca = f.read()
            self._channel = grpc.secure_channel(
                target, grpc.ssl_channel_credentials(root_certificates=ca), options=opts)
        else:
            self._channel = grpc.insecure_channel(target, options=opts)
        self._jobs = jobs_pb2_grpc.FitJobsStub(self._channel)
        self._models = models_pb2_grpc.ModelsStub(self._channel)
        self._results = results_pb2_grpc.ResultsStub(self._channel)
        self._health = self._channel.unary_unary(
            _HEALTH, request_serializer=lambda b: b, response_deserializer=lambda b: b)

    # -- plumbing ----------------------------------------------------------
    def close(self) -> None:
        self._channel.close()

    def __enter__(self) -> "Client":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def _sleep_before_retry(self, attempt: int, deadline: float | None) -> bool:
        """Wait before attempt ``attempt + 1``; False when no time or attempts are left."""
        if attempt >= self.retries:
            return False
        pause = min(self.backoff * 2 ** attempt, 5.0) * (0.5 + random.random() / 2)
        if deadline is not None and time.monotonic() + pause >= deadline:
            return False
        time.sleep(pause)
        return True

    def _retry(self, exc: grpc.RpcError, attempt: int, deadline: float | None) -> bool:
        """Whether to try again: UNAVAILABLE, and time left for another backoff (slept)."""
        return exc.code() == grpc.StatusCode.UNAVAILABLE and \
            self._sleep_before_retry(attempt, deadline)

    def _call(self, method, request, timeout: float | None):
        timeout = self.timeout if timeout is None else timeout
        deadline = time.monotonic() + timeout if timeout is not None else None
        attempt = 0
        while True:
            left = None if deadline is None else max(deadline - time.monotonic(), 0.001)
            try:
                return method(request, timeout=left, metadata=self._metadata)
            except grpc.RpcError as exc:
                if self._retry(exc, attempt, deadline):
                    attempt += 1
                    continue
                raise from_rpc_error(exc) from exc

    # -- health ------------------------------------------------------------
    def health(self, service: str = "", *, timeout: float | None = None) -> str:
        """Serving status from the standard health service: ``SERVING``, ``NOT_SERVING``..."""
        # HealthCheckRequest{service = 1}; HealthCheckResponse{status = 1 (enum)}
        raw = service.encode()
        request = (b"\x0a" + _varint(len(raw)) + raw) if raw else b""
        reply = self._call(self._health, request, timeout)
        status = 0
        if len(reply) >= 2 and reply[0] == 0x08:
            status = reply[1]
        return _HEALTH_NAMES.get(status, "UNKNOWN")

    # -- jobs --------------------------------------------------------------
    def create_fit_job(self, spec: FitSpec, *, model: str | None = None,
                       request_id: str | None = None, timeout: float | None = None) -> FitJob:
        """Submit a fit; returns the job at once (QUEUED). ``model`` saves it as a new version."""
        if model and model.startswith("models/"):
            model = model[len("models/"):]
        # One id for every retry of this call: the server creates the job once.
        request = jobs_pb2.CreateFitJobRequest(spec=spec.to_proto(), model=model or "",
                                               request_id=request_id or uuid.uuid4().hex)
        return FitJob.from_proto(self._call(self._jobs.CreateFitJob, request, timeout))

    def get_fit_job(self, name: str, *, timeout: float | None = None) -> FitJob:
        return FitJob.from_proto(self._call(
            self._jobs.GetFitJob, jobs_pb2.GetFitJobRequest(name=_job_name(name)), timeout))

    def list_fit_jobs(self, *, state: str | None = None, model: str | None = None,
                      page_size: int = 0, timeout: float | None = None) -> Iterator[FitJob]:
        """All matching jobs, newest first (pages are fetched as the iterator goes)."""
        if state is not None and state.upper() not in _STATES:
            raise ValueError(f"state {state!r} is not one of {', '.join(_STATES)}")
        request = jobs_pb2.ListFitJobsRequest(
            page_size=page_size, model=model or "",
            state=jobs_pb2.FitJob.State.Value(state.upper()) if state else 0)
        while True:
            reply = self._call(self._jobs.ListFitJobs, request, timeout)
            for job in reply.fit_jobs:
                yield FitJob.from_proto(job)
            if not reply.next_page_token:
                return
            request.page_token = reply.next_page_token

    def cancel_fit_job(self, name: str, *, timeout: float | None = None) -> FitJob:
        return FitJob.from_proto(self._call(
            self._jobs.CancelFitJob, jobs_pb2.CancelFitJobRequest(name=_job_name(name)), timeout))

    def watch_fit_job(self, name: str, *, timeout: float | None = None) -> Iterator[FitJob]:
        """The job now, then after each change, until it is done.

        ``timeout`` bounds the whole watch (None: no deadline). A broken
        stream is reopened (UNAVAILABLE, with the usual retries).
        """
        request = jobs_pb2.WatchFitJobRequest(name=_job_name(name))
        deadline = None if timeout is None else time.monotonic() + timeout
        stream = self._stream(
            lambda left: self._jobs.WatchFitJob(request, timeout=left, metadata=self._metadata),
            deadline)
        for event in stream:
            job = FitJob.from_proto(event.job)
            yield job
            if job.done:
                return

    def _stream(self, open_call: Callable, deadline: float | None) -> Iterator:
        """Messages of a server stream, reopened on UNAVAILABLE (with the usual retries).

        ``open_call(timeout)`` starts the call anew, from wherever the consumer got
        to; when the consumer stops early the call is cancelled, which frees the
        server's stream.
        """
        attempt = 0
        while True:
            left = None if deadline is None else max(deadline - time.monotonic(), 0.001)
            call = open_call(left)
            try:
                for message in call:
                    attempt = 0
                    yield message
                return
            except grpc.RpcError as exc:
                if self._retry(exc, attempt, deadline):
                    attempt += 1
                    continue
                raise from_rpc_error(exc) from exc
            finally:
                call.cancel()

    def wait(self, name: str, *, timeout: float | None = None,
             on_progress: Callable[[FitJob], None] | None = None) -> FitJob:
        """Block until the job is done; returns it (check ``state``).

        Raises
        ------
        DeadlineExceeded
            ``timeout`` seconds passed first (the job keeps running).
        """
        last = None
        for job in self.watch_fit_job(name, timeout=timeout):
            last = job
            if on_progress is not None:
                on_progress(job)
        if last is None or not last.done:
            raise Unavailable(f"watch of {name} ended before the job was done")
        return last

    def fit(self, spec: FitSpec, *, model: str | None = None, timeout: float | None = None,
            on_progress: Callable[[FitJob], None] | None = None) -> FitJob:
        """Create a job and wait for it; returns the finished job."""
        job = self.create_fit_job(spec, model=model)
        return self.wait(job.name, timeout=timeout, on_progress=on_progress)

    # -- models ------------------------------------------------------------
    def get_model(self, name: str, *, timeout: float | None = None) -> Model:
        return Model.from_proto(self._call(
            self._models.GetModel, models_pb2.GetModelRequest(name=_model_name(name)), timeout))

    def list_models(self, *, page_size: int = 0, timeout: float | None = None) -> Iterator[Model]:
        request = models_pb2.ListModelsRequest(page_size=page_size)
        while True:
            reply = self._call(self._models.ListModels, request, timeout)
            yield from (Model.from_proto(m) for m in reply.models)
            if not reply.next_page_token:
                return
            request.page_token = reply.next_page_token

    def get_model_version(self, name: str, *, timeout: float | None = None) -> ModelVersion:
        """``name``: ``models/{model}/versions/{n}`` (or ``.../versions/latest``)."""
        return ModelVersion.from_proto(self._call(
            self._models.GetModelVersion, models_pb2.GetModelVersionRequest(name=name), timeout))

    def list_model_versions(self, model: str, *, page_size: int = 0,
                            timeout: float | None = None) -> Iterator[ModelVersion]:
        """Versions of a model, newest first."""
        request = models_pb2.ListModelVersionsRequest(parent=_model_name(model),
                                                      page_size=page_size)
        while True:
            reply = self._call(self._models.ListModelVersions, request, timeout)
            yield from (ModelVersion.from_proto(v) for v in reply.model_versions)
            if not reply.next_page_token:
                return
            request.page_token = reply.next_page_token

    # -- results -----------------------------------------------------------
    def read_pages(self, parent: str, *, format: str = "arrow", page_size: int = 0,
                   page_token: str = "", max_pages: int = 0,
                   timeout: float | None = None) -> Iterator[results_pb2.ResultPage]:
        """Raw result pages (``format``: ``arrow`` or ``rows``), resumed after a broken stream."""
        fmt = {"arrow": results_pb2.RESULT_FORMAT_ARROW_IPC,
               "rows": results_pb2.RESULT_FORMAT_ROWS}.get(format)
        if fmt is None:
            raise ValueError(f"format {format!r} is not 'arrow' or 'rows'")
        deadline = None if timeout is None else time.monotonic() + timeout
        token, pages = page_token, 0

        def open_call(left):    # resumes at the page after the last one received
            request = results_pb2.ReadResultsRequest(
                parent=_result_name(parent), page_size=page_size, page_token=token, format=fmt,
                max_pages=max(max_pages - pages, 0) if max_pages else 0)
            return self._results.ReadResults(request, timeout=left, metadata=self._metadata)

        for page in self._stream(open_call, deadline):
            yield page
            pages += 1
            token = page.next_page_token
            if not token:
                return

    def read_results(self, parent: str, *, page_size: int = 0,
                     timeout: float | None = None) -> Iterator[GroupFit]:
        """Every group of a result, typed.

        ``parent``: ``models/{model}``, ``models/{model}/versions/{n}`` or
        ``fitJobs/{job}``.
        """
        for page in self.read_pages(parent, format="rows", page_size=page_size, timeout=timeout):
            yield from (GroupFit.from_proto(r) for r in page.rows)

    def read_rows(self, parent: str, *, page_size: int = 0,
                  timeout: float | None = None) -> Iterator[dict]:
        """Every group as a plain dict keyed by the result file's column names."""
        for fit in self.read_results(parent, page_size=page_size, timeout=timeout):
            yield fit.as_row()

    def read_table(self, parent: str, *, page_size: int = 0, timeout: float | None = None):
        """The whole result as a ``pyarrow.Table`` (every column, Arrow types kept).

        Needs pyarrow (not a dependency of this client).
        """
        try:
            import pyarrow as pa
        except ImportError:
            raise ImportError("read_table needs pyarrow; use read_rows without it") from None
        batches, schema = [], None
        for page in self.read_pages(parent, format="arrow", page_size=page_size,
                                    timeout=timeout):
            with pa.ipc.open_stream(page.arrow_ipc) as reader:
                schema = schema or reader.schema
                batches.extend(reader)
        if schema is None:
            raise ServiceError(f"no result pages for {parent}")
        return pa.Table.from_batches(batches, schema=schema)

    def read_dataframe(self, parent: str, *, page_size: int = 0, timeout: float | None = None):
        """The whole result as a ``pandas.DataFrame`` (needs pyarrow and pandas)."""
        return self.read_table(parent, page_size=page_size, timeout=timeout).to_pandas()

    def lookup_group(self, parent: str, key: Any = None, *,
                     timeout: float | None = None) -> GroupFit:
        """The fit of one group; ``key`` is its key value, or a tuple of them in ``by`` order."""
        return GroupFit.from_proto(self._call(
            self._results.LookupGroup,
            results_pb2.LookupGroupRequest(parent=_result_name(parent), key=_key(key)), timeout))

    def predict(self, parent: str, key: Any, points: Sequence[Sequence[float]] | Sequence[float],
                *, confidence: float | None = None,
                timeout: float | None = None) -> PredictResult:
        """Predicted mean of y at ``points`` (x values in ``spec.x`` order) for one group,

        with a confidence interval of the mean and a prediction interval.
        A flat list of numbers is one point per number (one-feature fits).
        """
        pts = [list(p) if isinstance(p, (list, tuple)) else [p] for p in points]
        request = results_pb2.PredictRequest(
            parent=_result_name(parent), key=_key(key),
            points=[results_pb2.PredictPoint(x=[float(v) for v in p]) for p in pts])
        if confidence is not None:
            request.confidence = confidence
        return PredictResult.from_proto(self._call(self._results.Predict, request, timeout), pts)


def _varint(n: int) -> bytes:
    out = bytearray()
    while True:
        b = n & 0x7F
        n >>= 7
        if n:
            out.append(b | 0x80)
        else:
            out.append(b)
            return bytes(out)


def _read_token(path: str) -> str:
    with open(path, encoding="utf-8") as f:
        for line in f:
            line = line.strip()
            if line and not line.startswith("#"):
                return line
    raise ValueError(f"token file {path!r} lists no token")
