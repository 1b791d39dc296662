"""The contestants: one function per way of fitting every group, in one registry.

A contestant is a function ``fn(case) -> seconds`` (or a ``Measurement`` when it
has more to say), registered under a name with ``@contestant(...)``. Each
function times only the work a user would wait for; setup that a user pays
once (opening a connection, importing) stays outside the clock. To add one
(for example a remote trendmill service), register it in another module
imported by ``run.py``::

    @contestant("trendmill-grpc", repeats=3)
    def _grpc(case):
        ...
        return seconds

``Contestant.applies`` decides which scenarios a contestant takes part in.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pyarrow as pa

from scenarios import Case

__all__ = ["Measurement", "Contestant", "CONTESTANTS", "contestant", "Unavailable"]

#: groups looped over in full by the pandas contestant; above this it samples
PANDAS_MAX_GROUPS = 20_000
#: groups fitted by the statsmodels contestant (always sampled)
STATSMODELS_GROUPS = 100
DUCKDB_THREADS = 2


class Unavailable(Exception):
    """A contestant cannot run here (a module is missing); it is skipped, not failed."""


@dataclass(frozen=True, slots=True)
class Measurement:
    """Seconds for the whole job on the whole dataset (extrapolated if ``sampled``)."""

    seconds: float
    note: str = ""
    sampled: bool = False
    detail: dict = field(default_factory=dict)


@dataclass(frozen=True, slots=True)
class Contestant:
    name: str
    fn: Callable[[Case], "float | Measurement"]
    #: timed runs, best kept; fast contestants also get one untimed warm-up
    repeats: int
    about: str
    applies: Callable[[Case], bool]


CONTESTANTS: dict[str, Contestant] = {}


def contestant(name: str, *, repeats: int, about: str,
               applies: Callable[[Case], bool] = lambda case: True):
    """Register ``fn(case) -> seconds`` under ``name``."""
    def register(fn):
        if name in CONTESTANTS:
            raise ValueError(f"contestant {name!r} is registered twice")
        CONTESTANTS[name] = Contestant(name, fn, repeats, about, applies)
        return fn
    return register


def _is_time(column: str) -> bool:
    from trendmill.demo import fleet_schema
    return pa.types.is_timestamp(fleet_schema().field(column).type)


# ---------------------------------------------------------------- trendmill

def _trendmill_spec(case: Case, source=None):
    try:
        from trendmill.engine.spec import FitSpec
        from trendmill.local import run_fit
    except ImportError as exc:
        raise Unavailable(f"trendmill.local not importable ({exc})") from None
    sc = case.scenario
    spec = FitSpec(source=str(source or case.data.path), y=sc.y, x=sc.x, by=(sc.key,))
    return spec, run_fit


@contestant("trendmill", repeats=3, about="trendmill.local.run_fit, default workers")
def _trendmill(case: Case) -> Measurement:
    spec, run_fit = _trendmill_spec(case)
    t0 = time.perf_counter()
    run = run_fit(spec, workers=None)
    seconds = time.perf_counter() - t0
    case.scratch["trendmill_table"] = run.table
    note = ""
    if run.table.num_rows != case.groups:
        note = f"{run.table.num_rows} result rows for {case.groups} groups!"
    rows_read = getattr(run, "rows_read", None)
    if rows_read is not None and rows_read != case.rows:
        note = (note + f" rows_read={rows_read} of {case.rows}").strip()
    return Measurement(seconds, note, detail={"rows_read": rows_read})


# ---------------------------------------------------------------- duckdb

def _duckdb(case: Case, select: str) -> tuple[float, pa.Table]:
    import duckdb
    key = case.scenario.key
    con = duckdb.connect(config={"threads": DUCKDB_THREADS})
    try:
        # the path travels as a prepared parameter; the identifiers are ours
        sql = (f'SELECT "{key}", {select} FROM read_parquet($1, hive_partitioning=true) '
               f"GROUP BY 1")
        t0 = time.perf_counter()
        table = con.sql(sql, params=[case.data.glob]).to_arrow_table()
        return time.perf_counter() - t0, table
    finally:
        con.close()


def _sql_value(column: str) -> str:
    return f'epoch("{column}")' if _is_time(column) else f'"{column}"'


@contestant("duckdb-sum", repeats=3,
            about="scan floor: DuckDB grouped sum() of the same columns, 2 threads")
def _duckdb_sum(case: Case) -> Measurement:
    sc = case.scenario
    cols = sc.x + (sc.y,)
    seconds, table = _duckdb(case, ", ".join(f"sum({_sql_value(c)})" for c in cols))
    return Measurement(seconds, "scan floor")


@contestant("duckdb-regr", repeats=3,
            about="DuckDB regr_slope/intercept/r2/count per group (one feature, no inference)",
            applies=lambda case: len(case.scenario.x) == 1)
def _duckdb_regr(case: Case) -> Measurement:
    sc = case.scenario
    y, x = f'"{sc.y}"', _sql_value(sc.x[0])
    select = ", ".join(f"regr_{f}({y}, {x}) AS {f}" for f in ("slope", "intercept", "r2", "count"))
    seconds, table = _duckdb(case, select)
    case.scratch["duckdb_regr_table"] = table
    return Measurement(seconds, "no standard errors or p-values")


# ---------------------------------------------------------------- pandas + numpy

def _pandas_frame(case: Case):
    """Read the used columns as an analyst would; the read is timed once per scenario."""
    import pandas as pd
    if "pandas_frame" not in case.scratch:
        sc = case.scenario
        t0 = time.perf_counter()
        df = pd.read_parquet(case.data.path, columns=[sc.key, *sc.x, sc.y]).dropna()
        for c in sc.x:
            if _is_time(c):
                df[c] = df[c].astype("int64") / 1e9     # seconds since the epoch
        case.scratch["pandas_frame"] = df
        case.scratch["pandas_read_s"] = time.perf_counter() - t0
    return case.scratch["pandas_frame"], case.scratch["pandas_read_s"]


def _sample(df, key: str, groups: int, limit: int, seed: int):
    """Rows of ``limit`` random groups (all rows when there are not more groups)."""
    if groups <= limit:
        return df
    keys = np.random.default_rng(seed).choice(df[key].unique(), size=limit, replace=False)
    return df[df[key].isin(keys)]


def _extrapolated(read_s: float, loop_s: float, sub_rows: int, rows: int, what: str) -> Measurement:
    """Read time as measured plus the loop time scaled by rows (linear in rows).

    ``rows`` and ``sub_rows`` count the rows left after dropping nulls, in
    the whole frame and in the sampled groups.
    """
    scale = rows / max(sub_rows, 1)
    sampled = sub_rows < rows
    note = (f"{what}: loop timed on {sub_rows:,} rows, scaled x{scale:.1f} by rows"
            if sampled else "")
    return Measurement(read_s + loop_s * scale, note, sampled=sampled,
                       detail={"read_s": read_s, "loop_s": loop_s, "loop_rows": sub_rows})


@contestant("pandas-lstsq", repeats=1,
            about="pandas.read_parquet + groupby loop of numpy.linalg.lstsq (coefficients only)")
def _pandas_lstsq(case: Case) -> Measurement:
    sc = case.scenario
    df, read_s = _pandas_frame(case)
    sub = _sample(df, sc.key, case.groups, PANDAS_MAX_GROUPS, seed=1)
    xs = list(sc.x)
    t0 = time.perf_counter()
    coefs = {}
    for k, g in sub.groupby(sc.key, sort=False):
        X = np.column_stack([np.ones(len(g)), g[xs].to_numpy(dtype=np.float64)])
        coefs[k] = np.linalg.lstsq(X, g[sc.y].to_numpy(), rcond=None)[0]
    loop_s = time.perf_counter() - t0
    return _extrapolated(read_s, loop_s, len(sub), len(df), f"{len(coefs):,} groups")


@contestant("statsmodels-ols", repeats=1,
            about="statsmodels OLS per group with full inference (sampled groups)")
def _statsmodels(case: Case) -> Measurement:
    try:
        import statsmodels.api as sm
    except ImportError as exc:
        raise Unavailable(f"statsmodels not importable ({exc})") from None
    sc = case.scenario
    df, read_s = _pandas_frame(case)
    sub = _sample(df, sc.key, case.groups, STATSMODELS_GROUPS, seed=2)
    xs = list(sc.x)
    t0 = time.perf_counter()
    n = 0
    for _, g in sub.groupby(sc.key, sort=False):
        X = sm.add_constant(g[xs].to_numpy(dtype=np.float64), has_constant="add")
        fit = sm.OLS(g[sc.y].to_numpy(), X).fit()
        # touch what trendmill reports so it is really computed
        fit.bse, fit.tvalues, fit.pvalues, fit.conf_int(), fit.rsquared, fit.fvalue
        n += 1
    loop_s = time.perf_counter() - t0
    return _extrapolated(read_s, loop_s, len(sub), len(df), f"{n} groups")
