"""Stored results held in memory for paging, key lookups and predictions.

A result file is read once and kept (least recently used first out) with the
pieces the hot paths need: a dict from group key to row, the numeric columns
as numpy arrays and the covariance as a ``(groups, k*k)`` array. Memory grows
with groups x terms^2, like the result itself.
"""

from __future__ import annotations

import threading
from collections import OrderedDict

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from ..engine.errors import NotFound

__all__ = ["LoadedResult", "ResultCache", "arrow_ipc"]


def arrow_ipc(table: pa.Table) -> bytes:
    """``table`` as an Arrow IPC stream (schema, then its record batches)."""
    sink = pa.BufferOutputStream()
    with pa.ipc.new_stream(sink, table.schema) as writer:
        writer.write_table(table)
    return sink.getvalue().to_pybytes()


class LoadedResult:
    """One result table with its key index (built on first lookup)."""

    def __init__(self, table: pa.Table, *, key_names: tuple[str, ...],
                 terms: tuple[str, ...]) -> None:
        self.table = table.combine_chunks()
        self.key_names = key_names
        self.terms = terms
        self.key_types = tuple((n, self.table.schema.field(n).type) for n in key_names)
        self.num_rows = self.table.num_rows
        self._lock = threading.Lock()
        self._index: dict | None = None
        self._numbers: dict[str, np.ndarray] = {}
        self._covariance: np.ndarray | None = None
        # Approximate wire size of one row, to keep pages under the message limit.
        self.row_bytes = max(1, self.table.nbytes // max(1, self.num_rows))

    # -- lookup --------------------------------------------------------------
    def _build(self) -> None:
        keys = [self.table.column(n).to_pylist() for n in self.key_names]
        if len(keys) == 1:
            index = {k: i for i, k in enumerate(keys[0])}
        elif keys:
            index = {k: i for i, k in enumerate(zip(*keys))}
        else:
            index = {(): 0} if self.num_rows else {}
        numbers = {}
        for f in self.table.schema:
            t = f.type
            if pa.types.is_floating(t) or pa.types.is_integer(t):
                col = self.table.column(f.name)
                if pa.types.is_integer(t) and col.null_count:
                    col = col.cast(pa.float64())
                numbers[f.name] = col.to_numpy()
        cov = None
        if "covariance" in self.table.column_names and self.num_rows:
            arr = self.table.column("covariance").chunk(0) if self.table.column(
                "covariance").num_chunks == 1 else self.table.column("covariance").combine_chunks()
            k2 = len(self.terms) ** 2
            flat = arr.flatten().to_numpy(zero_copy_only=False)
            if arr.null_count == 0 and flat.shape[0] == k2 * self.num_rows:
                cov = flat.reshape(self.num_rows, k2)
        self._numbers, self._covariance = numbers, cov
        self._index = index

    def index_of(self, key: tuple) -> int:
        """Row of the group with ``key`` (a tuple in key-column order)."""
        if self._index is None:
            with self._lock:
                if self._index is None:
                    self._build()
        k = key[0] if len(self.key_names) == 1 else key
        i = self._index.get(k)
        if i is None:
            shown = ", ".join(f"{n}={v!r}" for n, v in zip(self.key_names, key))
            raise NotFound(f"key: no group with {shown or 'no key'} in this result",
                           field="key")
        return i

    def key_of(self, i: int) -> list[tuple[str, object]]:
        return [(n, self.table.column(n)[i].as_py()) for n in self.key_names]

    def row(self, i: int) -> dict:
        """Result columns of row ``i`` (numbers from numpy, the rest through Arrow)."""
        out = {name: arr[i] for name, arr in self._numbers.items()}
        out["status"] = self.table.column("status")[i].as_py()
        if self._covariance is not None:
            out["covariance"] = self._covariance[i]
        elif "covariance" in self.table.column_names:
            out["covariance"] = self.table.column("covariance")[i].as_py()
        return out

    # -- pages ---------------------------------------------------------------
    def page_rows(self, offset: int, count: int) -> list[tuple[list, dict]]:
        """(key, row) pairs of rows ``offset .. offset+count``."""
        rows = self.table.slice(offset, count).to_pylist()
        return [([(n, r[n]) for n in self.key_names], r) for r in rows]

    def page_ipc(self, offset: int, count: int) -> bytes:
        return arrow_ipc(self.table.slice(offset, count))


class ResultCache:
    """Loaded results by file path, at most ``max_results`` at a time (LRU)."""

    def __init__(self, *, max_results: int = 8) -> None:
        self._max = max_results
        self._items: OrderedDict[str, LoadedResult] = OrderedDict()
        self._lock = threading.Lock()
        self._loading: dict[str, threading.Lock] = {}

    def put(self, path: str, table: pa.Table, *, key_names: tuple[str, ...],
            terms: tuple[str, ...]) -> None:
        """Keep a table just written to ``path`` (the first read after a fit is then free)."""
        loaded = LoadedResult(table, key_names=key_names, terms=terms)
        with self._lock:
            self._items[path] = loaded
            self._items.move_to_end(path)
            while len(self._items) > self._max:
                self._items.popitem(last=False)

    def get(self, path: str, *, key_names: tuple[str, ...], terms: tuple[str, ...]) -> LoadedResult:
        with self._lock:
            hit = self._items.get(path)
            if hit is not None:
                self._items.move_to_end(path)
                return hit
            load_lock = self._loading.setdefault(path, threading.Lock())
        # One reader per file; other callers of the same file wait for it.
        with load_lock:
            with self._lock:
                hit = self._items.get(path)
                if hit is not None:
                    return hit
            loaded = LoadedResult(pq.read_table(path), key_names=key_names, terms=terms)
            with self._lock:
                self._items[path] = loaded
                self._loading.pop(path, None)
                while len(self._items) > self._max:
                    self._items.popitem(last=False)
            return loaded
