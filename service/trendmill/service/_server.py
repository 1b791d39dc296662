"""Assembling and running the coordinator: gRPC server, state, jobs, health, reflection."""

from __future__ import annotations

import ipaddress
import logging
import os
import signal
import sys
import threading
import time
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, replace

import grpc
from grpc_health.v1 import health, health_pb2, health_pb2_grpc
from grpc_reflection.v1alpha import reflection

from trendmill_client._proto import (jobs_pb2, jobs_pb2_grpc, models_pb2, models_pb2_grpc,
                                     results_pb2, results_pb2_grpc)

from ..engine.errors import SpecError, TrendmillError
from ..engine.spec import MAX_FEATURES, FitSpec
from ._errors import job_error
from ._auth import TokenAuth, load_tokens
from ._jobs import JobRunner, log_event
from ._results import ResultCache
from ._roots import DataRoots
from ._servicer import FitJobsServicer, Limits, ModelsServicer, ResultsServicer
from ._state import StateStore

__all__ = ["ServerConfig", "Server", "create_server", "serve", "SERVICE_NAMES"]

SERVICE_NAMES = tuple(
    mod.DESCRIPTOR.services_by_name[name].full_name
    for mod, name in ((jobs_pb2, "FitJobs"), (models_pb2, "Models"), (results_pb2, "Results")))


def _positive(name: str, value, *, allow_none: bool = False) -> None:
    if value is None and allow_none:
        return
    if isinstance(value, bool) or not isinstance(value, int) or value < 1:
        raise SpecError(name, f"{value!r} must be a positive integer")


@dataclass(frozen=True, slots=True)
class ServerConfig:
    """Everything ``trendmill serve`` can be told.

    Parameters
    ----------
    state_dir : str
        Directory of the state store (created if missing).
    listen : str
        ``HOST:PORT``; port 0 picks a free one (see ``Server.port``).
    data_roots : tuple of str
        Directories sources must lie in; empty = the current directory.
    token_file : str or None
        Bearer tokens, one per line; None = no authentication.
    tls_cert, tls_key : str or None
        PEM certificate chain and private key; both or neither.
    workers : int or None
        Worker processes per fit (None: the executor's default).
    max_running_jobs, max_queued_jobs : int
        Jobs running at once; jobs waiting before CreateFitJob is refused.
    max_features, max_groups : int
        Largest ``x`` list accepted; largest result kept.
    max_message_bytes : int
        Largest gRPC message either way (result pages are sized to fit).
    rpc_threads : int
        Threads serving RPCs; calls beyond them are RESOURCE_EXHAUSTED.
    max_watches : int
        Open WatchFitJob streams (each holds an RPC thread); at most half
        the RPC threads by default.
    max_cached_results : int
        Result tables kept in memory for lookups and pages.
    max_attempts : int
        Starts of one job before a restart stops retrying it.
    """

    state_dir: str
    listen: str = "127.0.0.1:0"
    data_roots: tuple[str, ...] = ()
    token_file: str | None = None
    tls_cert: str | None = None
    tls_key: str | None = None
    workers: int | None = None
    max_running_jobs: int = 2
    max_queued_jobs: int = 64
    max_features: int = MAX_FEATURES
    max_groups: int = 50_000_000
    max_message_bytes: int = 16 << 20
    rpc_threads: int = 32
    max_watches: int | None = None
    max_cached_results: int = 8
    max_attempts: int = 3

    def __post_init__(self) -> None:
        object.__setattr__(self, "data_roots", tuple(self.data_roots))
        if not self.state_dir:
            raise SpecError("state", "a state directory is required")
        host, sep, port = self.listen.rpartition(":")
        if not sep or not host or not port.isdigit() or int(port) > 65535:
            raise SpecError("listen", f"{self.listen!r} is not HOST:PORT")
        if (self.tls_cert is None) != (self.tls_key is None):
            raise SpecError("tls_key" if self.tls_key is None else "tls_cert",
                            "--tls-cert and --tls-key go together")
        _positive("workers", self.workers, allow_none=True)
        for name in ("max_running_jobs", "max_queued_jobs", "max_features", "max_groups",
                     "rpc_threads", "max_cached_results", "max_attempts"):
            _positive(name, getattr(self, name))
        _positive("max_watches", self.max_watches, allow_none=True)
        if self.max_message_bytes < 1 << 16:
            raise SpecError("max_message_bytes", f"{self.max_message_bytes} is below 65536")
        if self.max_features > MAX_FEATURES:
            raise SpecError("max_features", f"{self.max_features} is above the engine's "
                                            f"limit of {MAX_FEATURES}")


def _is_loopback(host: str) -> bool:
    host = host.strip("[]")
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


class Server:
    """A running coordinator. Use :func:`create_server`; stop with :meth:`stop`."""

    def __init__(self, config: ServerConfig) -> None:
        self.config = config
        roots = config.data_roots or (os.getcwd(),)
        self.roots = DataRoots(roots)
        tokens = load_tokens(config.token_file) if config.token_file else None
        credentials = None
        if config.tls_cert:
            credentials = grpc.ssl_server_credentials([(_read(config.tls_key, "tls_key"),
                                                        _read(config.tls_cert, "tls_cert"))])
        self.store = StateStore(config.state_dir)
        self.cache = ResultCache(max_results=config.max_cached_results)
        self.runner = JobRunner(
            self.store, max_running=config.max_running_jobs, workers=config.workers,
            max_groups=config.max_groups,
            on_result=lambda path, table, spec: self.cache.put(
                path, table, key_names=spec.by, terms=spec.terms))
        watches = config.max_watches or max(1, config.rpc_threads // 2)
        limits = Limits(max_features=config.max_features, max_queued_jobs=config.max_queued_jobs,
                        max_watches=watches, max_message_bytes=config.max_message_bytes)
        options = [
            ("grpc.max_send_message_length", config.max_message_bytes),
            ("grpc.max_receive_message_length", config.max_message_bytes),
            ("grpc.so_reuseport", 0),
        ]
        self.grpc_server = grpc.server(
            ThreadPoolExecutor(max_workers=config.rpc_threads, thread_name_prefix="trendmill-rpc"),
            interceptors=[TokenAuth(tokens)] if tokens else [],
            options=options,
            maximum_concurrent_rpcs=config.rpc_threads,
        )
        jobs_pb2_grpc.add_FitJobsServicer_to_server(
            FitJobsServicer(self.store, self.runner, self.roots, limits), self.grpc_server)
        models_pb2_grpc.add_ModelsServicer_to_server(ModelsServicer(self.store), self.grpc_server)
        results_pb2_grpc.add_ResultsServicer_to_server(
            ResultsServicer(self.store, self.cache, limits), self.grpc_server)
        self.health = health.HealthServicer(experimental_non_blocking=True)
        health_pb2_grpc.add_HealthServicer_to_server(self.health, self.grpc_server)
        reflection.enable_server_reflection(
            (*SERVICE_NAMES, health.SERVICE_NAME, reflection.SERVICE_NAME), self.grpc_server)
        host = config.listen.rpartition(":")[0]
        try:
            if credentials is not None:
                self.port = self.grpc_server.add_secure_port(config.listen, credentials)
            else:
                self.port = self.grpc_server.add_insecure_port(config.listen)
        except RuntimeError:
            self.port = 0
        if self.port == 0:
            self.store.close()
            raise SpecError("listen", f"cannot listen on {config.listen!r} (address in use "
                                      "or not local)")
        self.address = f"{host}:{self.port}"
        if tokens and credentials is None and not _is_loopback(host):
            log_event(event="warning", message="bearer tokens travel in clear text without "
                                               f"--tls-cert on {config.listen}")
        self._stopped = threading.Event()

    def start(self) -> "Server":
        requeued, failed = self.store.recover(max_attempts=self.config.max_attempts)
        for job in failed:
            log_event(event="job_state", job=job.name, state=job.state, model=job.model,
                      attempt=job.attempts, reason="INTERRUPTED")
        self.grpc_server.start()
        for job in requeued:
            spec = FitSpec.from_dict(job.spec)
            try:
                # Resolve again: the data roots may have changed since the job was accepted.
                spec = replace(spec, source=self.roots.resolve(spec.source))
            except TrendmillError as exc:
                err = job_error(exc)
                self.store.update_job(job.id, state="FAILED", end_time=time.time(), error=err)
                log_event(event="job_state", job=job.name, state="FAILED", model=job.model,
                          attempt=job.attempts, code=err["code"], error=err["message"])
                continue
            log_event(event="job_state", job=job.name, state="QUEUED", model=job.model,
                      attempt=job.attempts, reason="RESUMED")
            self.runner.submit(job, spec, announce=False)
        for name in ("", *SERVICE_NAMES):
            self.health.set(name, health_pb2.HealthCheckResponse.SERVING)
        log_event(event="serving", address=self.address, state_dir=self.store.directory,
                  data_roots=list(self.roots.roots), tls=self.config.tls_cert is not None,
                  auth=self.config.token_file is not None, resumed_jobs=len(requeued))
        return self

    def stop(self, grace: float | None = 10.0) -> None:
        """Stop serving; running jobs go back to QUEUED and resume at the next start."""
        if self._stopped.is_set():
            return
        self._stopped.set()
        self.health.enter_graceful_shutdown()
        self.runner.shutdown(grace=grace)
        self.grpc_server.stop(grace).wait()
        self.store.close()
        log_event(event="stopped", address=self.address)

    def wait(self) -> None:
        self.grpc_server.wait_for_termination()

    def __enter__(self) -> "Server":
        return self

    def __exit__(self, *exc) -> None:
        self.stop()


def _read(path: str, field: str) -> bytes:
    try:
        with open(path, "rb") as f:
            return f.read()
    except OSError as exc:
        raise SpecError(field, f"cannot read {path!r}: {exc.strerror}") from None


def create_server(config: ServerConfig) -> tuple[Server, int]:
    """Build and start a server; returns it with the port it listens on."""
    server = Server(config).start()
    return server, server.port


def configure_logging() -> None:
    """Log lines (already JSON) go to stderr as they are."""
    logger = logging.getLogger("trendmill.service")
    if not any(getattr(h, "_trendmill", False) for h in logger.handlers):
        handler = logging.StreamHandler(sys.stderr)
        handler.setFormatter(logging.Formatter("%(message)s"))
        handler._trendmill = True
        logger.addHandler(handler)
    logger.setLevel(logging.INFO)


def serve(config: ServerConfig) -> int:
    """Run a server until SIGINT or SIGTERM; returns the exit status."""
    configure_logging()
    server, _ = create_server(config)
    stop = threading.Event()

    def on_signal(signum, frame):
        stop.set()

    old = {s: signal.signal(s, on_signal) for s in (signal.SIGINT, signal.SIGTERM)}
    try:
        while not stop.wait(0.5):
            pass
    finally:
        for s, h in old.items():
            signal.signal(s, h)
        server.stop()
    return 0
