"""Group keys -> dense group ids, stable across batches and partitions.

Each key column keeps the distinct values seen so far (an Arrow array) and maps a
batch through ``dictionary_encode`` + ``index_in``: hashing stays in Arrow's C++
kernels, and Python touches only the distinct values of a batch. Several key
columns are folded pairwise: (id_a, id_b) packed into one int64, itself mapped by
another index, so any number of columns and any key type Arrow can hash work.
A null key value is a group of its own, as in SQL's GROUP BY.
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from . import _kernel

__all__ = ["KeyIndex"]

_DENSE_MAX_RANGE = 1 << 24


class _ValueIndex:
    """Distinct values of one Arrow type -> ids 0, 1, 2... in order of first appearance."""

    def __init__(self, type_: pa.DataType) -> None:
        self.type = type_
        self._chunks: list[pa.Array] = []
        self._known: pa.Array = pa.array([], type=type_)
        self.size = 0
        # integer keys in a compact range map through a lookup table (no hashing);
        # the first null or sparse batch switches to the general path for good
        self._dense_ok = pa.types.is_integer(type_)
        self._dense_lo = 0
        self._dense_lut = np.zeros(0, np.int64)

    def _dense_ids(self, v: np.ndarray) -> np.ndarray | None:
        if len(v) == 0:
            return np.zeros(0, np.int64)
        lo, hi = (int(b) for b in _kernel.int_range(v))
        if self.size:
            lo, hi = min(lo, self._dense_lo), max(hi, self._dense_lo + len(self._dense_lut) - 1)
        if hi - lo >= _DENSE_MAX_RANGE:
            return None
        if lo != self._dense_lo or hi - lo + 1 != len(self._dense_lut):
            lut = np.full(hi - lo + 1, -1, np.int64)
            if len(self._dense_lut):
                start = self._dense_lo - lo
                lut[start:start + len(self._dense_lut)] = self._dense_lut
            self._dense_lo, self._dense_lut = lo, lut
        out = np.empty(len(v), np.int64)
        fresh = _kernel.dense_lookup(v, v.dtype.type(lo), self._dense_lut, self.size, out)
        if len(fresh):
            self._known = pa.concat_arrays([self._known, pa.array(fresh + lo).cast(self.type)])
            self.size += len(fresh)
        return out

    def ids(self, values: pa.Array | pa.ChunkedArray) -> np.ndarray:
        if isinstance(values, pa.ChunkedArray):
            values = values.combine_chunks()
        if self._dense_ok and pa.types.is_integer(values.type) and values.null_count == 0:
            out = self._dense_ids(values.to_numpy())
            if out is not None:
                return out
        self._dense_ok = False
        if pa.types.is_dictionary(values.type):
            dictionary, indices = values.dictionary, values.indices
            if dictionary.type != self.type:
                dictionary = dictionary.cast(self.type)
            null_rows = values.is_null()
        else:
            enc = pc.dictionary_encode(values, null_encoding="encode")
            dictionary, indices, null_rows = enc.dictionary, enc.indices, None
        lut = pc.index_in(dictionary, value_set=self._known, skip_nulls=False)
        new = lut.is_null()
        if pc.any(new).as_py():
            fresh = dictionary.filter(new)
            self._chunks.append(fresh)
            self._known = pa.concat_arrays([self._known, fresh])
            fresh_ids = np.arange(self.size, self.size + len(fresh), dtype=np.int64)
            self.size += len(fresh)
            lut_np = lut.to_numpy(zero_copy_only=False)
            lut_np = np.where(new.to_numpy(zero_copy_only=False), 0, lut_np).astype(np.int64)
            lut_np[new.to_numpy(zero_copy_only=False)] = fresh_ids
        else:
            lut_np = lut.to_numpy(zero_copy_only=False).astype(np.int64)
        out = lut_np[indices.fill_null(0).to_numpy(zero_copy_only=False)]
        if null_rows is not None and null_rows.null_count == 0 and pc.any(null_rows).as_py():
            # a dictionary array with null indices: map them to the null key
            out[null_rows.to_numpy(zero_copy_only=False)] = self.ids(pa.nulls(1, self.type))[0]
        return out

    def values(self) -> pa.Array:
        return self._known


class KeyIndex:
    """Dense ids for tuples of key columns; ``keys()`` gives the tuples back as a table."""

    def __init__(self, names: tuple[str, ...], types: tuple[pa.DataType, ...]) -> None:
        self.names = tuple(names)
        self._cols = [_ValueIndex(t) for t in types]
        # one int64 index per fold of two columns (column 0 with 1, that with 2, ...)
        self._folds = [_ValueIndex(pa.int64()) for _ in types[1:]]

    @property
    def size(self) -> int:
        if not self._cols:
            return 1
        return (self._folds[-1] if self._folds else self._cols[0]).size

    def ids(self, columns: list[pa.Array], length: int) -> np.ndarray:
        """Group id of each row of ``columns`` (one array per key column), int64."""
        if not self._cols:
            return np.zeros(length, dtype=np.int64)
        acc = self._cols[0].ids(columns[0])
        for col_index, fold, column in zip(self._cols[1:], self._folds, columns[1:]):
            acc = fold.ids(pa.array((acc << 32) | col_index.ids(column)))
        return acc

    def keys(self) -> pa.Table:
        """Key values of ids 0..size-1, one column per key column."""
        if not self._cols:
            return pa.table({})
        if len(self._cols) == 1:
            return pa.table([self._cols[0].values()], names=list(self.names))
        ids = np.arange(self.size, dtype=np.int64)
        per_col = [None] * len(self._cols)
        for pos in range(len(self._folds) - 1, -1, -1):
            packed = self._folds[pos].values().to_numpy()[ids]
            per_col[pos + 1] = packed & 0xFFFFFFFF
            ids = packed >> 32
        per_col[0] = ids
        arrays = [c.values().take(pa.array(i)) for c, i in zip(self._cols, per_col)]
        return pa.table(arrays, names=list(self.names))
