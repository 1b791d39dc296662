"""Source -> partitions with fingerprints, and the per-column conversions of a fit.

A partition is a Parquet file, or a range of its row groups when the file is large,
so that one big file still spreads over all workers. Partition ids sort by
relative path then row-group range; the merge follows that order, so a result
never depends on how many workers ran. Planning reads only file metadata, and
fails here (before any scan) on missing columns, wrong types and corrupt files.
"""

from __future__ import annotations

import glob
import hashlib
import os
from dataclasses import dataclass

import numpy as np
import pyarrow as pa
import pyarrow.dataset as ds
import pyarrow.parquet as pq

from ..engine.errors import CorruptSource, SchemaError, SourceNotFound
from ..engine.spec import FitSpec

__all__ = ["Partition", "ColumnPlan", "FitPlan", "plan_fit", "PARTITION_ROWS"]

#: a file with more rows than this is split into row-group ranges of about this size
PARTITION_ROWS = 4_000_000
_PARQUET_SUFFIXES = (".parquet", ".parq", ".pq")
_GLOB_CHARS = set("*?[")
# timestamps become seconds, dates days (documented in the README)
_UNITS_PER_SECOND = {"s": 1, "ms": 1_000, "us": 1_000_000, "ns": 1_000_000_000}


@dataclass(frozen=True, slots=True)
class Partition:
    """One unit of scan work."""

    id: str
    path: str
    row_groups: tuple[int, ...] | None      # None: the whole file
    partition_expression: object             # pyarrow Expression of hive keys (or None)
    rows: int
    bytes: int
    fingerprint: str


@dataclass(frozen=True, slots=True)
class ColumnPlan:
    """How one used column becomes float64: ``(raw - origin) / per_unit``.

    ``kind``: ``float`` (floats, decimals), ``int``, ``uint`` (uint64), ``bool``, ``timestamp``
    (-> seconds), ``date`` (-> days). ``origin`` is a value near the data in the raw
    unit: an int for the integer kinds, subtracted in integer arithmetic so
    nanosecond epochs lose nothing; a float for floats.
    """

    name: str
    kind: str
    origin: int | float = 0
    per_unit: float = 1.0

    @property
    def shift(self) -> float:
        """What was subtracted, in output units (true value = converted + shift)."""
        return self.origin / self.per_unit


@dataclass(frozen=True, slots=True)
class FitPlan:
    spec: FitSpec
    schema: pa.Schema
    base_dir: str
    partitions: tuple[Partition, ...]
    columns: tuple[ColumnPlan, ...]          # x..., y, [weight]
    key_types: tuple[pa.DataType, ...]
    filter: object                            # pyarrow Expression or None

    @property
    def shift(self) -> np.ndarray:
        """(d,) shift of x..., y (the weight is not part of the moments)."""
        d = len(self.spec.x) + 1
        return np.array([c.shift for c in self.columns[:d]])

    @property
    def rows(self) -> int:
        return sum(p.rows for p in self.partitions)

    @property
    def bytes(self) -> int:
        return sum(p.bytes for p in self.partitions)


def _list_files(source: str) -> tuple[list[str], str]:
    """Parquet files of a source (file, directory or glob) and the base directory."""
    if any(ch in source for ch in _GLOB_CHARS):
        files = sorted(f for f in glob.glob(source, recursive=True) if os.path.isfile(f))
        static = source[: min(source.index(ch) for ch in _GLOB_CHARS if ch in source)]
        base = static if static.endswith(os.sep) else os.path.dirname(static)
        if not files:
            raise SourceNotFound(f"source: no files match {source!r}", path=source)
        return files, base or "."
    if os.path.isfile(source):
        return [source], os.path.dirname(source) or "."
    if os.path.isdir(source):
        files = []
        for root, dirs, names in os.walk(source):
            dirs[:] = sorted(d for d in dirs if not d.startswith((".", "_")))
            files.extend(os.path.join(root, n) for n in sorted(names)
                         if n.endswith(_PARQUET_SUFFIXES) and not n.startswith((".", "_")))
        if not files:
            raise SourceNotFound(f"source: no Parquet files under directory {source!r}", path=source)
        return files, source
    raise SourceNotFound(f"source: no such file or directory: {source!r}", path=source)


def _metadata(path: str) -> pq.FileMetaData:
    try:
        return pq.ParquetFile(path).metadata
    except (pa.ArrowException, OSError) as exc:
        first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise CorruptSource(f"source: {path!r} is not a readable Parquet file ({first})", path=path) from None


def _column_kind(field: pa.Field, role: str) -> ColumnPlan:
    t = field.type
    if pa.types.is_floating(t) or pa.types.is_decimal(t):
        return ColumnPlan(field.name, "float")
    if pa.types.is_uint64(t):       # values >= 2**63 have no int64 form
        return ColumnPlan(field.name, "uint")
    if pa.types.is_integer(t):
        return ColumnPlan(field.name, "int")
    if pa.types.is_boolean(t):
        return ColumnPlan(field.name, "bool")
    if pa.types.is_timestamp(t):
        return ColumnPlan(field.name, "timestamp", 0, float(_UNITS_PER_SECOND[t.unit]))
    if pa.types.is_date32(t):
        return ColumnPlan(field.name, "date", 0, 1.0)
    if pa.types.is_date64(t):
        return ColumnPlan(field.name, "date", 0, 86_400_000.0)
    raise SchemaError(f"{role}: column {field.name!r} has type {t}; expected a number, "
                      f"boolean, date or timestamp", column=field.name, field=role)


_KEY_TYPES = (pa.types.is_integer, pa.types.is_string, pa.types.is_large_string, pa.types.is_date,
              pa.types.is_boolean, pa.types.is_timestamp)


def _key_type(field: pa.Field) -> pa.DataType:
    t = field.type
    if pa.types.is_dictionary(t):
        t = t.value_type
    if not any(check(t) for check in _KEY_TYPES):
        raise SchemaError(f"by: column {field.name!r} has type {t}; group keys must be integer, "
                          f"string, date, timestamp or boolean", column=field.name, field="by")
    return t


def raw_integers(arr: pa.Array) -> pa.Array:
    """The int64 values behind an integer, date or timestamp array (no unit conversion)."""
    t = arr.type
    if pa.types.is_timestamp(t) or pa.types.is_date64(t):
        return arr.view(pa.int64())
    if pa.types.is_date32(t):
        return arr.view(pa.int32()).cast(pa.int64())
    return arr.cast(pa.int64())


def _origin(col: ColumnPlan, first: pq.FileMetaData, schema: pa.Schema) -> ColumnPlan:
    """Pick an origin near the data from the first row group's statistics.

    Subtracting a nearby value makes the scan's means small, so Chan's merges of
    partitions do not carry the rounding of a large offset. Integer kinds get an
    integer origin (subtracted exactly in int64), floats a float one.
    """
    if col.kind == "bool" or first.num_row_groups == 0:
        return col
    names = first.schema.names
    if col.name not in names:       # a hive partition column: small values, no origin needed
        return col
    stats = first.row_group(0).column(names.index(col.name)).statistics
    if stats is None or not stats.has_min_max:
        return col
    try:
        low = pa.array([stats.min], type=schema.field(col.name).type)
        if col.kind == "float":
            origin = float(low.cast(pa.float64(), safe=False)[0].as_py())
            return ColumnPlan(col.name, col.kind, origin if np.isfinite(origin) else 0.0, col.per_unit)
        origin = low[0].as_py() if col.kind == "uint" else raw_integers(low)[0].as_py()
    except (pa.ArrowException, TypeError, ValueError, OverflowError):
        return col
    return ColumnPlan(col.name, col.kind, int(origin), col.per_unit)


def _partitions(files: list[str], metas: list[pq.FileMetaData], dataset: ds.FileSystemDataset,
                base: str, used: list[str]) -> list[Partition]:
    exprs = {os.path.normpath(f.path): f.partition_expression for f in dataset.get_fragments()}
    parts = []
    for path, meta in zip(files, metas):
        st = os.stat(path)
        rel = os.path.relpath(path, base)
        col_idx = [i for i, n in enumerate(meta.schema.names) if n in used]
        ranges: list[tuple[int, ...] | None] = [None]
        if meta.num_rows > PARTITION_ROWS and meta.num_row_groups > 1:
            ranges, current, rows = [], [], 0
            for rg in range(meta.num_row_groups):
                current.append(rg)
                rows += meta.row_group(rg).num_rows
                if rows >= PARTITION_ROWS:
                    ranges.append(tuple(current))
                    current, rows = [], 0
            if current:
                ranges.append(tuple(current))
        for rgs in ranges:
            groups = range(meta.num_row_groups) if rgs is None else rgs
            rows = sum(meta.row_group(g).num_rows for g in groups)
            nbytes = sum(meta.row_group(g).column(i).total_compressed_size for g in groups for i in col_idx)
            label = rel if rgs is None else f"{rel}#rg{rgs[0]:06d}-{rgs[-1]:06d}"
            fp = hashlib.sha256(repr((os.path.abspath(path), st.st_size, st.st_mtime_ns, rgs,
                                      str(meta.schema))).encode()).hexdigest()[:24]
            parts.append(Partition(label, path, rgs, exprs.get(os.path.normpath(path)), rows, nbytes, fp))
    parts.sort(key=lambda p: p.id)
    return parts


def plan_fit(spec: FitSpec) -> FitPlan:
    """Validate ``spec`` against its source and list the partitions to scan."""
    from .filter import compile_filter   # the filter language sits beside the planner

    files, base = _list_files(spec.source)
    metas = [_metadata(f) for f in files]
    try:
        dataset = ds.dataset(files, format="parquet",
                             partitioning=ds.HivePartitioning.discover(infer_dictionary=False),
                             partition_base_dir=base)
    except (pa.ArrowException, OSError) as exc:
        raise CorruptSource(f"source: cannot open {spec.source!r} as a dataset ({str(exc).splitlines()[0]})",
                            path=spec.source) from None
    schema = dataset.schema
    have = ", ".join(schema.names)

    def field_of(name: str, role: str) -> pa.Field:
        if name not in schema.names:
            raise SchemaError(f"{role}: column {name!r} not in schema (have: {have})", column=name, field=role)
        return schema.field(name)

    roles = [("x", n) for n in spec.x] + [("y", spec.y)] + ([("weight", spec.weight)] if spec.weight else [])
    columns = []
    for role, name in roles:
        col = _column_kind(field_of(name, role), role)
        if role == "weight" and col.kind in ("timestamp", "date"):
            raise SchemaError(f"weight: column {name!r} is a {col.kind}; expected a number",
                              column=name, field="weight")
        columns.append(_origin(col, metas[0], schema) if role != "weight" else col)
    key_types = tuple(_key_type(field_of(name, "by")) for name in spec.by)
    expr = compile_filter(spec.filter, schema) if spec.filter else None
    used = list(spec.columns) + list(spec.by)
    parts = _partitions(files, metas, dataset, base, used)
    return FitPlan(spec, schema, base, tuple(parts), tuple(columns), key_types, expr)
