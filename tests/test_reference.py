"""Every output column, group by group, against statsmodels OLS/WLS (and numpy's lstsq).

The data are real Parquet files fitted through the whole engine. Features sit at
very different scales and offsets (1e-3, 1e6 + noise, 1e9 + spread), which a fit
from raw sums of squares cannot survive.

Reference design. statsmodels fits the raw design by a pseudo-inverse; with
columns at 1e6 and 1e9 beside the constant its scaled condition number is ~1e15
and its own answer is wrong in the first digit, so it is not a reference there.
It is given instead the same data with the offsets subtracted (``b - 1e6``,
``c - 1e9``: exact in float64 by Sterbenz's lemma, the values lie within a factor
two of the offset), a well-conditioned and algebraically identical model. The
slopes, their inference, R², F and the residuals do not change under that shift;
the intercept of the original model is the linear combination
``b0' - sum_j c_j b_j``, whose estimate, std error, t, p and interval statsmodels
itself gives with ``t_test`` and whose covariance row with ``cov_params(r_matrix=)``.
"""

from __future__ import annotations

import datetime as dt
import numpy as np
import pandas as pd
import pyarrow as pa
import pytest
import statsmodels.api as sm

from helpers import fit, rows_by_key, write_parquet

RTOL = 1e-8
SOLVERS = ("normal", "qr")

STATS = ("r_squared", "adj_r_squared", "residual_std_error", "f_statistic", "f_p_value")


# ---------------------------------------------------------------------------
# the statsmodels reference


def sm_expected(x: np.ndarray, y: np.ndarray, *, terms: list[str], weights=None,
                intercept: bool = True, confidence: float = 0.95, shift=None) -> dict:
    """Expected result columns of one group from statsmodels OLS (or WLS with ``weights``).

    ``shift`` (p,) is subtracted from the features before statsmodels sees them
    (exactly, see the module docstring); the reported intercept is transformed
    back by statsmodels' own ``t_test`` / ``cov_params`` on the contrast matrix.
    """
    x = np.asarray(x, dtype=np.float64)
    p = x.shape[1]
    shift = np.zeros(p) if shift is None else np.asarray(shift, dtype=np.float64)
    xs = x - shift
    design = np.column_stack([np.ones(len(y)), xs]) if intercept else xs
    # hasconst: no intercept means no constant, even where a column is nearly one
    # (statsmodels would otherwise detect an implicit constant and centre R²)
    model = (sm.OLS(y, design, hasconst=intercept) if weights is None
             else sm.WLS(y, design, weights=weights, hasconst=intercept))
    res = model.fit()
    k = design.shape[1]
    # contrast matrix: original coefficients = T @ coefficients of the shifted model
    tmat = np.eye(k)
    if intercept:
        tmat[0, 1:] = -shift
    test = res.t_test(tmat)
    ci = test.conf_int(alpha=1.0 - confidence)
    cov = np.asarray(res.cov_params(r_matrix=tmat))
    out = {"n_rows": len(y), "df_residual": res.df_resid,
           "r_squared": res.rsquared, "adj_r_squared": res.rsquared_adj,
           "residual_std_error": np.sqrt(res.scale), "f_statistic": res.fvalue,
           "f_p_value": res.f_pvalue, "covariance": cov.ravel()}
    effect, sd = np.ravel(test.effect), np.ravel(test.sd)
    tval, pval = np.ravel(test.tvalue), np.ravel(test.pvalue)
    for i, term in enumerate(terms):
        out[f"{term}_estimate"] = effect[i]
        out[f"{term}_std_error"] = sd[i]
        out[f"{term}_t_value"] = tval[i]
        out[f"{term}_p_value"] = pval[i]
        out[f"{term}_ci_low"] = ci[i, 0]
        out[f"{term}_ci_high"] = ci[i, 1]
    return out


def lstsq_estimates(x, y, *, weights=None, intercept=True, shift=None) -> np.ndarray:
    """Estimates from numpy's lstsq on the (sqrt-weighted, shifted) design."""
    x = np.asarray(x, dtype=np.float64)
    shift = np.zeros(x.shape[1]) if shift is None else np.asarray(shift, dtype=np.float64)
    design = np.column_stack([np.ones(len(y)), x - shift]) if intercept else x - shift
    sw = np.ones(len(y)) if weights is None else np.sqrt(weights)
    beta = np.linalg.lstsq(design * sw[:, None], y * sw, rcond=None)[0]
    if intercept:
        beta[0] -= shift @ beta[1:]
    return beta


def assert_row_matches(row: dict, expected: dict, label: str, *, rtol: float = RTOL) -> None:
    """Every expected column of one result row, relative ``rtol`` (NaN must match NaN)."""
    for col, want in expected.items():
        got = row[col]
        if col in ("n_rows", "df_residual"):
            assert got == int(want), f"{label}: {col} = {got}, expected {want}"
            continue
        got = np.asarray(got if got is not None else np.nan, dtype=np.float64)
        np.testing.assert_allclose(got, np.asarray(want, dtype=np.float64), rtol=rtol, atol=0,
                                   err_msg=f"{label}: column {col}")


# ---------------------------------------------------------------------------
# multi-group data at very different scales


def scaled_groups(seed: int, *, intercept: bool):
    """Rows of six groups: features a ~ 1e-3, b ~ 1e6 (+ noise), c ~ 1e9 + spread.

    With an intercept b is 1e6 + N(0, 1) (an offset); without one b is 1e6 * N(0, 1)
    (a scale), since two offset columns and no intercept are near-collinear by
    nature, not by the engine's doing. Coefficients give |t| of a few to a few
    tens, so p-values stay well inside double range.
    """
    rng = np.random.default_rng(seed)
    frames = []
    for g, n in enumerate([9, 25, 60, 140, 333, 41]):
        a = 1e-3 * rng.normal(size=n)
        b = 1e6 + rng.normal(size=n) if intercept else 1e6 * rng.normal(size=n)
        c = 1e9 + rng.uniform(0.0, 1000.0, n)
        sigma = 0.5 + g / 4
        if intercept:
            mu = 3.0 - g + 900.0 * a + (0.3 + 0.1 * g) * (b - 1e6) + 2e-3 * (c - 1e9)
        else:
            mu = 900.0 * a + 3e-7 * b + (2.0 + g) * 1e-9 * c
        y = mu + rng.normal(0.0, sigma, n)
        w = rng.uniform(0.2, 3.0, n)
        frames.append(pd.DataFrame({"freezer": g, "a": a, "b": b, "c": c, "y": y, "w": w}))
    df = pd.concat(frames, ignore_index=True)
    # interleave the groups, as real data are
    df = df.sample(frac=1.0, random_state=seed).reset_index(drop=True)
    return df


@pytest.fixture(scope="module")
def scaled_sources(tmp_path_factory):
    root = tmp_path_factory.mktemp("scaled")
    out = {}
    for intercept in (True, False):
        df = scaled_groups(2024 + intercept, intercept=intercept)
        # two files and small row groups: the merge is exercised too
        half = len(df) // 2
        base = root / ("with" if intercept else "without")
        write_parquet(base / "part-0.parquet", pa.Table.from_pandas(df.iloc[:half], preserve_index=False),
                      row_group_size=100)
        write_parquet(base / "part-1.parquet", pa.Table.from_pandas(df.iloc[half:], preserve_index=False),
                      row_group_size=100)
        out[intercept] = (str(base), df)
    return out


@pytest.mark.parametrize("solver", SOLVERS)
@pytest.mark.parametrize("confidence", [0.95, 0.9])
@pytest.mark.parametrize("weighted,intercept", [
    pytest.param(False, True, id="ols-intercept"),
    pytest.param(False, False, id="ols-no_intercept"),
    pytest.param(True, True, id="wls-intercept"),
    pytest.param(True, False, id="wls-no_intercept"),
])
def test_every_column_matches_statsmodels(scaled_sources, weighted, intercept, confidence, solver):
    source, df = scaled_sources[intercept]
    table = fit(source, "y", ["a", "b", "c"], by=("freezer",), weight="w" if weighted else None,
                intercept=intercept, confidence=confidence, solver=solver)
    terms = (["intercept"] if intercept else []) + ["a", "b", "c"]
    shift = [0.0, 1e6, 1e9] if intercept else None
    rows = rows_by_key(table, ["freezer"])
    assert sorted(rows) == [(g,) for g in range(6)]
    for (g,), row in rows.items():
        part = df[df.freezer == g]
        x, y = part[["a", "b", "c"]].to_numpy(), part["y"].to_numpy()
        w = part["w"].to_numpy() if weighted else None
        label = f"group freezer={g} ({'WLS' if weighted else 'OLS'}, {solver}, conf {confidence})"
        assert row["status"] == "ok", f"{label}: {row['status']}"
        # reference: statsmodels OLS / WLS on the exactly shifted design
        assert_row_matches(row, sm_expected(x, y, terms=terms, weights=w, intercept=intercept,
                                            confidence=confidence, shift=shift), label)
        # reference: numpy lstsq for the estimates
        est = [row[f"{t}_estimate"] for t in terms]
        np.testing.assert_allclose(est, lstsq_estimates(x, y, weights=w, intercept=intercept, shift=shift),
                                   rtol=RTOL, err_msg=f"{label}: estimates vs numpy lstsq")
        assert row["n_skipped"] == 0 and row["n_infinite"] == 0


def test_workers_two_matches_statsmodels(scaled_sources):
    # the same check through real worker processes (two files -> two partitions)
    source, df = scaled_sources[True]
    table = fit(source, "y", ["a", "b", "c"], by=("freezer",), weight="w", workers=2)
    for (g,), row in rows_by_key(table, ["freezer"]).items():
        part = df[df.freezer == g]
        # reference: statsmodels WLS
        assert_row_matches(row, sm_expected(part[["a", "b", "c"]].to_numpy(), part["y"].to_numpy(),
                                            terms=["intercept", "a", "b", "c"], weights=part["w"].to_numpy(),
                                            shift=[0.0, 1e6, 1e9]), f"group freezer={g} (2 workers)")


# ---------------------------------------------------------------------------
# edge cases


def _plain_group(rng, n, *, slope=(1.5, -0.7)):
    x1 = rng.normal(size=n)
    x2 = rng.normal(size=n) * 3
    y = 2.0 + slope[0] * x1 + slope[1] * x2 + rng.normal(0, 0.3, n)
    return x1, x2, y


@pytest.mark.parametrize("solver", SOLVERS)
def test_too_few_rows_no_rows_and_exactly_determined(tmp_path, solver):
    rng = np.random.default_rng(3)
    cols = {"g": [], "x1": [], "x2": [], "y": []}

    def add(g, x1, x2, y):
        cols["g"] += [g] * len(y)
        cols["x1"] += list(x1)
        cols["x2"] += list(x2)
        cols["y"] += list(y)

    add("single", [0.5], [1.0], [3.0])
    ex = rng.normal(size=(3, 2))
    ey = rng.normal(size=3)
    add("exact", ex[:, 0], ex[:, 1], ey)                     # n == k == 3
    add("nulls", [1.0, 2.0, 3.0, 4.0], [0.0, 1.0, 0.0, 1.0], [None] * 4)
    x1, x2, y = _plain_group(rng, 30)
    add("fine", x1, x2, y)
    path = write_parquet(tmp_path / "edge.parquet",
                         pa.table({"g": cols["g"], "x1": pa.array(cols["x1"], pa.float64()),
                                   "x2": pa.array(cols["x2"], pa.float64()),
                                   "y": pa.array(cols["y"], pa.float64())}))
    rows = rows_by_key(fit(path, "y", ["x1", "x2"], by=("g",), solver=solver), ["g"])
    terms = ["intercept", "x1", "x2"]

    single = rows[("single",)]
    assert (single["status"], single["n_rows"], single["df_residual"]) == ("too_few_rows", 1, 0)
    assert all(np.isnan(single[f"{t}_{f}"]) for t in terms for f in ("estimate", "std_error", "p_value"))

    nulls = rows[("nulls",)]
    assert (nulls["status"], nulls["n_rows"], nulls["n_skipped"]) == ("no_rows", 0, 4)
    assert all(np.isnan(nulls[f"{t}_estimate"]) for t in terms)

    exact = rows[("exact",)]
    assert exact["status"] == "exactly_determined" and exact["df_residual"] == 0
    # reference: numpy's direct solve of the square system
    want = np.linalg.solve(np.column_stack([np.ones(3), ex]), ey)
    np.testing.assert_allclose([exact[f"{t}_estimate"] for t in terms], want, rtol=1e-9,
                               err_msg="group exact: estimates vs numpy solve")
    assert all(np.isnan(exact[f"{t}_std_error"]) for t in terms)
    assert np.isnan(exact["residual_std_error"]) and np.isnan(exact["f_statistic"])

    # reference: statsmodels OLS
    assert_row_matches(rows[("fine",)], sm_expected(np.column_stack([x1, x2]), y, terms=terms), "group fine")


def test_group_emptied_by_filter_is_absent(tmp_path):
    # A filter acts before grouping (as SQL's WHERE before GROUP BY): a group none of
    # whose rows pass is not in the result; the others are unaffected.
    rng = np.random.default_rng(4)
    n = 200
    df = pd.DataFrame({"site": rng.choice(["north", "south"], n), "t": rng.normal(size=n)})
    df["y"] = 1 + 2 * df.t + rng.normal(0, 0.1, n)
    path = write_parquet(tmp_path / "f.parquet", pa.Table.from_pandas(df, preserve_index=False))
    table = fit(path, "y", "t", by=("site",), filter="site = 'north'")
    assert table.column("site").to_pylist() == ["north"]
    part = df[df.site == "north"]
    # reference: statsmodels OLS on the pandas-masked rows
    assert_row_matches(table.to_pylist()[0], sm_expected(part[["t"]].to_numpy(), part.y.to_numpy(),
                                                          terms=["intercept", "t"]), "group north")


@pytest.mark.parametrize("solver", SOLVERS)
def test_collinear_feature_is_dropped(tmp_path, solver):
    rng = np.random.default_rng(5)
    n = 80
    x1 = rng.normal(size=n) * 10 + 50
    x3 = rng.normal(size=n)
    y = 1 + 0.5 * x1 - 2 * x3 + rng.normal(0, 0.2, n)
    path = write_parquet(tmp_path / "c.parquet", {"x1": x1, "x2": 2 * x1, "x3": x3, "y": y})
    row = fit(path, "y", ["x1", "x2", "x3"], solver=solver).to_pylist()[0]
    assert row["status"] == "rank_deficient:x2"
    assert all(np.isnan(row[f"x2_{f}"]) for f in ("estimate", "std_error", "t_value", "p_value",
                                                    "ci_low", "ci_high"))
    # reference: statsmodels OLS on x1, x3 alone; df from the rank (n - 3)
    want = sm_expected(np.column_stack([x1, x3]), y, terms=["intercept", "x1", "x3"])
    cov = np.asarray(row["covariance"]).reshape(4, 4)
    assert np.isnan(cov[2]).all() and np.isnan(cov[:, 2]).all()
    row = dict(row, covariance=cov[np.ix_([0, 1, 3], [0, 1, 3])].ravel())
    assert_row_matches(row, want, f"collinear ({solver})")
    assert row["df_residual"] == n - 3


@pytest.mark.parametrize("solver", SOLVERS)
def test_constant_feature_is_dropped(tmp_path, solver):
    # with an intercept a constant feature carries no information
    rng = np.random.default_rng(6)
    n = 50
    x1 = rng.normal(size=n)
    y = 4 - x1 + rng.normal(0, 0.5, n)
    path = write_parquet(tmp_path / "k.parquet", {"x1": x1, "k": np.full(n, 7.25), "y": y})
    row = fit(path, "y", ["x1", "k"], solver=solver).to_pylist()[0]
    assert row["status"] == "rank_deficient:k"
    assert np.isnan(row["k_estimate"]) and np.isnan(row["k_std_error"])
    want = sm_expected(x1[:, None], y, terms=["intercept", "x1"])      # reference: statsmodels OLS
    cov = np.asarray(row["covariance"]).reshape(3, 3)
    assert_row_matches(dict(row, covariance=cov[:2, :2].ravel()), want, f"constant ({solver})")


@pytest.mark.parametrize("solver", SOLVERS)
def test_nan_null_and_inf_rows_are_skipped_and_counted(tmp_path, solver):
    rng = np.random.default_rng(7)
    n = 120
    g = np.repeat(["p", "q"], n // 2)
    x = rng.normal(size=n)
    y = 1 + 3 * x + rng.normal(0, 0.5, n)
    w = rng.uniform(0.5, 2, n)
    nan_x, null_y, null_w, inf_x, inf_y = [0, 61], [5, 70, 71], [9], [12, 100], [13]
    x_list = x.tolist()
    y_list = y.tolist()
    w_list = w.tolist()
    for i in nan_x:
        x_list[i] = float("nan")
    for i in null_y:
        y_list[i] = None
    for i in null_w:
        w_list[i] = None
    for i in inf_x:
        x_list[i] = float("inf") if i % 2 else float("-inf")
    for i in inf_y:
        y_list[i] = float("inf")
    path = write_parquet(tmp_path / "n.parquet", pa.table({"g": g, "x": pa.array(x_list, pa.float64()),
                                                           "y": pa.array(y_list, pa.float64()),
                                                           "w": pa.array(w_list, pa.float64())}))
    bad = set(nan_x + null_y + null_w + inf_x + inf_y)
    keep = np.array([i not in bad for i in range(n)])
    for weighted in (False, True):
        rows = rows_by_key(fit(path, "y", "x", by=("g",), weight="w" if weighted else None, solver=solver),
                           ["g"])
        for key, lo in (("p", 0), ("q", n // 2)):
            idx = np.arange(lo, lo + n // 2)
            skipped = sum(1 for i in idx if i in set(nan_x + null_y + (null_w if weighted else [])))
            infinite = sum(1 for i in idx if i in set(inf_x + inf_y))
            used = idx[keep[idx] if weighted else np.array([i not in (bad - set(null_w)) for i in idx])]
            row = rows[(key,)]
            label = f"group g={key} weighted={weighted} ({solver})"
            assert (row["n_skipped"], row["n_infinite"]) == (skipped, infinite), label
            # reference: statsmodels OLS / WLS on the clean rows only
            assert_row_matches(row, sm_expected(x[used][:, None], y[used], terms=["intercept", "x"],
                                                weights=w[used] if weighted else None), label)


@pytest.mark.parametrize("solver", SOLVERS)
def test_float32_and_int_inputs_equal_float64_fits(tmp_path, solver):
    rng = np.random.default_rng(8)
    n = 300
    g = rng.integers(0, 3, n)
    xi = rng.integers(-5_000, 5_000, n)                    # int64 feature
    big = rng.integers(10**12, 10**12 + 10**6, n)          # int64 near 1e12 (origin subtracted)
    x32 = rng.normal(size=n).astype(np.float32)
    y = 0.01 * xi + 1e-4 * (big - 10**12) + 2 * x32 + rng.normal(0, 1, n)
    y32 = y.astype(np.float32)
    native = write_parquet(tmp_path / "native.parquet",
                           pa.table({"g": g, "xi": pa.array(xi, pa.int32()), "big": big, "x32": x32,
                                     "y32": y32}))
    as64 = write_parquet(tmp_path / "f64.parquet",
                         pa.table({"g": g, "xi": xi.astype(np.float64), "big": big.astype(np.float64),
                                   "x32": x32.astype(np.float64), "y32": y32.astype(np.float64)}))
    got = fit(native, "y32", ["xi", "big", "x32"], by=("g",), solver=solver)
    want = fit(as64, "y32", ["xi", "big", "x32"], by=("g",), solver=solver)
    for col in got.column_names:
        if col in ("g", "status", "n_rows", "df_residual", "n_skipped", "n_infinite"):
            assert got.column(col).to_pylist() == want.column(col).to_pylist(), col
            continue
        if col == "covariance":
            a = np.array(got.column(col).to_pylist())
            b = np.array(want.column(col).to_pylist())
        else:
            a = got.column(col).to_numpy()
            b = want.column(col).to_numpy()
        # reference: the same values fitted as float64 columns (ints shifted in
        # integer arithmetic first, so the agreement is to rounding, not bitwise)
        np.testing.assert_allclose(a, b, rtol=1e-10, err_msg=f"column {col} ({solver})")
    # and the float64 fit against statsmodels for one group
    mask = g == 1
    xs = np.column_stack([xi, big, x32]).astype(np.float64)[mask]
    assert_row_matches(rows_by_key(got, ["g"])[(1,)],
                       sm_expected(xs, y32.astype(np.float64)[mask], terms=["intercept", "xi", "big", "x32"],
                                   shift=[0.0, 1e12, 0.0]), "group g=1 (native types)")


@pytest.mark.parametrize("solver", SOLVERS)
def test_boolean_feature_is_zero_one(tmp_path, solver):
    rng = np.random.default_rng(13)
    n = 150
    door = rng.random(n) < 0.3
    ambient = rng.uniform(15, 30, n)
    y = -18 + 0.8 * door + 0.05 * ambient + rng.normal(0, 0.3, n)
    door_list = door.tolist()
    door_list[7] = None                                   # a null boolean skips its row
    path = write_parquet(tmp_path / "b.parquet", pa.table({"door_open": pa.array(door_list, pa.bool_()),
                                                           "ambient_temp_c": ambient, "y": y}))
    row = fit(path, "y", ["door_open", "ambient_temp_c"], solver=solver).to_pylist()[0]
    keep = np.arange(n) != 7
    assert row["n_skipped"] == 1
    # reference: statsmodels OLS with the booleans as 0.0 / 1.0
    assert_row_matches(row, sm_expected(np.column_stack([door[keep].astype(float), ambient[keep]]), y[keep],
                                        terms=["intercept", "door_open", "ambient_temp_c"]),
                       f"boolean feature ({solver})")


def _exact_slope(xs: list[int], ys: list[float]) -> float:
    """Least-squares slope with intercept in exact rationals (Python ints / Fractions)."""
    from fractions import Fraction

    n = len(xs)
    fy = [Fraction(v) for v in ys]
    mx, my = Fraction(sum(xs), n), sum(fy) / n
    return float(sum((x - mx) * (v - my) for x, v in zip(xs, fy)) / sum((x - mx) ** 2 for x in xs))


def test_int64_feature_spanning_more_than_half_the_range(tmp_path):
    # Integers are taken as their float64 values. Here max - min exceeds 2^63, so
    # "value - origin" cannot be formed in int64 without wrapping around.
    xs = [-(2**62), 2**62 + 2**61, 0, 5, 10**18]
    ys = [1.0, 2.0, 3.0, 4.0, 5.0]
    path = write_parquet(tmp_path / "wide.parquet", {"xi": pa.array(xs, pa.int64()), "y": ys})
    row = fit(path, "y", "xi").to_pylist()[0]
    # reference: exact rational least squares on the integers
    np.testing.assert_allclose(row["xi_estimate"], _exact_slope(xs, ys), rtol=1e-9)


def test_uint64_feature_above_int64_range(tmp_path):
    # an unsigned column with values >= 2^63 is a valid integer column, not a corrupt file
    xs = [2**63 + 5, 2**63 + 100, 2**63 + 1000, 2**63 + 7]
    ys = [1.0, 2.0, 4.0, 1.5]
    path = write_parquet(tmp_path / "u.parquet", {"xu": pa.array(xs, pa.uint64()), "y": ys})
    row = fit(path, "y", "xu").to_pylist()[0]
    # reference: exact rational least squares on the integers
    np.testing.assert_allclose(row["xu_estimate"], _exact_slope(xs, ys), rtol=1e-9)


# ---------------------------------------------------------------------------
# group key types


def _keyed_data(rng, keys: dict[str, list], n_per: int = 40) -> tuple[pa.Table, pd.DataFrame, list]:
    """One group per combination in ``keys`` (zipped), each with its own line."""
    combos = list(zip(*keys.values()))
    parts = []
    for i, combo in enumerate(combos):
        x = rng.normal(size=n_per)
        y = i - (1 + i) * x + rng.normal(0, 0.4, n_per)
        parts.append(pd.DataFrame({**{k: [v] * n_per for k, v in zip(keys, combo)}, "x": x, "y": y}))
    df = pd.concat(parts, ignore_index=True).sample(frac=1.0, random_state=1).reset_index(drop=True)
    return df, combos


KEY_CASES = {
    "int": ({"k": [3, -1, 10**12]}, pa.int64()),
    "string": ({"k": ["site-01/a", "site-02/b", ""]}, pa.string()),
    "date": ({"k": [dt.date(2026, 1, 1), dt.date(2026, 1, 2), dt.date(1999, 12, 31)]}, pa.date32()),
    "bool": ({"k": [True, False]}, pa.bool_()),
}


@pytest.mark.parametrize("case", list(KEY_CASES))
def test_group_key_types(tmp_path, case):
    keys, typ = KEY_CASES[case]
    rng = np.random.default_rng(9)
    df, combos = _keyed_data(rng, keys)
    table = pa.table({"k": pa.array(df.k.tolist(), typ), "x": df.x.to_numpy(), "y": df.y.to_numpy()})
    path = write_parquet(tmp_path / "keys.parquet", table)
    out = fit(path, "y", "x", by=("k",))
    assert out.schema.field("k").type == typ
    rows = rows_by_key(out, ["k"])
    assert set(rows) == {(c[0],) for c in combos}
    for (key,), row in rows.items():
        part = df[df.k == key]
        # reference: statsmodels OLS
        assert_row_matches(row, sm_expected(part[["x"]].to_numpy(), part.y.to_numpy(),
                                            terms=["intercept", "x"]), f"group k={key!r} ({case})")


def test_two_group_keys(tmp_path):
    rng = np.random.default_rng(10)
    sites = ["north", "north", "south", "south", "east"]
    ids = [1, 2, 1, 2, 1]
    df, combos = _keyed_data(rng, {"site": sites, "freezer": ids})
    path = write_parquet(tmp_path / "two.parquet", pa.Table.from_pandas(df, preserve_index=False))
    out = fit(path, "y", "x", by=("site", "freezer"), solver="qr")
    rows = rows_by_key(out, ["site", "freezer"])
    assert set(rows) == set(combos)
    # sorted by the keys
    assert list(zip(out.column("site").to_pylist(), out.column("freezer").to_pylist())) == sorted(combos)
    for (site, fid), row in rows.items():
        part = df[(df.site == site) & (df.freezer == fid)]
        # reference: statsmodels OLS
        assert_row_matches(row, sm_expected(part[["x"]].to_numpy(), part.y.to_numpy(),
                                            terms=["intercept", "x"]), f"group site={site} freezer={fid}")


def test_hive_partition_column_as_key(tmp_path):
    rng = np.random.default_rng(11)
    df, combos = _keyed_data(rng, {"site": ["site-01", "site-02", "site-03"]})
    root = tmp_path / "hive"
    for site, part in df.groupby("site"):
        # the key lives only in the directory name
        for i, chunk in enumerate(np.array_split(part.index.to_numpy(), 2)):
            write_parquet(root / f"site={site}" / f"part-{i}.parquet",
                          pa.table({"x": df.x[chunk].to_numpy(), "y": df.y[chunk].to_numpy()}))
    for workers in (1, 2):
        rows = rows_by_key(fit(root, "y", "x", by=("site",), workers=workers), ["site"])
        assert set(rows) == {("site-01",), ("site-02",), ("site-03",)}
        for (site,), row in rows.items():
            part = df[df.site == site]
            # reference: statsmodels OLS
            assert_row_matches(row, sm_expected(part[["x"]].to_numpy(), part.y.to_numpy(),
                                                terms=["intercept", "x"]), f"group site={site} workers={workers}")


@pytest.mark.parametrize("text,mask", [
    ("ambient_temp_c > 20 AND site IN ('site-01')",
     lambda d: (d.ambient_temp_c > 20) & d.site.isin(["site-01"])),
    ("(door_openings BETWEEN 2 AND 5 OR NOT site = 'site-02') AND ambient_temp_c <= 24.5",
     lambda d: (d.door_openings.between(2, 5) | ~(d.site == "site-02")) & (d.ambient_temp_c <= 24.5)),
])
def test_filter_reduces_rows_like_a_pandas_mask(tmp_path, text, mask):
    rng = np.random.default_rng(12)
    n = 900
    df = pd.DataFrame({
        "site": rng.choice(["site-01", "site-02", "site-03"], n),
        "freezer": rng.integers(0, 4, n),
        "ambient_temp_c": rng.uniform(10, 30, n),
        "door_openings": rng.integers(0, 8, n),
    })
    df["cabinet_temp_c"] = -18 + 0.05 * df.ambient_temp_c + 0.1 * df.door_openings + rng.normal(0, 0.2, n)
    path = write_parquet(tmp_path / "fleet.parquet", pa.Table.from_pandas(df, preserve_index=False),
                         row_group_size=128)
    out = fit(path, "cabinet_temp_c", ["ambient_temp_c", "door_openings"], by=("freezer",), filter=text)
    kept = df[mask(df)]
    rows = rows_by_key(out, ["freezer"])
    assert set(rows) == {(f,) for f in kept.freezer.unique()}
    assert sum(r["n_rows"] for r in rows.values()) == len(kept)
    for (f,), row in rows.items():
        part = kept[kept.freezer == f]
        # reference: statsmodels OLS on the rows a pandas boolean mask keeps
        assert_row_matches(row, sm_expected(part[["ambient_temp_c", "door_openings"]].to_numpy(),
                                            part.cabinet_temp_c.to_numpy(),
                                            terms=["intercept", "ambient_temp_c", "door_openings"]),
                           f"group freezer={f} filter {text!r}")
