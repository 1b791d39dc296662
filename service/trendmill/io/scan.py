"""Scan: one partition -> per-group moments, streaming in bounded batches.

Memory per scan is one decoded batch plus the per-group state (groups x d^2); rows
are never collected. Nulls and NaN in a used column skip the row (counted per
group in ``skipped``), as do +-inf (counted in ``infinite``); a negative or
infinite weight is an error naming the column and file.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.dataset as ds
import pyarrow.fs as pafs

from ..engine.errors import CorruptSource, DataError
from ..engine.moments import Moments
from . import _kernel
from .keys import KeyIndex
from .plan import ColumnPlan, FitPlan, Partition, raw_integers

__all__ = ["ScanTask", "PartitionMoments", "scan_partition", "scan_tasks", "BATCH_ROWS"]

BATCH_ROWS = 1 << 20
# decoded batches held ahead of the kernel: enough to overlap decoding, bounded memory
_READAHEAD = 2
_LOCAL_FS = pafs.LocalFileSystem()


@dataclass(frozen=True, slots=True)
class ScanTask:
    """Everything a worker needs to scan one partition (picklable)."""

    partition: Partition
    schema: pa.Schema
    columns: tuple[ColumnPlan, ...]
    by: tuple[str, ...]
    key_types: tuple[pa.DataType, ...]
    filter: object
    weighted: bool
    form: str
    use_threads: bool = False
    batch_rows: int = BATCH_ROWS


@dataclass(frozen=True, slots=True)
class PartitionMoments:
    partition_id: str
    keys: pa.Table               # one row per group, in id order
    moments: Moments
    skipped: np.ndarray          # (G,) rows skipped for null / NaN
    infinite: np.ndarray         # (G,) rows skipped for +-inf
    rows_read: int
    bytes_read: int


def scan_tasks(plan: FitPlan, *, use_threads: bool = False) -> list[ScanTask]:
    form = "qr" if plan.spec.solver == "qr" else "comoment"
    return [ScanTask(p, plan.schema, plan.columns, plan.spec.by, plan.key_types, plan.filter,
                     plan.spec.weight is not None, form, use_threads) for p in plan.partitions]


def _as_float(arr: pa.Array | pa.ChunkedArray, col: ColumnPlan, out: np.ndarray) -> None:
    """Column -> float64 into ``out`` minus the column's origin, with NaN for nulls.

    Integer kinds subtract the origin in int64 arithmetic first, so it is exact.
    """
    if isinstance(arr, pa.ChunkedArray):
        arr = arr.combine_chunks()
    if col.kind in ("float", "bool"):
        if not pa.types.is_floating(arr.type):
            arr = arr.cast(pa.float64(), safe=False)
        # nulls come out as NaN; float32 widens exactly in the subtraction below
        values = arr.to_numpy(zero_copy_only=False)
        if col.origin:
            np.subtract(values, col.origin, out=out, dtype=np.float64)   # not in float32
        else:
            out[:] = values
        return
    if col.kind == "uint":
        v = arr.fill_null(0).to_numpy(zero_copy_only=False)
        o = np.uint64(col.origin)
        # unsigned differences are exact one way round; take the sign separately
        np.copyto(out, np.where(v >= o, (v - o).astype(np.float64), -((o - v).astype(np.float64))))
        if arr.null_count:
            out[arr.is_null().to_numpy(zero_copy_only=False)] = np.nan
        return
    # plain integers go to the kernel in their own width (no widening copy)
    raw = arr if pa.types.is_integer(arr.type) else raw_integers(arr)
    if raw.null_count:
        raw = raw.fill_null(0)
    _kernel.ints_to_float(raw.to_numpy(zero_copy_only=False), col.origin, col.per_unit, out)
    if arr.null_count:
        out[arr.is_null().to_numpy(zero_copy_only=False)] = np.nan


class _Growing:
    """The partition's state arrays, grown by doubling as groups appear."""

    def __init__(self, d: int) -> None:
        self.cap = 0
        self.n = np.zeros(0, np.int64)
        self.w = np.zeros(0)
        self.mean = np.zeros((0, d))
        self.cross = np.zeros((0, d, d))
        self.skipped = np.zeros(0, np.int64)
        self.infinite = np.zeros(0, np.int64)

    def ensure(self, groups: int) -> None:
        if groups <= self.cap:
            return
        self.cap = max(groups, 2 * self.cap, 1024)

        def grow(a: np.ndarray) -> np.ndarray:
            new = np.zeros((self.cap,) + a.shape[1:], a.dtype)
            new[: len(a)] = a
            return new

        self.n, self.w, self.mean, self.cross, self.skipped, self.infinite = map(
            grow, (self.n, self.w, self.mean, self.cross, self.skipped, self.infinite))
        self.slot = np.full(self.cap, -1, np.int64)     # the kernel's scratch, all -1 between batches


def _read_batches(task: ScanTask, names: list[str]):
    """Decoded batches of the partition; a read or decode failure names the file."""
    part = task.partition
    try:
        fragment = ds.ParquetFileFormat().make_fragment(
            part.path, filesystem=_LOCAL_FS, partition_expression=part.partition_expression,
            row_groups=part.row_groups)
        scanner = ds.Scanner.from_fragment(fragment, schema=task.schema, columns=names,
                                           filter=task.filter, batch_size=task.batch_rows,
                                           batch_readahead=_READAHEAD, fragment_readahead=1,
                                           use_threads=task.use_threads)
        yield from scanner.to_batches()
    except (pa.ArrowException, OSError) as exc:
        first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise CorruptSource(f"source: cannot read {part.path!r} ({first})", path=part.path) from None


def scan_partition(task: ScanTask) -> PartitionMoments:
    """Scan one partition into per-group moments (the hot path)."""
    part = task.partition
    d = len(task.columns) - (1 if task.weighted else 0)
    keys = KeyIndex(task.by, task.key_types)
    state = _Growing(d)
    state.ensure(1)
    accumulate = _kernel.accumulate_qr if task.form == "qr" else _kernel.accumulate_comoment
    used = {c.name for c in task.columns}
    names = [c.name for c in task.columns] + [b for b in task.by if b not in used]
    rows = 0
    empty_w = np.empty(0)
    for batch in _read_batches(task, names):
        n = batch.num_rows
        if n == 0:
            continue
        rows += n
        codes = keys.ids([batch.column(b) for b in task.by], n)
        state.ensure(keys.size)
        z = np.empty((d, n))
        for j, col in enumerate(task.columns[:d]):
            _as_float(batch.column(col.name), col, z[j])
        w = empty_w
        if task.weighted:
            wcol = batch.column(task.columns[d].name)
            if pa.types.is_floating(wcol.type) and pc.any(pc.is_nan(wcol)).as_py():
                # NULL is a missing weight (the row is skipped); NaN is a broken one
                raise DataError(f"weight: column {task.columns[d].name!r} has NaN values in "
                                f"{part.path!r}; weights must be finite and >= 0",
                                column=task.columns[d].name, path=part.path)
            w = np.empty(n)
            _as_float(wcol, task.columns[d], w)
        bad = accumulate(codes, z, w, task.weighted, state.n, state.w, state.mean, state.cross,
                         state.skipped, state.infinite, state.slot)
        if bad:
            col = task.columns[d].name
            raise DataError(f"weight: column {col!r} has {bad} negative or infinite values in "
                            f"{part.path!r}; weights must be finite and >= 0", column=col, path=part.path)
    g = keys.size
    m = Moments(state.n[:g].copy(), state.w[:g].copy(), state.mean[:g].copy(), state.cross[:g].copy(), task.form)
    return PartitionMoments(part.id, keys.keys(), m, state.skipped[:g].copy(), state.infinite[:g].copy(),
                            rows, part.bytes)
