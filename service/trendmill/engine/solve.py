"""Moments of many groups -> least-squares fits with full inference, vectorised over groups.

Both solvers reduce a group to the same triangular system on *equilibrated* columns
(each feature scaled to unit norm, so the condition number reflects the design and
not the units):

- ``normal``: order-preserving Cholesky of the scaled co-moment matrix A = D C_xx D;
- ``qr``: the R factor kept by the scan (R^T R = C), column-scaled, never squared.

A feature whose remaining variance, after the features before it, is below the
solver's tolerance is *aliased*: dropped (NaN in the output), named in the status,
and the others are fitted with df from the rank. Inference follows the
weighted-least-squares convention of general statistics libraries: weights are
precision weights, df counts rows.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special

from .moments import Moments, canonical_r, uncentred

__all__ = ["GroupFits", "solve_moments", "STATUS_OK", "TOLERANCES"]

STATUS_OK = "ok"

#: per solver: (alias tolerance on the scaled pivot, condition number above which a fit is
#: flagged ``ill_conditioned``). The normal equations lose digits as kappa(A) * eps,
#: QR as sqrt(kappa(A)) * eps (plus a residual term), hence the different limits.
#: The normal pivot is a squared distance, the QR one a distance.
TOLERANCES = {
    "normal": (1e-11, 1e7),
    "qr": (1e-13, 1e16),
}
# a feature is constant within a group when its spread is at the rounding level of its mean
_CONSTANT_RTOL = 64 * np.finfo(float).eps


@dataclass(frozen=True, slots=True)
class GroupFits:
    """Fits of G groups over the k terms ``terms`` (arrays are (G,), (G, k) or (G, k, k))."""

    terms: tuple[str, ...]
    n_rows: np.ndarray
    status: np.ndarray          # object array of str
    estimate: np.ndarray
    std_error: np.ndarray
    t_value: np.ndarray
    p_value: np.ndarray
    ci_low: np.ndarray
    ci_high: np.ndarray
    covariance: np.ndarray
    r_squared: np.ndarray
    adj_r_squared: np.ndarray
    residual_std_error: np.ndarray
    df_residual: np.ndarray     # int64
    f_statistic: np.ndarray
    f_p_value: np.ndarray
    condition_number: np.ndarray
    feature_mean: np.ndarray    # (G, p) weighted means of the features (true coordinates)
    weight_sum: np.ndarray      # (G,) sum of weights (= rows without weights)


def _tri_inverse(u: np.ndarray) -> np.ndarray:
    """Inverse of stacked upper-triangular (G, p, p) matrices by back substitution."""
    g, p, _ = u.shape
    inv = np.zeros_like(u)
    for j in range(p - 1, -1, -1):
        inv[:, j, j] = 1.0 / u[:, j, j]
        if j + 1 < p:
            # row j of U^-1: -(u_jj)^-1 * U[j, j+1:] @ inv[j+1:, :]
            inv[:, j, j + 1:] = -np.einsum("gk,gkl->gl", u[:, j, j + 1:], inv[:, j + 1:, j + 1:]) * inv[:, j, j][:, None]
    return inv


def _t_quantiles(df: np.ndarray, q: float) -> np.ndarray:
    """Student-t quantile per group; computed once per distinct df (the inverse is slow)."""
    values, inverse = np.unique(df, return_inverse=True)
    with np.errstate(invalid="ignore"):
        quant = special.stdtrit(np.where(values > 0, values, np.nan).astype(float), q)
    return quant[inverse.ravel()]


def _cholesky_dropping(a: np.ndarray, keep: np.ndarray, tol: float) -> tuple[np.ndarray, np.ndarray]:
    """Order-preserving Cholesky a = L L^T of stacked unit-diagonal matrices.

    A column whose pivot (its squared distance from the span of the kept columns
    before it) is <= tol is dropped: its row and column of L become the identity's,
    so L stays invertible and the dropped coefficient solves to 0.
    Returns (U = L^T, keep).
    """
    g, p, _ = a.shape
    low = np.zeros_like(a)
    keep = keep.copy()
    for j in range(p):
        prev = low[:, j, :j]
        pivot = a[:, j, j] - np.einsum("gk,gk->g", prev, prev)
        keep[:, j] &= pivot > tol
        kj = keep[:, j]
        low[:, j, :j] = np.where(kj[:, None], prev, 0.0)
        diag = np.sqrt(np.where(kj, pivot, 1.0))
        low[:, j, j] = diag
        if j + 1 < p:
            col = a[:, j + 1:, j] - np.einsum("gik,gk->gi", low[:, j + 1:, :j], low[:, j, :j])
            low[:, j + 1:, j] = np.where(kj[:, None], col / diag[:, None], 0.0)
    return np.swapaxes(low, -1, -2), keep


def _embed_kept(r_aug: np.ndarray, keep: np.ndarray) -> np.ndarray:
    """Re-triangularise augmented R factors (G, p+1, p+1) over the kept features + y.

    Dropped features become identity rows/columns, so the result stays upper
    triangular in the original column order and the uniform solve applies.
    """
    if keep.all():
        return r_aug
    out = r_aug.copy()
    p = keep.shape[1]
    patterns, inverse = np.unique(keep, axis=0, return_inverse=True)
    for pat_i, pattern in enumerate(patterns):
        if pattern.all():
            continue
        rows = np.nonzero(inverse.ravel() == pat_i)[0]
        cols = np.concatenate([np.nonzero(pattern)[0], [p]])
        sub = canonical_r(np.linalg.qr(r_aug[rows][:, :, cols], mode="r"))
        block = np.zeros((len(rows), p + 1, p + 1))
        block[:, np.arange(p), np.arange(p)] = 1.0
        block[np.ix_(np.arange(len(rows)), cols, cols)] = sub
        out[rows] = block
    return out


def solve_moments(m: Moments, *, features: tuple[str, ...], intercept: bool = True,
                  shift: np.ndarray | None = None, confidence: float = 0.95,
                  solver: str | None = None) -> GroupFits:
    """Solve every group of ``m`` and compute its inference.

    Parameters
    ----------
    m : Moments
        State over d = p + 1 columns (features then y), G groups.
    features : tuple of str
        Names of the p features (the output terms, after ``intercept``).
    intercept : bool
        Fit an intercept (centred system) or not (uncentred about zero).
    shift : (d,) array, optional
        What the scan subtracted from each column (true mean = mean + shift).
    confidence : float
        Level of the confidence intervals.
    solver : {"normal", "qr"}, optional
        Defaults to ``qr`` for a QR-form state and ``normal`` otherwise.
    """
    p = m.dim - 1
    if len(features) != p:
        raise ValueError(f"features has {len(features)} names, the state has {p} features")
    if not 0 < confidence < 1:
        raise ValueError(f"confidence == {confidence}, must lie in (0, 1)")
    shift = np.zeros(m.dim) if shift is None else np.asarray(shift, dtype=float)
    solver = solver or ("qr" if m.form == "qr" else "normal")
    if solver == "normal" and m.form == "qr":
        raise ValueError("the normal solver needs a co-moment state")
    return _solve(m, features, intercept, shift, confidence, solver)


def _column_scale(m: Moments, cross: np.ndarray, intercept: bool, p: int):
    """Squared column norms of the system, which features are not constant, and their scale."""
    if m.form == "qr":
        col_sq = np.einsum("gij,gij->gj", cross, cross)
    else:
        col_sq = np.diagonal(cross, axis1=1, axis2=2).copy()
    sq_x = np.maximum(col_sq[:, :p], 0.0)
    if intercept:
        # constant within the group: a spread at the rounding level of its mean
        keep = sq_x > m.w[:, None] * (_CONSTANT_RTOL * np.abs(m.mean[:, :p])) ** 2
    else:
        keep = sq_x > 0
    return col_sq, keep, np.where(keep, np.sqrt(sq_x), 1.0)


def _reduce_qr(cross, keep, scale, tol):
    """R factor -> (U, rhs, SSE, keep): column-scaled, aliased columns re-triangularised away."""
    p = keep.shape[1]
    full_scale = np.concatenate([scale, np.ones((len(scale), 1))], axis=1)
    r_aug = cross / full_scale[:, None, :]
    # kept iff its distance from the span of the earlier columns is resolvable;
    # that distance does not change when earlier aliased columns are dropped
    keep = keep & (np.abs(np.diagonal(r_aug, axis1=1, axis2=2)[:, :p]) > tol)
    r_aug = _embed_kept(r_aug, keep)
    return r_aug[:, :p, :p], r_aug[:, :p, p], r_aug[:, p, p] ** 2, keep


def _reduce_normal(m, cross, keep, scale, tol, intercept, shift):
    """Co-moment matrix -> (U, rhs, SSE, keep) by equilibrated order-preserving Cholesky."""
    g, p = keep.shape
    full_scale = np.concatenate([scale, np.ones((g, 1))], axis=1)
    a_full = cross / (full_scale[:, :, None] * full_scale[:, None, :])
    # constant (aliased) features: identity rows/columns
    a = np.where(keep[:, :, None] & keep[:, None, :], a_full[:, :p, :p], 0.0)
    idx = np.arange(p)
    a[:, idx, idx] = np.where(keep, a[:, idx, idx], 1.0)
    upper, keep = _cholesky_dropping(a, keep, tol)
    b = np.where(keep, a_full[:, :p, p], 0.0)
    rhs = np.zeros((g, p))      # forward substitution L u = b (L = U^T)
    for j in range(p):
        rhs[:, j] = (b[:, j] - np.einsum("gk,gk->g", upper[:, :j, j], rhs[:, :j])) / upper[:, j, j]
    # SSE from the centred state and the solution, e^T C e (+ W (m_y - m_x^T b)^2
    # without intercept), e = (-b, 1): no uncentred sums, and rounding in b enters
    # only to second order (C_yy - u^T u would cancel when R^2 is near 1).
    b_full = np.where(keep, np.einsum("gij,gj->gi", _tri_inverse(upper), rhs) / scale, 0.0)
    e = np.concatenate([-b_full, np.ones((g, 1))], axis=1)
    sse = np.einsum("gi,gij,gj->g", e, m.cross, e)
    if not intercept:
        sse = sse + m.w * np.einsum("gj,gj->g", e, m.mean + shift) ** 2
    return upper, rhs, sse, keep


def _condition(upper: np.ndarray) -> np.ndarray:
    """kappa_2 of U^T U (the scaled cross-product matrix) per group."""
    g, p, _ = upper.shape
    if p == 1:      # a 1x1 equilibrated matrix is perfectly conditioned
        return np.ones(g)
    sv = np.linalg.svd(upper, compute_uv=False) if g else np.zeros((0, p))
    return (sv[:, 0] / sv[:, -1]) ** 2


def _statuses(features, keep, n, df, k_full, cond, ill_limit) -> np.ndarray:
    """One status per group, the most serious first: no_rows > too_few_rows > rank_deficient
    > exactly_determined > ill_conditioned > ok."""
    status = np.full(len(n), STATUS_OK, dtype=object)
    status[cond > ill_limit] = "ill_conditioned"
    status[df == 0] = "exactly_determined"
    names = np.array(features, dtype=object)
    for gi in np.nonzero(~keep.all(axis=1))[0]:
        status[gi] = "rank_deficient:" + ",".join(names[~keep[gi]])
    status[n < k_full] = "too_few_rows"
    status[n == 0] = "no_rows"
    return status


def _solve(m: Moments, features, intercept, shift, confidence, solver) -> GroupFits:
    g, d = m.mean.shape
    p = d - 1
    tol, ill_limit = TOLERANCES[solver]
    cross = m.cross if intercept else uncentred(m, shift)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        col_sq, keep, scale = _column_scale(m, cross, intercept, p)
        if m.form == "qr":
            upper, rhs, sse, keep = _reduce_qr(cross, keep, scale, tol)
        else:
            upper, rhs, sse, keep = _reduce_normal(m, cross, keep, scale, tol, intercept, shift)
        sse = np.maximum(sse, 0.0)
        sst = col_sq[:, p]      # C_yy, or the uncentred sum of squares without intercept
        uinv = _tri_inverse(upper)
        both = keep[:, :, None] & keep[:, None, :]
        beta = np.where(keep, np.einsum("gij,gj->gi", uinv, rhs) / scale, np.nan)
        xinv = np.where(both, (uinv @ np.swapaxes(uinv, -1, -2)) / (scale[:, :, None] * scale[:, None, :]), 0.0)
        cond = _condition(upper)

        n = m.n
        k = keep.sum(axis=1) + (1 if intercept else 0)
        k_full = p + (1 if intercept else 0)
        df = n - k
        sigma2 = np.where(df > 0, sse / np.maximum(df, 1), np.nan)
        cov_x = sigma2[:, None, None] * xinv
        if intercept:
            # intercept = m_y - m_x^T beta, at x = 0 in true coordinates
            mx = np.where(keep, m.mean[:, :p] + shift[:p], 0.0)
            beta0 = m.mean[:, p] + shift[p] - np.einsum("gj,gj->g", mx, np.where(keep, beta, 0.0))
            cm = np.einsum("gij,gj->gi", cov_x, mx)
            est = np.concatenate([beta0[:, None], beta], axis=1)
            cov = np.zeros((g, p + 1, p + 1))
            cov[:, 0, 0] = sigma2 / m.w + np.einsum("gj,gj->g", mx, cm)
            cov[:, 0, 1:] = cov[:, 1:, 0] = -cm
            cov[:, 1:, 1:] = cov_x
            kept_terms = np.concatenate([np.ones((g, 1), bool), keep], axis=1)
        else:
            est, cov, kept_terms = beta, cov_x, keep
        unusable = n < k_full
        cov = np.where(kept_terms[:, :, None] & kept_terms[:, None, :] & ~unusable[:, None, None],
                       cov, np.nan)
        est = np.where(unusable[:, None], np.nan, est)
        se = np.sqrt(np.diagonal(cov, axis1=1, axis2=2))
        t = est / se
        df_ok = np.where(df > 0, df, np.nan).astype(float)
        pval = 2.0 * special.stdtr(df_ok[:, None], -np.abs(t))
        half = _t_quantiles(df, 0.5 + confidence / 2.0)[:, None] * se
        r2 = np.where(unusable, np.nan, 1.0 - sse / sst)
        df_model = k - (1 if intercept else 0)
        stat_nan = unusable | (df <= 0)
        adj = 1.0 - ((n - (1 if intercept else 0)) / df_ok) * (1.0 - r2)
        f = np.where(df_model > 0, ((sst - sse) / df_model) / sigma2, np.nan)
        fp = special.fdtrc(np.where(df_model > 0, df_model, np.nan), df_ok, f)
        adj, f, fp, rse = (np.where(stat_nan, np.nan, v) for v in (adj, f, fp, np.sqrt(sigma2)))
        status = _statuses(features, keep, n, df, k_full, cond, ill_limit)
        cond = np.where(unusable, np.nan, cond)
    terms = (("intercept",) if intercept else ()) + tuple(features)
    return GroupFits(
        terms=terms, n_rows=n.copy(), status=status, estimate=est, std_error=se,
        t_value=t, p_value=pval, ci_low=est - half, ci_high=est + half, covariance=cov,
        r_squared=r2, adj_r_squared=adj, residual_std_error=rse,
        df_residual=np.where(unusable, 0, df).astype(np.int64), f_statistic=f, f_p_value=fp,
        condition_number=cond, feature_mean=m.mean[:, :p] + shift[:p], weight_sum=m.w.copy())
