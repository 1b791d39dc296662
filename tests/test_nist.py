"""Accuracy against NIST's Statistical Reference Datasets for linear least squares.

Every dataset goes through the whole engine (real Parquet file -> plan -> scan
kernel -> merge -> solve) with both solvers, and each output is scored as LRE
(log relative error, the number of correct significant digits, NIST's measure)
against NIST's certified values (tests/data/nist_strd_lls.json, see its README).

A severely ill-conditioned polynomial design, harder than any NIST dataset, is
checked against an exact least-squares reference computed with mpmath at 50
digits.
"""

from __future__ import annotations

import mpmath
import numpy as np
import pytest

from helpers import fit, lre, nist_datasets, write_parquet

DATASETS = nist_datasets()
EASY = ("Norris", "NoInt1", "NoInt2", "Pontius", "Longley")
HARD = ("Wampler1", "Wampler2", "Wampler3")
# digits every coefficient must reach; std errors, residual std dev, R² and F may
# be one digit short of it (they are second-order quantities of the same solve)
COEF_DIGITS = {
    "normal": {**dict.fromkeys(EASY, 10), **dict.fromkeys(HARD, 6)},
    "qr": {**dict.fromkeys(EASY, 11), **dict.fromkeys(HARD, 8)},
}


def nist_columns(d: dict) -> tuple[list[str], dict[str, np.ndarray]]:
    """Feature names and columns of a NIST model: powers of x (float64) or Longley's six."""
    if d["polynomial_degree"] is None:
        rows = np.asarray(d["x"], dtype=np.float64)
        names = [f"x{i + 1}" for i in range(rows.shape[1])]
        cols = {name: rows[:, i] for i, name in enumerate(names)}
    else:
        x = np.asarray(d["x"], dtype=np.float64)
        names = ["x"] + [f"x{k}" for k in range(2, d["polynomial_degree"] + 1)]
        cols = {name: x ** k for k, name in enumerate(names, start=1)}
    cols["y"] = np.asarray(d["y"], dtype=np.float64)
    return names, cols


@pytest.fixture(scope="module")
def nist_fits(tmp_path_factory):
    """(dataset, solver) -> (result row, terms): each fit is run once for the module."""
    root = tmp_path_factory.mktemp("nist")
    out = {}
    for name, d in DATASETS.items():
        names, cols = nist_columns(d)
        path = write_parquet(root / f"{name}.parquet", cols)
        terms = (["intercept"] if d["intercept"] else []) + names
        for solver in ("normal", "qr"):
            table = fit(path, "y", names, intercept=d["intercept"], solver=solver)
            assert table.num_rows == 1
            out[name, solver] = (table.to_pylist()[0], terms)
    return out


def nist_lres(row: dict, terms: list[str], d: dict) -> dict[str, list[float]]:
    """LRE of every certified quantity (NIST StRD certified values) of one fit."""
    out = {
        "estimate": [lre(row[f"{t}_estimate"], c) for t, c in zip(terms, d["estimates"], strict=True)],
        "std_error": [lre(row[f"{t}_std_error"], c) for t, c in zip(terms, d["std_errors"], strict=True)],
        "residual_std_dev": [lre(row["residual_std_error"], d["residual_std_dev"])],
        "r_squared": [lre(row["r_squared"], d["r_squared"])],
    }
    if d["f_statistic"] is not None:       # Wampler1/2 fit exactly: F is infinite
        out["f_statistic"] = [lre(row["f_statistic"], d["f_statistic"])]
    return out


def test_all_datasets_present():
    assert set(DATASETS) == set(EASY) | set(HARD)


@pytest.mark.parametrize("solver", ["normal", "qr"])
@pytest.mark.parametrize("name", list(EASY + HARD))
def test_nist_certified_values(nist_fits, name, solver):
    # Reference: NIST StRD certified values (estimates, std errors, residual
    # standard deviation, R², F) for dataset `name`.
    d = DATASETS[name]
    row, terms = nist_fits[name, solver]
    assert row["status"] == "ok", row["status"]
    assert row["n_rows"] == len(d["y"])
    assert row["df_residual"] == d["df_residual"]      # NIST's ANOVA df
    need = COEF_DIGITS[solver][name]
    scores = nist_lres(row, terms, d)
    for quantity, values in scores.items():
        floor = need if quantity == "estimate" else need - 1
        worst = min(values)
        assert worst >= floor, f"{name}/{solver}: {quantity} LRE {np.round(values, 2)} < {floor}"


def test_nist_ci_and_p_consistent(nist_fits):
    # Reference: NIST's certified estimate and std error of Longley, combined with
    # scipy's Student t quantile (an outside implementation) for the 95% interval.
    from scipy import stats

    d = DATASETS["Longley"]
    row, terms = nist_fits["Longley", "qr"]
    q = stats.t.ppf(0.975, d["df_residual"])
    for t, b, se in zip(terms, d["estimates"], d["std_errors"], strict=True):
        assert lre(row[f"{t}_ci_low"], b - q * se) >= 9, t
        assert lre(row[f"{t}_ci_high"], b + q * se) >= 9, t
        assert lre(row[f"{t}_p_value"], 2 * stats.t.sf(abs(b / se), d["df_residual"])) >= 7, t


# ---------------------------------------------------------------------------
# severely ill-conditioned polynomial, exact reference by mpmath


def _mp_lstsq(x_cols: np.ndarray, y: np.ndarray) -> list[float]:
    """Least squares with intercept at 50 significant digits (mpmath).

    The float64 data are taken exactly; the normal equations at 50 digits keep
    ~20 digits for kappa(X^T X) ~ 1e30, far more than a double can show.
    """
    with mpmath.workdps(50):
        a = mpmath.matrix([[1] + [mpmath.mpf(float(v)) for v in row] for row in x_cols])
        b = mpmath.matrix([mpmath.mpf(float(v)) for v in y])
        sol = mpmath.lu_solve(a.T * a, a.T * b)
        return [float(v) for v in sol]


def _scaled_condition(x_cols: np.ndarray) -> float:
    """kappa of the centred, unit-norm-column cross-product matrix (what the engine reports)."""
    xc = x_cols - x_cols.mean(axis=0)
    s = np.linalg.svd(xc / np.linalg.norm(xc, axis=0), compute_uv=False)
    return float((s[0] / s[-1]) ** 2)


@pytest.mark.parametrize("degree,min_condition", [(10, 1e14), (11, 1e15)])
def test_ill_conditioned_polynomial(tmp_path, degree, min_condition):
    # Design: x uniform in [0, 1], monomials x..x^degree with an intercept. With
    # seed 11 and n=200 the scaled condition number (centred columns at unit norm,
    # cross-product matrix) is 1.5e14 for degree 10 and 5.5e15 for degree 11.
    rng = np.random.default_rng(11)
    n = 200
    x = np.sort(rng.uniform(0.0, 1.0, n))
    xs = np.stack([x ** k for k in range(1, degree + 1)], axis=1)
    coef = rng.uniform(-1.0, 1.0, degree + 1)
    y = coef[0] + xs @ coef[1:] + rng.normal(0.0, 1e-3, n)
    kappa = _scaled_condition(xs)
    assert kappa > min_condition
    names = ["x"] + [f"x{k}" for k in range(2, degree + 1)]
    path = write_parquet(tmp_path / "poly.parquet", {**{nm: xs[:, i] for i, nm in enumerate(names)}, "y": y})
    exact = _mp_lstsq(xs, y)       # reference: mpmath, 50 digits
    terms = ["intercept"] + names

    row = fit(path, "y", names, solver="qr").to_pylist()[0]
    digits = [lre(row[f"{t}_estimate"], c) for t, c in zip(terms, exact, strict=True)]
    assert min(digits) >= 7, f"qr degree {degree}: LRE {np.round(digits, 2)}"
    assert row["condition_number"] == pytest.approx(kappa, rel=1e-3)

    row = fit(path, "y", names, solver="normal").to_pylist()[0]
    digits = [lre(row[f"{t}_estimate"], c) for t, c in zip(terms, exact, strict=True)]
    # the normal equations square kappa; they must either keep 7 digits or say they cannot
    assert row["status"] != "ok" or min(digits) >= 7, (row["status"], np.round(digits, 2))
