"""Local execution: plan -> scan in worker processes -> merge in partition order -> solve.

Workers get one partition each and send back only per-group moments. The
coordinator merges them strictly in partition-id order (results that arrive
early wait in a buffer bounded by the number in flight), so the numbers do not
depend on the worker count or on which worker finished first.
"""

from __future__ import annotations

import multiprocessing
import os
import time
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from dataclasses import dataclass
from typing import Callable

import numpy as np
import pyarrow as pa

from .engine.errors import Cancelled
from .engine.moments import Moments, empty_moments, merge_into
from .engine.solve import solve_moments
from .engine.spec import FitSpec
from .io.keys import KeyIndex
from .io.plan import FitPlan, plan_fit
from .io.results import fits_table
from .io.scan import PartitionMoments, ScanTask, scan_partition, scan_tasks

__all__ = ["run_fit", "check_fit", "FitRun", "Progress", "merge_partitions", "solve_plan",
           "IN_PROCESS_ROWS"]


@dataclass(frozen=True, slots=True)
class Progress:
    partitions_done: int
    partitions_total: int
    rows_read: int
    bytes_read: int
    rows_total: int
    elapsed_s: float


@dataclass(frozen=True, slots=True)
class FitRun:
    table: pa.Table
    partitions: int
    rows_read: int
    bytes_read: int
    seconds: float


def check_fit(spec: FitSpec) -> FitPlan:
    """Validate ``spec`` against its source (metadata only); raises the scan's errors early."""
    return plan_fit(spec)


class _Merger:
    """Running global state: partition results folded in, in the order given."""

    def __init__(self, plan: FitPlan) -> None:
        self.keys = KeyIndex(plan.spec.by, plan.key_types)
        d = len(plan.spec.x) + 1
        self.state = empty_moments(0, d, form="qr" if plan.spec.solver == "qr" else "comoment")
        self.skipped = np.zeros(0, np.int64)
        self.infinite = np.zeros(0, np.int64)

    def _grow(self, size: int) -> None:
        extra = size - self.state.groups
        if extra <= 0:
            return
        s, e = self.state, empty_moments(extra, self.state.dim, form=self.state.form)
        self.state = Moments(np.concatenate([s.n, e.n]), np.concatenate([s.w, e.w]),
                             np.concatenate([s.mean, e.mean]), np.concatenate([s.cross, e.cross]), s.form)
        self.skipped = np.concatenate([self.skipped, np.zeros(extra, np.int64)])
        self.infinite = np.concatenate([self.infinite, np.zeros(extra, np.int64)])

    def add(self, part: PartitionMoments) -> None:
        g = part.moments.groups
        idx = self.keys.ids([part.keys.column(n) for n in part.keys.column_names], g)
        self._grow(self.keys.size)
        merge_into(self.state, idx, part.moments)
        self.skipped[idx] += part.skipped
        self.infinite[idx] += part.infinite

    def moments(self) -> Moments:
        return self.state


def merge_partitions(plan: FitPlan, parts: list[PartitionMoments]) -> _Merger:
    """Fold partition results in partition-id order (the order that fixes the numbers)."""
    merger = _Merger(plan)
    for part in sorted(parts, key=lambda p: p.partition_id):
        merger.add(part)
    return merger


def solve_plan(plan: FitPlan, merger: _Merger) -> pa.Table:
    spec = plan.spec
    fits = solve_moments(merger.moments(), features=spec.x, intercept=spec.intercept,
                         shift=plan.shift, confidence=spec.confidence, solver=spec.solver)
    return fits_table(merger.keys.keys(), fits, skipped=merger.skipped, infinite=merger.infinite)


def _default_workers() -> int:
    return max(1, len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count() or 1)


_POOLS: dict[int, ProcessPoolExecutor] = {}
#: below this many rows (from the Parquet metadata) the default is to scan in-process
IN_PROCESS_ROWS = 1_000_000


def _pool(workers: int) -> ProcessPoolExecutor:
    """One pool per size, kept for the process's life (worker start-up costs ~1 s)."""
    pool = _POOLS.get(workers)
    if pool is None:
        # spawn: Arrow's thread pools do not survive fork
        pool = ProcessPoolExecutor(workers, mp_context=multiprocessing.get_context("spawn"))
        _POOLS[workers] = pool
    return pool


def run_fit(spec: FitSpec, *, workers: int | None = None,
            progress: Callable[[Progress], None] | None = None,
            should_stop: Callable[[], bool] | None = None) -> FitRun:
    """Fit ``spec`` on this machine and return the per-group result table.

    Parameters
    ----------
    workers : int, optional
        Worker processes (default: one per core, or none below ``IN_PROCESS_ROWS``
        rows). 1, or a one-partition source, scans in this process.
    progress : callable, optional
        Called with a ``Progress`` after each merged partition.
    should_stop : callable, optional
        Polled between partitions; when it returns True the fit raises ``Cancelled``.
    """
    start = time.perf_counter()
    plan = plan_fit(spec)
    if workers is None:
        # starting worker processes costs ~1 s: not worth it for a small source
        workers = 1 if plan.rows < IN_PROCESS_ROWS else _default_workers()
    total = len(plan.partitions)
    merger = _Merger(plan)
    done = rows = nbytes = 0

    def report(part: PartitionMoments) -> None:
        nonlocal done, rows, nbytes
        merger.add(part)
        done += 1
        rows += part.rows_read
        nbytes += part.bytes_read
        if progress is not None:
            progress(Progress(done, total, rows, nbytes, plan.rows, time.perf_counter() - start))

    def stop_requested() -> bool:
        return should_stop is not None and should_stop()

    if workers == 1 or total <= 1:
        for task in scan_tasks(plan, use_threads=True):
            if stop_requested():
                raise Cancelled("fit cancelled")
            report(scan_partition(task))
    else:
        _scan_parallel(scan_tasks(plan), _pool(workers), workers, report, stop_requested)
    table = solve_plan(plan, merger)
    return FitRun(table, total, rows, nbytes, time.perf_counter() - start)


def _scan_parallel(tasks: list[ScanTask], pool: ProcessPoolExecutor, workers: int,
                   report: Callable[[PartitionMoments], None], stop_requested: Callable[[], bool]) -> None:
    """Keep ~2 tasks per worker in flight; hand results to ``report`` in task order."""
    pending: dict[int, Future] = {}
    ready: dict[int, PartitionMoments] = {}
    next_submit = next_merge = 0
    try:
        while next_merge < len(tasks):
            while next_submit < len(tasks) and len(pending) + len(ready) < 2 * workers:
                pending[next_submit] = pool.submit(scan_partition, tasks[next_submit])
                next_submit += 1
            finished, _ = wait(list(pending.values()), timeout=0.2, return_when=FIRST_COMPLETED)
            for i in [i for i, f in pending.items() if f in finished]:
                ready[i] = pending.pop(i).result()     # re-raises the worker's error
            while next_merge in ready:
                report(ready.pop(next_merge))
                next_merge += 1
            if stop_requested():
                raise Cancelled("fit cancelled")
    finally:
        for f in pending.values():
            f.cancel()
