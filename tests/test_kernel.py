"""The compiled scan kernel against its pure-numpy twin, and its bad-weight contract.

Reference: ``moments_from_rows`` (two-pass, exact means first), whose results
are in turn checked against statsmodels and NIST elsewhere. The kernel is fed
the same rows in one or several batches, with and without weights, with NaN and
infinite rows mixed in (which it must skip and count).
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import pytest

from helpers import fit, write_parquet
from trendmill.engine.errors import DataError
from trendmill.engine.moments import canonical_r, moments_from_rows, to_comoment
from trendmill.io import _kernel

RTOL = 1e-13


def _empty_state(groups: int, d: int) -> dict:
    return dict(n_tot=np.zeros(groups, np.int64), w_tot=np.zeros(groups), mean_tot=np.zeros((groups, d)),
                c_tot=np.zeros((groups, d, d)), skipped=np.zeros(groups, np.int64),
                infinite=np.zeros(groups, np.int64), slot=np.full(groups, -1, np.int64))


def _accumulate(form: str, state: dict, codes, z_rows, w) -> int:
    """One batch (rows as (n, d)) into ``state`` via the compiled kernel; returns its bad count."""
    fn = _kernel.accumulate_qr if form == "qr" else _kernel.accumulate_comoment
    use_w = w is not None
    bad = fn(np.ascontiguousarray(codes, dtype=np.int64), np.ascontiguousarray(z_rows.T, dtype=np.float64),
             np.empty(0) if w is None else np.ascontiguousarray(w, dtype=np.float64), use_w,
             state["n_tot"], state["w_tot"], state["mean_tot"], state["c_tot"], state["skipped"],
             state["infinite"], state["slot"])
    # the batch-local scratch must be handed back as it came (all -1)
    assert (state["slot"] == -1).all()
    return bad


def _batches(n: int, rng, count: int) -> list[np.ndarray]:
    cuts = np.sort(rng.choice(np.arange(1, n), size=count - 1, replace=False)) if count > 1 else []
    return np.split(np.arange(n), cuts)


def _comoment_of(state: dict, form: str) -> np.ndarray:
    c = state["c_tot"]
    return np.swapaxes(c, -1, -2) @ c if form == "qr" else c


def assert_close_moments(state: dict, ref, form: str, label: str) -> None:
    np.testing.assert_array_equal(state["n_tot"], ref.n, err_msg=f"{label}: n")
    np.testing.assert_allclose(state["w_tot"], ref.w, rtol=RTOL, err_msg=f"{label}: w")
    c_ref = to_comoment(ref).cross
    spread = np.sqrt(np.maximum(np.diagonal(c_ref, axis1=1, axis2=2), 0.0) / np.maximum(ref.w, 1e-300)[:, None])
    np.testing.assert_array_less(np.abs(state["mean_tot"] - ref.mean),
                                 RTOL * (np.abs(ref.mean) + spread) + 1e-300, err_msg=f"{label}: mean")
    # each entry of C relative to sqrt(C_ii C_jj), its natural size
    diag = np.maximum(np.diagonal(c_ref, axis1=1, axis2=2), 0.0)
    size = np.sqrt(diag[:, :, None] * diag[:, None, :])
    np.testing.assert_array_less(np.abs(_comoment_of(state, form) - c_ref), RTOL * size + 1e-300,
                                 err_msg=f"{label}: C")
    if form == "qr":
        # the R factor itself (rows signed to a non-negative diagonal), relative to column norms
        col = np.broadcast_to(np.sqrt(diag)[:, None, :], ref.cross.shape)
        np.testing.assert_array_less(np.abs(canonical_r(state["c_tot"]) - canonical_r(ref.cross)),
                                     RTOL * col + 1e-300, err_msg=f"{label}: R")


@pytest.mark.parametrize("form", ["comoment", "qr"])
@pytest.mark.parametrize("weighted", [False, True])
@pytest.mark.parametrize("batches", [1, 4])
def test_kernel_matches_numpy_twin(form, weighted, batches):
    rng = np.random.default_rng(100 + batches + 10 * weighted)
    n, groups, d = 3000, 7, 4
    codes = rng.integers(0, groups, n)
    offsets = np.array([0.0, 250.0, -3e3, 40.0])
    scales = np.array([1e-3, 1.0, 10.0, 2.0])
    z = offsets + scales * rng.normal(size=(n, d))
    w = rng.uniform(0.1, 5.0, n) if weighted else None
    state = _empty_state(groups, d)
    for idx in _batches(n, rng, batches):
        bad = _accumulate(form, state, codes[idx], z[idx], None if w is None else w[idx])
        assert bad == 0
    # reference: the pure-numpy two-pass moments of all rows at once
    ref = moments_from_rows(codes, z, groups, weights=w, form=form)
    assert_close_moments(state, ref, form, f"{form} weighted={weighted} batches={batches}")
    assert not state["skipped"].any() and not state["infinite"].any()


@pytest.mark.parametrize("form", ["comoment", "qr"])
def test_kernel_skips_and_counts_nan_inf_and_zero_weight(form):
    rng = np.random.default_rng(7)
    n, groups, d = 800, 3, 3
    codes = rng.integers(0, groups, n)
    z = 5.0 + rng.normal(size=(n, d))
    w = rng.uniform(0.5, 2.0, n)
    nan_rows = rng.choice(n, 40, replace=False)
    z[nan_rows, rng.integers(0, d, 40)] = np.nan
    rest = np.setdiff1d(np.arange(n), nan_rows)
    inf_rows = rng.choice(rest, 15, replace=False)
    z[inf_rows, rng.integers(0, d, 15)] = np.where(rng.random(15) < 0.5, np.inf, -np.inf)
    rest = np.setdiff1d(rest, inf_rows)
    zero_w = rng.choice(rest, 10, replace=False)
    null_w = rng.choice(np.setdiff1d(rest, zero_w), 5, replace=False)
    w[zero_w] = 0.0
    w[null_w] = np.nan
    state = _empty_state(groups, d)
    for idx in _batches(n, rng, 3):
        assert _accumulate(form, state, codes[idx], z[idx], w[idx]) == 0
    clean = np.setdiff1d(np.arange(n), np.concatenate([nan_rows, inf_rows, zero_w, null_w]))
    # reference: the numpy twin on the clean rows only
    ref = moments_from_rows(codes[clean], z[clean], groups, weights=w[clean], form=form)
    assert_close_moments(state, ref, form, f"{form} with bad rows")
    np.testing.assert_array_equal(state["skipped"],
                                  np.bincount(codes[np.concatenate([nan_rows, null_w])], minlength=groups))
    np.testing.assert_array_equal(state["infinite"], np.bincount(codes[inf_rows], minlength=groups))


@pytest.mark.parametrize("form", ["comoment", "qr"])
def test_kernel_negative_weight_returns_bad_count(form):
    rng = np.random.default_rng(8)
    n, d = 100, 2
    z = rng.normal(size=(n, d))
    w = rng.uniform(0.5, 1.5, n)
    w[[3, 50, 77]] = -0.25
    w[90] = np.inf
    state = _empty_state(1, d)
    assert _accumulate(form, state, np.zeros(n, np.int64), z, w) == 4


def test_negative_weight_raises_data_error_naming_column_and_file(tmp_path):
    rng = np.random.default_rng(9)
    n = 50
    w = rng.uniform(0.5, 1.5, n)
    w[17] = -1.0
    good = write_parquet(tmp_path / "src" / "a-good.parquet",
                         {"x": rng.normal(size=n), "y": rng.normal(size=n), "load_weight": np.ones(n)})
    bad = write_parquet(tmp_path / "src" / "b-bad.parquet",
                        {"x": rng.normal(size=n), "y": rng.normal(size=n), "load_weight": w})
    for workers in (1, 2):
        with pytest.raises(DataError, match=r"load_weight.*b-bad\.parquet") as info:
            fit(tmp_path / "src", "y", "x", weight="load_weight", workers=workers)
        err = info.value
        assert err.column == "load_weight"
        assert err.path == bad and err.path != good
        assert "\n" not in str(err)


def test_ints_to_float_is_one_rounding_of_the_exact_value():
    # reference: Python's exact rationals; (ints - origin) / per_unit rounded once
    from fractions import Fraction

    rng = np.random.default_rng(10)
    origin = 1_700_000_000_123_456_789
    ints = origin + rng.integers(-(2**52), 2**52, 2000)
    out = np.empty(len(ints))
    _kernel.ints_to_float(ints.astype(np.int64), origin, 1e9, out)
    want = np.array([float(Fraction(int(v) - origin, 10**9)) for v in ints])
    np.testing.assert_array_equal(out, want)


def test_nan_weight_raises_but_null_weight_skips(tmp_path):
    # The contract: a non-finite weight is an error; a NULL weight is a
    # missing value like any other (the row is skipped and counted).
    rng = np.random.default_rng(7)
    n = 50
    x, y = rng.normal(size=n), rng.normal(size=n)
    weights = [1.0] * n
    weights[3] = None
    ok = write_parquet(tmp_path / "ok.parquet", {"x": x, "y": y, "w": pa.array(weights, pa.float64())})
    row = fit(ok, "y", "x", weight="w").to_pylist()[0]
    assert row["n_rows"] == n - 1 and row["n_skipped"] == 1
    weights[3] = float("nan")
    bad = write_parquet(tmp_path / "bad.parquet", {"x": x, "y": y, "w": pa.array(weights, pa.float64())})
    with pytest.raises(DataError, match=r"weight: column 'w' has NaN values in .*bad\.parquet"):
        fit(bad, "y", "x", weight="w")


def test_every_error_survives_the_trip_from_a_worker():
    # scan workers send errors back pickled; each class must come back whole
    import pickle

    from trendmill.engine import errors as E
    samples = [E.SpecError("x", "bad"), E.FilterError("oops", expression="a >"),
               E.SchemaError("m", column="c", field="x"), E.DataError("d", column="w", path="p"),
               E.CorruptSource("c", path="p"), E.SourceNotFound("n", path="q"),
               E.LimitError("l", limit=3), E.TrendmillError("t")]
    for err in samples:
        back = pickle.loads(pickle.dumps(err))
        assert type(back) is type(err) and str(back) == str(err)
        assert back.details == err.details and back.__dict__ == err.__dict__


@pytest.mark.parametrize("d", range(2, 9))
def test_written_out_pass_matches_the_general_loop(d):
    # the generated pass 2 (sums in scalars, per column count) against the loop
    # over a packed triangle it replaces: the same two-sum arithmetic, row for row
    from trendmill.io import _unrolled
    rng = np.random.default_rng(d)
    n, used = 3_000, 7
    member = np.sort(rng.integers(-1, used, n))          # runs, and skipped rows (-1)
    member = np.where(rng.random(n) < 0.1, -1, member)
    z = rng.normal(size=(d, n)) * 10.0 ** rng.integers(-3, 4, (d, 1))
    w = rng.uniform(0.5, 2.0, n)
    mean = rng.normal(size=(used, d))
    for use_w in (False, True):
        want = _kernel._centred_sums(member, z, w, use_w, mean, used)
        got = _unrolled.centred_sums(d)(member, z, w, use_w, mean, used)
        for g_arr, w_arr in zip(got, want):
            np.testing.assert_array_equal(g_arr, w_arr, err_msg=f"d={d} use_w={use_w}")
    assert _unrolled.centred_sums(_unrolled.MAX_UNROLLED + 1) is None
