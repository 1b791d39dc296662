"""Properties of the mergeable state and of the whole fit, by hypothesis.

- Chan's pairwise merge is commutative and associative up to rounding, in both
  the co-moment and the QR form (compared as C and R^T R, the form-free content);
- the moments of any split of the rows, merged, equal the moments of all rows;
- through run_fit, any layout of the same rows on disk (files, row groups, hive
  directories) gives the same fit to relative 1e-12, and the worker count does
  not change a single bit.

The reference of the first two is the direct two-pass computation on all rows
(``moments_from_rows``), itself checked against statsmodels elsewhere; the
reference of the layout property is the fit of one file.
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from helpers import fit, write_parquet
from strategies import fit_data, layouts, row_data, splits
from trendmill.engine.moments import FORMS, merge_moments, moments_from_rows, to_comoment

SETTINGS = dict(deadline=None, max_examples=40, suppress_health_check=[HealthCheck.function_scoped_fixture])
EPS = np.finfo(float).eps


def _state(data, idx, form):
    w = None if data.weights is None else data.weights[idx]
    return moments_from_rows(data.codes[idx], data.z[idx], data.groups, weights=w, form=form)


def assert_same_moments(a, b, *, rtol: float = 1e-12, label: str = "") -> None:
    """Equal counts and weights; means and co-moments equal up to rounding.

    "Rounding" is the error model of Chan's update in the state's coordinates: a
    mean m is held to about eps * |m|, so the difference of two means, and with
    it an entry of C, carries an error of order eps * W * (|m_i| s_j + |m_j| s_i)
    (s: a column's spread) besides the relative rtol * W * s_i * s_j of the sums.
    """
    np.testing.assert_array_equal(a.n, b.n, err_msg=f"{label}: n")
    np.testing.assert_allclose(a.w, b.w, rtol=1e-13, err_msg=f"{label}: w")
    ca, cb = to_comoment(a), to_comoment(b)
    w = np.maximum(cb.w, 1e-300)
    s = np.sqrt(np.maximum(np.diagonal(cb.cross, axis1=1, axis2=2), 0.0) / w[:, None])
    m = np.abs(cb.mean)
    u = 64 * EPS
    np.testing.assert_array_less(np.abs(ca.mean - cb.mean), rtol * s + u * m + 1e-300, err_msg=f"{label}: mean")
    tol = w[:, None, None] * (rtol * s[:, :, None] * s[:, None, :]
                              + u * (m[:, :, None] * s[:, None, :] + s[:, :, None] * m[:, None, :])
                              + u * u * m[:, :, None] * m[:, None, :])
    np.testing.assert_array_less(np.abs(ca.cross - cb.cross), tol + 1e-300, err_msg=f"{label}: C")


@pytest.mark.parametrize("form", FORMS)
@settings(**SETTINGS)
@given(data=row_data(min_rows=3), st_split=st.data())
def test_merge_commutative_and_associative(form, data, st_split):
    a_idx, b_idx, c_idx = st_split.draw(splits(data.n, max_parts=3).filter(lambda p: len(p) == 3))
    a, b, c = (_state(data, i, form) for i in (a_idx, b_idx, c_idx))
    assert_same_moments(merge_moments(a, b), merge_moments(b, a), label=f"{form} commutative")
    assert_same_moments(merge_moments(merge_moments(a, b), c), merge_moments(a, merge_moments(b, c)),
                        label=f"{form} associative")


@pytest.mark.parametrize("form", FORMS)
@settings(**SETTINGS)
@given(data=row_data(), st_split=st.data())
def test_moments_of_any_split_equal_moments_of_all(form, data, st_split):
    parts = st_split.draw(splits(data.n))
    merged = None
    for idx in parts:
        part = _state(data, idx, form)
        merged = part if merged is None else merge_moments(merged, part)
    # reference: two-pass moments of all rows at once
    whole = _state(data, np.arange(data.n), form)
    assert_same_moments(merged, whole, label=f"{form}, {len(parts)} parts")


def test_merge_with_empty_state_is_identity():
    rng = np.random.default_rng(1)
    z = rng.normal(size=(30, 3)) + 100
    codes = rng.integers(0, 2, 30)
    for form in FORMS:
        full = moments_from_rows(codes, z, 3, form=form)       # group 2 has no rows
        empty = moments_from_rows(codes[:0], z[:0], 3, form=form)
        for merged in (merge_moments(full, empty), merge_moments(empty, full)):
            np.testing.assert_array_equal(merged.n, full.n)
            np.testing.assert_array_equal(merged.mean, full.mean)
            np.testing.assert_allclose(to_comoment(merged).cross, to_comoment(full).cross, rtol=1e-15)


# ---------------------------------------------------------------------------
# through the whole engine: layout and worker count do not matter


FLOAT_TOL = 1e-12


def _term_of(name: str, terms: list[str]) -> str | None:
    for t in terms:
        if name.startswith(t + "_"):
            return t
    return None


def assert_tables_close(got: pa.Table, want: pa.Table, *, rtol: float, label: str) -> None:
    """Same fits to ``rtol``, each column measured on its natural scale.

    Rounding differs between layouts, and a value formed by cancellation keeps only
    absolute digits: an estimate or interval end is compared to rtol * (|value| + SE),
    t, R², adjusted R² and F to rtol * (|value| + 1), a p-value to rtol * p * (1 + t²)
    (d log p / dt grows like t in the tail), a covariance entry to rtol * sqrt(S_ii S_jj),
    a feature mean to rtol * (|value| + the column's largest mean + 1).
    """
    assert got.column_names == want.column_names, label
    names = got.column_names
    terms = [n[: -len("_estimate")] for n in names if n.endswith("_estimate")]
    w = {n: want.column(n) for n in names}
    for name in names:
        a, b = got.column(name), want.column(name)
        if pa.types.is_list(a.type):
            ga, wb = np.array(a.to_pylist()), np.array(b.to_pylist())
            k = int(round(np.sqrt(wb.shape[1])))
            diag = np.abs(wb.reshape(-1, k, k)[:, np.arange(k), np.arange(k)])
            scale = np.sqrt(diag[:, :, None] * diag[:, None, :]).reshape(wb.shape)
            _close(ga, wb, rtol * scale, f"{label}: {name}")
            continue
        if not pa.types.is_floating(a.type):
            assert a.to_pylist() == b.to_pylist(), f"{label}: {name}"
            continue
        ga, wb = a.to_numpy(), b.to_numpy()
        term = _term_of(name, terms)
        if term and name.endswith(("_estimate", "_ci_low", "_ci_high")):
            floor = np.abs(w[f"{term}_std_error"].to_numpy())
        elif name.endswith("_t_value") or name in ("r_squared", "adj_r_squared", "f_statistic"):
            floor = 1.0
        elif name.endswith("_mean"):    # a feature mean keeps digits of the column's scale
            floor = np.nanmax(np.abs(wb)) + 1.0
        else:
            floor = 0.0
        tol = rtol * (np.abs(wb) + floor)
        if name == "f_p_value":
            tol = rtol * np.abs(wb) * (1 + w["f_statistic"].to_numpy())
        elif term and name.endswith("_p_value"):
            t = w[f"{term}_t_value"].to_numpy()
            tol = rtol * np.abs(wb) * (1 + t * t)
        _close(ga, wb, tol, f"{label}: {name}")


def _close(got: np.ndarray, want: np.ndarray, tol: np.ndarray, label: str) -> None:
    both_nan = np.isnan(got) & np.isnan(want)
    bad = ~both_nan & ~(np.abs(got - want) <= tol)
    assert not bad.any(), (f"{label}: got {got[bad][:4]}, want {want[bad][:4]}, "
                           f"tolerance {np.broadcast_to(tol, want.shape)[bad][:4]}")


def assert_tables_identical(got: pa.Table, want: pa.Table) -> None:
    """Same schema and the same bits in every value (NaN included)."""
    assert got.schema == want.schema
    for name in got.column_names:
        a, b = got.column(name).combine_chunks(), want.column(name).combine_chunks()
        if pa.types.is_list(a.type):
            a, b = a.flatten(), b.flatten()
        if pa.types.is_floating(a.type):
            assert a.null_count == b.null_count == 0
            np.testing.assert_array_equal(a.to_numpy().view(np.uint64), b.to_numpy().view(np.uint64),
                                          err_msg=name)
        else:
            assert a.to_pylist() == b.to_pylist(), name


def _write_layout(root, cols: dict, layout) -> str:
    table = pa.table(cols)
    for i, idx in enumerate(layout.parts):
        part = table.take(pa.array(idx))
        sub = root / (f"batch={i % 3}" if layout.hive else "") / f"part-{i:03d}.parquet"
        write_parquet(sub, part, row_group_size=layout.row_group_size)
    return str(root)


_counter = iter(range(10**9))


@pytest.mark.parametrize("solver", ["normal", "qr"])
@settings(deadline=None, max_examples=12, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(cols=fit_data(), st_layout=st.data(), weighted=st.booleans())
def test_any_layout_gives_the_same_fit(tmp_path, solver, cols, st_layout, weighted):
    layout = st_layout.draw(layouts(len(cols["g"])))
    root = tmp_path / f"case-{next(_counter)}"
    one = write_parquet(root / "one.parquet", cols)
    split = _write_layout(root / "split", cols, layout)
    spec = dict(by=("g",), weight="w" if weighted else None, solver=solver)
    want = fit(one, "y", ["x1", "x2"], **spec)              # reference: one file, one batch
    got = fit(split, "y", ["x1", "x2"], **spec)
    assert_tables_close(got, want, rtol=FLOAT_TOL,
                        label=f"{len(layout.parts)} files, row groups of {layout.row_group_size}, "
                              f"hive={layout.hive}, {solver}")


@pytest.mark.parametrize("solver", ["normal", "qr"])
def test_split_at_large_offset_gives_the_same_fit(tmp_path, solver):
    # Columns at 1e9 + spread (epoch seconds stored as floats, say). The rows of one
    # file in one batch against the same rows in many small row groups and files:
    # merging states whose means sit at 1e9 must not cost the centred moments digits.
    rng = np.random.default_rng(77)
    n = 600
    g = rng.integers(0, 3, n)
    x = 1e9 + rng.uniform(0, 1000, n)
    y = 5 + 2e-3 * (x - 1e9) + rng.normal(0, 0.5, n)
    cols = {"g": g, "x": x, "y": y}
    one = write_parquet(tmp_path / "one.parquet", cols)
    table = pa.table(cols)
    for i in range(3):
        write_parquet(tmp_path / "split" / f"part-{i}.parquet", table.slice(i * 200, 200), row_group_size=25)
    want = fit(one, "y", "x", by=("g",), solver=solver)
    got = fit(tmp_path / "split", "y", "x", by=("g",), solver=solver)
    assert_tables_close(got, want, rtol=FLOAT_TOL, label=f"offset 1e9, 24 row groups ({solver})")


@pytest.mark.parametrize("solver", ["normal", "qr"])
def test_worker_count_does_not_change_a_bit(tmp_path, solver):
    rng = np.random.default_rng(88)
    n = 6000
    cols = {"g": rng.integers(0, 40, n), "x1": 1e3 + rng.normal(size=n), "x2": rng.normal(size=n)}
    cols["y"] = 2 * cols["x1"] - cols["x2"] + rng.normal(size=n)
    table = pa.table(cols)
    for i in range(6):
        write_parquet(tmp_path / "src" / f"day={i}" / "part-0.parquet", table.slice(i * 1000, 1000),
                      row_group_size=300)
    one = fit(tmp_path / "src", "y", ["x1", "x2"], by=("g",), solver=solver, workers=1)
    two = fit(tmp_path / "src", "y", ["x1", "x2"], by=("g",), solver=solver, workers=2)
    assert_tables_identical(two, one)
    assert one.num_rows == 40
