"""Service benchmark: remote fit vs local fit, and group lookups, measured in one run.

What is measured (all on this machine, side by side):

- **remote / local fit**: ``trendmill fit --output`` done locally (``run_fit`` +
  ``write_results``) against the same fit through a ``trendmill serve``
  subprocess on loopback (create job, follow the watch stream, stream the
  result back as Arrow pages, write the same file). Each side runs once to
  warm up (worker processes, JIT, page cache), then ``repeats`` times
  alternately; the best time of each side is kept. Target: ratio <= 1.1.
  ``service_overhead_s`` (remote wall time minus the server's own fit time,
  median) is the part the service adds, robust to load from other processes.
- **lookup latency**: ``LookupGroup`` of random groups of a model with many
  groups (1M in the full run), one client, one call at a time: p50 and p99,
  with the health check's round trip measured beside it as the floor of any
  call. Target: p99 <= 5 ms on loopback.
- **lookups/s with concurrent clients**: ``clients`` threads, each with its
  own channel, looking up random groups for a fixed count each.

Call :func:`run_service_bench` from the main harness, or run this file:
``python bench/service_bench.py [--quick]`` (datasets from ``scenarios.py``).
"""

from __future__ import annotations

import json
import os
import sys
import tempfile
import threading
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
for _p in (ROOT / "service", ROOT / "client"):
    if str(_p) not in sys.path:
        sys.path.insert(0, str(_p))

import numpy as np  # noqa: E402

from trendmill.service.launch import start_server, stop_server  # noqa: E402

__all__ = ["run_service_bench", "TARGETS"]

#: (figure, comparison, bound) checked by the report
TARGETS = (("remote_over_local_fit", "<=", 1.1), ("lookup_p99_ms", "<=", 5.0))


def _start_server(state: Path, data_root: Path, workers: int | None):
    args = ["--listen", "127.0.0.1:0", "--state", str(state), "--data-root", str(data_root),
            "--max-jobs", "1"] + (["--workers", str(workers)] if workers else [])
    return start_server(args, timeout=120)


def _percentile(values, q: float) -> float:
    return float(np.percentile(np.asarray(values, dtype=float), q))


def run_service_bench(*, fit_source, lookup_source, workdir=None, y: str = "cabinet_temp_c",
                      x=("ts",), by=("freezer_id",), workers: int | None = None,
                      repeats: int = 5, lookups: int = 5000, clients: int = 8,
                      lookups_per_client: int = 1000, seed: int = 0, log=print) -> dict:
    """Measure the service against local execution; returns the figures as a dict.

    Parameters
    ----------
    fit_source : path
        Dataset of the fit comparison (the 50M-row scenario in the full run).
    lookup_source : path or None
        Dataset whose fit gives the lookup model (1M groups in the full run);
        its ``by`` key must be an integer column with values 1..groups.
        None skips the lookup figures.
    workdir : path, optional
        State directories and result files (default: a temp dir, removed).
    workers : int, optional
        Worker processes of both the local and the remote fit (default: cores).
    """
    from trendmill.engine.spec import FitSpec as EngineSpec
    from trendmill.io.results import write_results
    from trendmill.local import run_fit
    from trendmill_client import Client, FitSpec

    fit_source = Path(fit_source).resolve()
    lookup_source = Path(lookup_source).resolve() if lookup_source is not None else None
    own = workdir is None
    work = Path(tempfile.mkdtemp(prefix="trendmill-svc-bench-") if own else workdir)
    work.mkdir(parents=True, exist_ok=True)
    root = Path(os.path.commonpath([fit_source.parent] + ([lookup_source.parent]
                                                          if lookup_source else [])))
    x, by = tuple(x), tuple(by)
    out: dict = {"fit_source": str(fit_source), "lookup_source": str(lookup_source),
                 "workers": workers}
    server_times: list[float] = []
    proc, address = _start_server(work / "state", root, workers)
    try:
        with Client(address, timeout=600) as client:
            local_spec = EngineSpec(str(fit_source), y, x, by=by)
            remote_spec = FitSpec(str(fit_source.relative_to(root)), y, x, by=by)

            def local_fit() -> float:
                t0 = time.perf_counter()
                run = run_fit(local_spec, workers=workers)
                write_results(run.table, str(work / "local.parquet"))
                return time.perf_counter() - t0

            def remote_fit() -> float:
                t0 = time.perf_counter()
                job = client.create_fit_job(remote_spec)
                job = client.wait(job.name)
                if job.state != "SUCCEEDED":
                    raise RuntimeError(f"remote fit {job.state}: {job.error}")
                table = client.read_table(job.name)
                write_results(table, str(work / "remote.parquet"))
                server_times.append(job.summary.fit_seconds)
                return time.perf_counter() - t0

            log("service bench: warming up local and remote fits ...")
            local_fit()
            remote_fit()
            local_times, remote_times = [], []
            for i in range(repeats):
                # Swap the order every round so a drift in machine load hits both sides.
                if i % 2 == 0:
                    local_times.append(local_fit())
                    remote_times.append(remote_fit())
                else:
                    remote_times.append(remote_fit())
                    local_times.append(local_fit())
                log(f"service bench: fit {i + 1}/{repeats}: local {local_times[-1]:.2f} s, "
                    f"remote {remote_times[-1]:.2f} s")
            import pyarrow.parquet as pq
            same = pq.read_table(work / "local.parquet").equals(pq.read_table(work / "remote.parquet"))
            out.update(local_fit_s=min(local_times), remote_fit_s=min(remote_times),
                       remote_over_local_fit=min(remote_times) / min(local_times),
                       local_fit_runs_s=local_times, remote_fit_runs_s=remote_times,
                       remote_server_fit_runs_s=server_times[1:],
                       # Robust to machine load: time the service adds around its own fit.
                       service_overhead_s=float(np.median(
                           np.subtract(remote_times, server_times[1:]))),
                       remote_equals_local=same)

        if lookup_source is not None:
            out.update(_lookups(address, lookup_source.relative_to(root), y=y, x=x, by=by,
                                lookups=lookups, clients=clients,
                                lookups_per_client=lookups_per_client, seed=seed, log=log))
    finally:
        stop_server(proc)
        if own:
            import shutil
            shutil.rmtree(work, ignore_errors=True)
    out["targets"] = [
        {"figure": f, "bound": f"{op} {b}", "value": out[f],
         "result": "PASS" if (out[f] <= b) else "FAIL"} for f, op, b in TARGETS if f in out]
    return out


def _lookups(address: str, source: Path, *, y, x, by, lookups: int, clients: int,
             lookups_per_client: int, seed: int, log) -> dict:
    """Fit the lookup model, then time lookups: one client, then ``clients`` at once."""
    from trendmill_client import Client, FitSpec

    out: dict = {}
    with Client(address, timeout=600) as client:
        log("service bench: fitting the lookup model ...")
        job = client.fit(FitSpec(str(source), y, x, by=by), model="lookup-bench")
        if job.state != "SUCCEEDED":
            raise RuntimeError(f"lookup model fit {job.state}: {job.error}")
        groups = job.summary.groups
        out["lookup_groups"] = groups
        t0 = time.perf_counter()
        client.lookup_group("lookup-bench", 1)  # loads the result and builds its index
        out["lookup_first_s"] = time.perf_counter() - t0
        rng = np.random.default_rng(seed)
        keys = rng.integers(1, groups + 1, size=lookups).tolist()
        health, lat = [], []
        for _ in range(min(lookups, 2000)):
            t0 = time.perf_counter_ns()
            client.health()
            health.append((time.perf_counter_ns() - t0) / 1e6)
        for k in keys:
            t0 = time.perf_counter_ns()
            fit = client.lookup_group("lookup-bench", k)
            lat.append((time.perf_counter_ns() - t0) / 1e6)
            assert fit.key == (k,)
        out.update(lookup_p50_ms=_percentile(lat, 50), lookup_p99_ms=_percentile(lat, 99),
                   lookup_max_ms=max(lat), health_p50_ms=_percentile(health, 50),
                   health_p99_ms=_percentile(health, 99))
        out["lookup_over_health_p50"] = out["lookup_p50_ms"] / out["health_p50_ms"]

    # Concurrent clients: each its own channel, all released at once.
    barrier = threading.Barrier(clients + 1)
    errors: list[BaseException] = []

    def worker(i: int) -> None:
        r = np.random.default_rng(seed + 1 + i)
        ks = r.integers(1, groups + 1, size=lookups_per_client).tolist()
        try:
            with Client(address, timeout=60) as c:
                c.health()
                barrier.wait()
                for k in ks:
                    c.lookup_group("lookup-bench", k)
        except BaseException as exc:  # noqa: BLE001 - reported below
            errors.append(exc)
            barrier.abort()

    threads = [threading.Thread(target=worker, args=(i,)) for i in range(clients)]
    for t in threads:
        t.start()
    barrier.wait()
    t0 = time.perf_counter()
    for t in threads:
        t.join()
    elapsed = time.perf_counter() - t0
    if errors:
        raise errors[0]
    out.update(concurrent_clients=clients, lookups_per_s=clients * lookups_per_client / elapsed)
    return out


def main(argv: list[str] | None = None) -> int:
    import argparse

    sys.path.insert(0, str(HERE))
    from scenarios import SCENARIOS, prepare

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="small datasets")
    ap.add_argument("--data-dir", type=Path, default=HERE / "out" / "data")
    ap.add_argument("--workers", type=int, default=None)
    ap.add_argument("--out", type=Path, default=HERE / "out" / "service.json")
    ap.add_argument("--no-lookups", action="store_true", help="only the fit comparison")
    args = ap.parse_args(argv)
    log = lambda m: print(m, file=sys.stderr, flush=True)  # noqa: E731
    fit_case = prepare(SCENARIOS["p1"], quick=args.quick, root=args.data_dir, log=log)
    lookup_case = None if args.no_lookups else prepare(
        SCENARIOS["groups1m"], quick=args.quick, root=args.data_dir, log=log)
    res = run_service_bench(fit_source=fit_case.data.path,
                            lookup_source=lookup_case.data.path if lookup_case else None,
                            workers=args.workers, log=log,
                            lookups=1000 if args.quick else 5000)
    res.update(fit_rows=fit_case.rows, fit_groups=fit_case.groups)
    print(json.dumps(res, indent=1, default=str))
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps(res, indent=1, default=str))
    return 0


if __name__ == "__main__":
    sys.exit(main())
