"""Timestamps and dates as the feature: slopes against an exact rational reference.

Epoch nanoseconds (~1.7e18) do not fit a double's 53 bits; a fit from raw sums of
x² loses every digit. The reference here is exact: the timestamps are Python
integers, the doubles of y are converted exactly to fractions, and the
least-squares slope and intercept are computed with ``fractions.Fraction``, so
the only rounding is the final conversion to float.

The engine reports x in seconds (timestamps) or days (dates); the intercept is
the fitted value at the Unix epoch.
"""

from __future__ import annotations

import datetime as dt
import math
from fractions import Fraction

import numpy as np
import pyarrow as pa
import pytest

from helpers import fit, rows_by_key, write_parquet

RTOL = 1e-9
NS = 1_000_000_000


def exact_line(x_units: list[int], y: np.ndarray, per_unit: int) -> dict[str, float]:
    """Exact least-squares line of y on x = x_units / per_unit (Fractions throughout).

    Returns slope, intercept (at x = 0), the slope's std error and the residual
    std error; the square roots are taken of exact rationals in float at the end.
    """
    xs = [Fraction(v, per_unit) for v in x_units]
    ys = [Fraction(float(v)) for v in y]      # exact value of each double
    n = len(xs)
    mx = sum(xs) / n
    my = sum(ys) / n
    sxx = sum((x - mx) ** 2 for x in xs)
    sxy = sum((x - mx) * (v - my) for x, v in zip(xs, ys))
    slope = sxy / sxx
    intercept = my - slope * mx
    sse = sum((v - intercept - slope * x) ** 2 for x, v in zip(xs, ys))
    sigma2 = sse / (n - 2)
    return {"slope": float(slope), "intercept": float(intercept),
            "slope_se": math.sqrt(sigma2 / sxx), "rse": math.sqrt(sigma2)}


def _check(row: dict, ref: dict, x: str, label: str) -> None:
    for col, key in ((f"{x}_estimate", "slope"), ("intercept_estimate", "intercept"),
                     (f"{x}_std_error", "slope_se"), ("residual_std_error", "rse")):
        np.testing.assert_allclose(row[col], ref[key], rtol=RTOL, atol=0, err_msg=f"{label}: {col}")


def _hour_groups(rng, groups: int, per_group: int, unit_per_s: int):
    """Per group: a start near 1.7e18 ns (days to a year apart), an hour of readings."""
    keys, stamps, temps = [], [], []
    for g in range(groups):
        start = 1_700_000_000 * unit_per_s + int(rng.integers(0, 365 * 86_400)) * unit_per_s \
            + int(rng.integers(0, unit_per_s))
        offsets = np.sort(rng.integers(0, 3600 * unit_per_s, per_group))
        ts = [start + int(o) for o in offsets]
        drift = (g - 3) * 1e-4                     # degrees per second
        secs = offsets / unit_per_s
        temps.append(-18.0 + drift * secs + rng.normal(0, 0.05, per_group))
        stamps.extend(ts)
        keys.extend([f"freezer-{g:02d}"] * per_group)
    return keys, stamps, np.concatenate(temps)


@pytest.mark.parametrize("solver", ["normal", "qr"])
@pytest.mark.parametrize("unit,per_s", [("ns", NS), ("us", 1_000_000)])
def test_timestamp_slope_exact(tmp_path, unit, per_s, solver):
    rng = np.random.default_rng(31)
    keys, stamps, temps = _hour_groups(rng, 8, 500, per_s)
    order = rng.permutation(len(keys))           # groups interleaved over row groups
    table = pa.table({"freezer": pa.array([keys[i] for i in order]),
                      "ts": pa.array([stamps[i] for i in order], pa.timestamp(unit)),
                      "cabinet_temp_c": temps[order]})
    path = write_parquet(tmp_path / "ts.parquet", table, row_group_size=700)
    rows = rows_by_key(fit(path, "cabinet_temp_c", "ts", by=("freezer",), solver=solver), ["freezer"])
    assert len(rows) == 8
    keys_np = np.array(keys)
    for (key,), row in rows.items():
        idx = np.nonzero(keys_np == key)[0]
        assert row["status"] == "ok", row["status"]
        # reference: exact Fraction least squares on the integer timestamps
        ref = exact_line([stamps[i] for i in idx], temps[idx], per_s)
        _check(row, ref, "ts", f"group {key} (timestamp[{unit}], {solver})")


@pytest.mark.parametrize("solver", ["normal", "qr"])
def test_timestamp_with_time_zone_and_second_feature(tmp_path, solver):
    # A zoned timestamp is the same instant count; a second, ordinary feature beside it.
    rng = np.random.default_rng(32)
    n = 400
    start = 1_760_000_000 * NS + 123_456_789
    stamps = [start + int(v) for v in np.sort(rng.integers(0, 3600 * NS, n))]
    ambient = rng.uniform(15, 30, n)
    temp = -20 + 2e-4 * (np.array(stamps, dtype=object) - start).astype(float) / NS + 0.03 * ambient \
        + rng.normal(0, 0.05, n)
    path = write_parquet(tmp_path / "tz.parquet",
                         pa.table({"ts": pa.array(stamps, pa.timestamp("ns", tz="UTC")),
                                   "ambient_temp_c": ambient, "cabinet_temp_c": temp}))
    row = fit(path, "cabinet_temp_c", ["ts", "ambient_temp_c"], solver=solver).to_pylist()[0]
    # reference: exact normal equations in Fractions for the two-feature model
    xs = [Fraction(v, NS) for v in stamps]
    zs = [Fraction(float(v)) for v in ambient]
    ys = [Fraction(float(v)) for v in temp]
    mx, mz, my = sum(xs) / n, sum(zs) / n, sum(ys) / n
    sxx = sum((a - mx) ** 2 for a in xs)
    szz = sum((b - mz) ** 2 for b in zs)
    sxz = sum((a - mx) * (b - mz) for a, b in zip(xs, zs))
    sxy = sum((a - mx) * (c - my) for a, c in zip(xs, ys))
    szy = sum((b - mz) * (c - my) for b, c in zip(zs, ys))
    det = sxx * szz - sxz ** 2
    bx = (szz * sxy - sxz * szy) / det
    bz = (sxx * szy - sxz * sxy) / det
    b0 = my - bx * mx - bz * mz
    for col, want in (("ts_estimate", bx), ("ambient_temp_c_estimate", bz), ("intercept_estimate", b0)):
        np.testing.assert_allclose(row[col], float(want), rtol=RTOL, err_msg=f"{col} ({solver})")


@pytest.mark.parametrize("solver", ["normal", "qr"])
@pytest.mark.parametrize("date_type", [pa.date32(), pa.date64()], ids=["date32", "date64"])
def test_date_slope_exact(tmp_path, date_type, solver):
    rng = np.random.default_rng(33)
    epoch = dt.date(1970, 1, 1)
    keys, days, temps = [], [], []
    for g in range(5):
        first = 19_000 + int(rng.integers(0, 2000))
        d = np.sort(rng.integers(first, first + 120, 90))
        keys += [g] * len(d)
        days += [int(v) for v in d]
        temps.append(-19 + (g - 2) * 0.01 * (d - first) + rng.normal(0, 0.1, len(d)))
    temps = np.concatenate(temps)
    table = pa.table({"freezer": keys,
                      "day": pa.array([epoch + dt.timedelta(days=v) for v in days], date_type),
                      "cabinet_temp_c": temps})
    path = write_parquet(tmp_path / "days.parquet", table, row_group_size=100)
    rows = rows_by_key(fit(path, "cabinet_temp_c", "day", by=("freezer",), solver=solver), ["freezer"])
    keys_np = np.array(keys)
    for (g,), row in rows.items():
        idx = np.nonzero(keys_np == g)[0]
        # reference: exact Fraction least squares on integer day numbers (slope per day)
        ref = exact_line([days[i] for i in idx], temps[idx], 1)
        _check(row, ref, "day", f"group freezer={g} ({date_type}, {solver})")


def test_naive_float_seconds_would_fail():
    # Why the exact reference matters: the same slope from raw float sums of squares
    # of epoch seconds (a careless single-pass formula) is far off -- so the check above
    # can tell a careful fit from a careless one.
    rng = np.random.default_rng(34)
    n = 500
    x_int = [1_700_000_000 * NS + int(v) for v in np.sort(rng.integers(0, 3600 * NS, n))]
    y = 0.5 + 1e-3 * (np.array(x_int, dtype=object) - x_int[0]).astype(float) / NS + rng.normal(0, 0.01, n)
    ref = exact_line(x_int, y, NS)
    x = np.array(x_int, dtype=np.float64) / NS
    naive = (n * np.sum(x * y) - np.sum(x) * np.sum(y)) / (n * np.sum(x * x) - np.sum(x) ** 2)
    # (measured: ~1e-4 relative error, five orders of magnitude outside RTOL)
    assert abs(naive - ref["slope"]) / abs(ref["slope"]) > 1e3 * RTOL


@pytest.mark.parametrize("solver", ["normal", "qr"])
def test_prediction_intervals_at_epoch_scale_timestamps(tmp_path, solver):
    # The intercept of a timestamp fit sits at 1970, so d V d^T for a point in the
    # data cancels ~8 digits; the prediction is centred on the stored feature means.
    # Reference: statsmodels OLS get_prediction on exactly shifted seconds.
    import statsmodels.api as sm
    from trendmill.engine.predict import predict

    rng = np.random.default_rng(41)
    keys, stamps, temps = _hour_groups(rng, 3, 400, NS)
    table = pa.table({"freezer": keys, "ts": pa.array(stamps, pa.timestamp("ns")),
                      "cabinet_temp_c": temps})
    path = write_parquet(tmp_path / "ts.parquet", table)
    rows = rows_by_key(fit(path, "cabinet_temp_c", "ts", by=("freezer",), solver=solver), ["freezer"])
    keys_np = np.array(keys)
    for (key,), row in rows.items():
        idx = np.nonzero(keys_np == key)[0]
        ints = np.array([stamps[i] for i in idx], dtype=np.int64)
        x0 = int(ints[0])
        ols = sm.OLS(temps[idx], sm.add_constant((ints - x0) / NS)).fit()
        at = ints[[10, 200, 390]]
        got = predict(((at - x0) / NS + x0 / NS)[:, None],
                      estimates=[row["intercept_estimate"], row["ts_estimate"]],
                      covariance=row["covariance"], residual_std_error=row["residual_std_error"],
                      df_residual=row["df_residual"], confidence=0.95,
                      feature_means=[row["ts_mean"]], weight_sum=row["weight_sum"])
        want = ols.get_prediction(sm.add_constant((at - x0) / NS, has_constant="add")) \
                  .summary_frame(alpha=0.05)
        err = f"group {key} ({solver})"
        # A query point in float seconds near 1.7e9 is itself rounded by ~2e-7 s, which
        # moves the mean by |slope| * 2e-7: 1e-10 relative is what the inputs allow.
        np.testing.assert_allclose(got.mean, want["mean"], rtol=1e-10, err_msg=err)
        # without centring this is ~1e-7 (d V d^T cancels against the epoch intercept)
        np.testing.assert_allclose(got.mean_std_error, want["mean_se"], rtol=1e-10, err_msg=err)
        np.testing.assert_allclose(got.prediction_high, want["obs_ci_upper"], rtol=1e-10, err_msg=err)
