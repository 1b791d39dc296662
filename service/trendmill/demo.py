"""Invented demo data: a cold-chain operator's freezer fleet, partitioned by day.

Every freezer reports every ``interval_s`` seconds (with a little jitter) its
cabinet temperature, the ambient temperature of its site, how long the door was
open in the interval, the compressor duty cycle and the supply voltage. Most
cabinets hold their setpoint; a few (``warming_fraction``) warm steadily by
0.2-1.5 degC per day -- the ones a technician should visit. The true drift of
each freezer is returned so tests and demos can check a fit recovers it.

Layout (hive partitions, one directory per day from 2026-01-01)::

    out_dir/day=2026-01-01/part-0.parquet
    out_dir/day=2026-01-01/part-1.parquet     (files_per_day > 1)
    out_dir/day=2026-01-02/part-0.parquet
    ...

Rows inside a file are sorted by freezer, then time. The data is generated in
blocks of freezers, each block-day from its own seeded stream, so the values
depend only on the data parameters (``freezers, days, interval_s, sites, seed,
warming_fraction``), never on ``files_per_day`` or ``row_group_rows``: the same
fleet can be written with any file layout. Memory stays bounded by one block
plus one row group, whatever the size.

The data is invented; it is not, and does not resemble, any real fleet.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import sys
import tempfile
from datetime import date, timedelta
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from .engine.errors import Conflict, SpecError

__all__ = ["generate_fleet", "fleet_schema", "START_DAY"]

START_DAY = date(2026, 1, 1)
_START_NS = int(np.datetime64(START_DAY.isoformat(), "ns").astype(np.int64))
_DAY_S = 86_400
#: about this many rows are generated at once (block of freezers x one day)
_BLOCK_ROWS = 262_144
_DEFAULT_ROW_GROUP = 1 << 20
_NULL_FRACTION = 0.001
# stream ids: each kind of random draw has its own SeedSequence branch so that
# adding a draw to one kind never shifts the values of another
_S_FREEZER, _S_SITE, _S_WEATHER, _S_BLOCK = 0, 1, 2, 3


def fleet_schema() -> pa.Schema:
    """Schema of every file the generator writes (the ``day`` key lives in the path)."""
    return pa.schema([
        ("site", pa.string()),
        ("freezer_id", pa.int64()),
        ("ts", pa.timestamp("ns", tz="UTC")),
        ("cabinet_temp_c", pa.float64()),
        ("ambient_temp_c", pa.float64()),
        ("door_open_s", pa.int32()),
        ("compressor_duty", pa.float32()),
        ("supply_voltage_v", pa.float64()),
    ])


def _check_int(name: str, value: object, low: int, high: int | None = None) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise SpecError(name, f"expected an integer, got {value!r}")
    value = int(value)
    if value < low or (high is not None and value > high):
        bound = f">= {low}" if high is None else f"between {low} and {high}"
        raise SpecError(name, f"{value} must be {bound}")
    return value


def _fleet_params(freezers: int, sites: int, seed: int, warming_fraction: float,
                  interval_s: int) -> dict:
    """Static per-freezer and per-site parameters (small: O(freezers))."""
    rng = np.random.default_rng([seed, _S_FREEZER])
    jitter = min(0.1 * interval_s, 15.0)
    slope = rng.normal(0.0, 0.01, freezers)           # healthy: ~0 degC/day
    n_warm = int(round(warming_fraction * freezers))
    warm = rng.choice(freezers, size=n_warm, replace=False) if n_warm else np.empty(0, np.int64)
    slope[warm] = rng.uniform(0.2, 1.5, n_warm)
    p = {
        "jitter": jitter,
        "site": rng.integers(0, sites, freezers),
        "setpoint": rng.uniform(-22.0, -18.0, freezers),
        "slope": slope,
        "ambient_coef": rng.normal(0.05, 0.01, freezers),
        "door_rate": rng.uniform(0.005, 0.05, freezers),   # chance per reading
        "noise_sd": rng.uniform(0.15, 0.4, freezers),
        "phase_s": rng.uniform(jitter, interval_s - jitter, freezers),
        "duty_base": rng.uniform(0.25, 0.45, freezers),
        "volt_coef": rng.normal(-0.01, 0.003, freezers),
    }
    srng = np.random.default_rng([seed, _S_SITE])
    p["amb_mean"] = srng.uniform(16.0, 28.0, sites)
    p["amb_amp"] = srng.uniform(1.5, 5.0, sites)
    p["amb_peak_h"] = srng.uniform(13.0, 17.0, sites)
    p["volt_mean"] = srng.normal(230.0, 3.0, sites)
    return p


def _block(p: dict, day: int, f0: int, f1: int, n: int, interval_s: int, seed: int,
           weather: np.ndarray, site_names: pa.Array) -> pa.Table:
    """Readings of freezers ``f0..f1-1`` on day ``day``: a (freezers x n) grid, raveled."""
    rng = np.random.default_rng([seed, _S_BLOCK, day, f0])
    nf = f1 - f0
    shape = (nf, n)
    sl = slice(f0, f1)
    site = p["site"][sl]
    # seconds since the start of the first day; float64 holds them to well below 1 ns
    t = (day * _DAY_S + np.arange(n, dtype=np.float64) * interval_s)[None, :] \
        + p["phase_s"][sl, None] + rng.uniform(-p["jitter"], p["jitter"], shape)
    hour = (t % _DAY_S) / 3600.0
    s = site[:, None]
    ambient = (p["amb_mean"][s] + weather[s]
               + p["amb_amp"][s] * np.cos(2.0 * np.pi * (hour - p["amb_peak_h"][s]) / 24.0)
               + rng.normal(0.0, 0.3, shape))
    # doors open more often in working hours
    busy = np.where((hour >= 6.0) & (hour < 20.0), 1.6, 0.3)
    opened = np.flatnonzero(rng.random(shape) < p["door_rate"][sl, None] * busy)
    door = np.zeros(nf * n, dtype=np.int32)
    door[opened] = rng.integers(5, min(interval_s, 180) + 1, opened.size, dtype=np.int32)
    door = door.reshape(shape)
    voltage = p["volt_mean"][s] + rng.normal(0.0, 1.5, shape)
    slope = p["slope"][sl, None]
    cabinet = (p["setpoint"][sl, None] + slope * (t / _DAY_S)
               + p["ambient_coef"][sl, None] * (ambient - 22.0)
               + 0.02 * door
               + p["volt_coef"][sl, None] * (voltage - 230.0)
               + p["noise_sd"][sl, None] * rng.standard_normal(shape))
    # a worn compressor (warming cabinet) works harder
    duty = (p["duty_base"][sl, None] + 0.012 * (ambient - 22.0) + 0.002 * door
            + 0.15 * np.minimum(slope, 1.0) + rng.normal(0.0, 0.03, shape))
    duty = np.clip(duty, 0.0, 1.0).astype(np.float32)
    missing = rng.random(nf * n) < _NULL_FRACTION   # sensor dropouts
    ts_ns = _START_NS + np.rint(t.ravel() * 1e9).astype(np.int64)
    ids = np.repeat(np.arange(f0 + 1, f1 + 1, dtype=np.int64), n)
    return pa.Table.from_arrays([
        site_names.take(pa.array(np.repeat(site, n).astype(np.int32))),
        pa.array(ids),
        pa.array(ts_ns).cast(pa.timestamp("ns", tz="UTC")),
        pa.array(cabinet.ravel(), mask=missing),
        pa.array(ambient.ravel()),
        pa.array(door.ravel()),
        pa.array(duty.ravel()),
        pa.array(voltage.ravel()),
    ], schema=fleet_schema())


class _RowGroupWriter:
    """Writes tables to one Parquet file in row groups of exactly ``rows`` (last one shorter)."""

    def __init__(self, path: Path, rows: int) -> None:
        self._rows = rows
        self._pending: list[pa.Table] = []
        self._n = 0
        # dictionary-encode only the site names; numbers do not repeat enough to pay
        self._writer = pq.ParquetWriter(path, fleet_schema(), compression="snappy",
                                        use_dictionary=["site"])

    def write(self, table: pa.Table) -> None:
        self._pending.append(table)
        self._n += table.num_rows
        if self._n >= self._rows:
            whole = pa.concat_tables(self._pending)
            cut = (self._n // self._rows) * self._rows
            self._writer.write_table(whole.slice(0, cut), row_group_size=self._rows)
            rest = whole.slice(cut)
            self._pending, self._n = ([rest], rest.num_rows) if rest.num_rows else ([], 0)

    def close(self) -> None:
        if self._n:
            self._writer.write_table(pa.concat_tables(self._pending), row_group_size=self._rows)
        self._writer.close()


def generate_fleet(out_dir, *, freezers: int = 200, days: int = 7, interval_s: int = 300,
                   sites: int = 8, seed: int = 0, warming_fraction: float = 0.05,
                   row_group_rows: int | None = None, files_per_day: int = 1) -> dict:
    """Write the invented freezer-fleet dataset as hive-partitioned Parquet.

    Parameters
    ----------
    out_dir : str or Path
        Directory to create (it may exist if empty). The dataset is built in a
        hidden sibling directory and renamed into place, so a failure leaves
        no partial output.
    freezers : int
        Number of freezers (groups); ids are ``1..freezers``.
    days : int
        Number of day partitions, from 2026-01-01.
    interval_s : int
        Seconds between readings; each freezer reports ``86400 // interval_s``
        times a day.
    sites : int
        Number of sites (``site-01``...); each has its own ambient daily cycle.
    seed : int
        Seed of ``numpy.random.default_rng``; same parameters, same bytes of data.
    warming_fraction : float
        Share of freezers that warm by 0.2-1.5 degC/day (the rest drift ~0).
    row_group_rows : int or None
        Rows per Parquet row group (default 1,048,576).
    files_per_day : int
        Files per day directory; freezers are split into contiguous ranges.

    Returns
    -------
    dict
        ``path``, ``rows``, ``files``, ``bytes``, ``freezers``, ``days``,
        ``readings_per_day``, ``start`` (ISO date), ``freezer_id`` (int64, shape
        (freezers,)), ``slope_c_per_day`` (float64, the true drift of each
        freezer) and ``warming_ids`` (ids of the warming freezers).
    """
    freezers = _check_int("freezers", freezers, 1)
    days = _check_int("days", days, 1, 36_500)
    interval_s = _check_int("interval_s", interval_s, 10, _DAY_S)
    sites = _check_int("sites", sites, 1, 99_999)
    seed = _check_int("seed", seed, 0)
    files_per_day = _check_int("files_per_day", files_per_day, 1, freezers)
    rg_rows = _DEFAULT_ROW_GROUP if row_group_rows is None else _check_int(
        "row_group_rows", row_group_rows, 1)
    if isinstance(warming_fraction, bool) or not isinstance(warming_fraction, (int, float)) \
            or not 0.0 <= warming_fraction <= 1.0:
        raise SpecError("warming_fraction",
                        f"{warming_fraction!r} must be between 0 and 1")

    out = Path(out_dir)
    if out.exists() and (not out.is_dir() or any(out.iterdir())):
        raise Conflict(f"out_dir: {str(out)!r} already exists and is not an empty directory")
    out.parent.mkdir(parents=True, exist_ok=True)

    n = _DAY_S // interval_s
    p = _fleet_params(freezers, sites, seed, float(warming_fraction), interval_s)
    site_names = pa.array([f"site-{k + 1:02d}" for k in range(sites)])
    block = max(1, _BLOCK_ROWS // n)
    ranges = np.array_split(np.arange(freezers), files_per_day)

    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.", suffix=".tmp", dir=out.parent))
    try:
        n_bytes = n_files = 0
        for d in range(days):
            weather = np.random.default_rng([seed, _S_WEATHER, d]).normal(0.0, 1.0, sites)
            day_dir = tmp / f"day={(START_DAY + timedelta(days=d)).isoformat()}"
            day_dir.mkdir()
            for k, r in enumerate(ranges):
                a, b = int(r[0]), int(r[-1]) + 1
                path = day_dir / f"part-{k}.parquet"
                w = _RowGroupWriter(path, rg_rows)
                # blocks are aligned to multiples of `block` so values do not
                # depend on where file boundaries fall
                for b0 in range((a // block) * block, b, block):
                    t = _block(p, d, b0, min(b0 + block, freezers), n, interval_s, seed,
                               weather, site_names)
                    lo, hi = max(a, b0), min(b, b0 + block)
                    w.write(t.slice((lo - b0) * n, (hi - lo) * n))   # zero-copy
                w.close()
                n_files += 1
                n_bytes += path.stat().st_size
        if out.exists():
            out.rmdir()          # empty, checked above
        os.replace(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise

    ids = np.arange(1, freezers + 1, dtype=np.int64)
    return {
        "path": str(out),
        "rows": freezers * days * n,
        "files": n_files,
        "bytes": n_bytes,
        "freezers": freezers,
        "days": days,
        "readings_per_day": n,
        "start": START_DAY.isoformat(),
        "freezer_id": ids,
        "slope_c_per_day": p["slope"].copy(),
        "warming_ids": ids[p["slope"] >= 0.2],
    }


def _main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(prog="python -m trendmill.demo",
                                 description="Write the invented freezer-fleet dataset.")
    ap.add_argument("out_dir")
    ap.add_argument("--freezers", type=int, default=200)
    ap.add_argument("--days", type=int, default=7)
    ap.add_argument("--interval-s", type=int, default=300)
    ap.add_argument("--sites", type=int, default=8)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--warming-fraction", type=float, default=0.05)
    ap.add_argument("--row-group-rows", type=int, default=None)
    ap.add_argument("--files-per-day", type=int, default=1)
    a = ap.parse_args(argv)
    try:
        s = generate_fleet(a.out_dir, freezers=a.freezers, days=a.days, interval_s=a.interval_s,
                           sites=a.sites, seed=a.seed, warming_fraction=a.warming_fraction,
                           row_group_rows=a.row_group_rows, files_per_day=a.files_per_day)
    except (SpecError, Conflict) as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    summary = {k: v for k, v in s.items() if not isinstance(v, np.ndarray)}
    summary["warming_freezers"] = int(s["warming_ids"].size)
    print(json.dumps(summary))
    return 0


if __name__ == "__main__":
    sys.exit(_main())
