"""Small shared helpers of the reference, accuracy and property tests.

Everything here is plumbing (write a real Parquet file, run a real fit, read a
result row); the checks and their outside references live in the tests.
"""

from __future__ import annotations

import math
import os
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

from trendmill.engine.spec import FitSpec
from trendmill.local import run_fit

__all__ = ["REPO", "DATA", "write_parquet", "fit", "lre", "rows_by_key",
           "nist_datasets"]

REPO = Path(__file__).resolve().parent.parent
DATA = Path(__file__).resolve().parent / "data"


def write_parquet(path: str | os.PathLike, data: pa.Table | dict, **kwargs) -> str:
    """Write ``data`` (a table or a dict of columns) to a real Parquet file; returns the path."""
    table = data if isinstance(data, pa.Table) else pa.table(data)
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    pq.write_table(table, path, **kwargs)
    return str(path)


def fit(source: str | os.PathLike, y: str, x, *, workers: int = 1, **spec) -> pa.Table:
    """Run one fit through the local executor and return its result table."""
    x = (x,) if isinstance(x, str) else tuple(x)
    return run_fit(FitSpec(str(source), y, x, **spec), workers=workers).table


def lre(value: float, certified: float, *, cap: float = 15.0) -> float:
    """Log relative error (correct significant digits), NIST's definition, capped.

    ``-log10(|value - certified| / |certified|)``, or ``-log10(|value|)`` when
    the certified value is 0; NaN or infinite estimates score 0.
    """
    if value is None or not math.isfinite(value):
        return 0.0
    if certified == 0:
        err = abs(value)
    else:
        err = abs(value - certified) / abs(certified)
    if err == 0:
        return cap
    return max(0.0, min(cap, -math.log10(err)))


def rows_by_key(table: pa.Table, keys) -> dict:
    """Result rows as ``{key tuple: row dict}`` (``()`` for an ungrouped fit)."""
    keys = tuple(keys)
    return {tuple(r[k] for k in keys): r for r in table.to_pylist()}


def nist_datasets() -> dict:
    """NIST StRD linear least-squares datasets with certified values (tests/data copy)."""
    import json

    with open(DATA / "nist_strd_lls.json") as fh:
        return json.load(fh)["datasets"]
