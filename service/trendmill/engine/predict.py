"""Predictions from one group's fit: mean of y at new x, with intervals.

For a design row ``d`` (``[1, x...]`` with an intercept, ``[x...]`` without),
coefficient estimates ``b`` and their covariance ``V = s² (XᵀWX)⁻¹``:

- mean            ``ŷ = d·b``
- its std error   ``se_mean = sqrt(d V dᵀ)``
- confidence      ``ŷ ± t·se_mean``          (interval for the mean of y at x)
- new observation ``se_pred = sqrt(se_mean² + s²)``
- prediction      ``ŷ ± t·se_pred``          (interval for one new y at x, weight 1)

with ``s`` the residual standard error and ``t`` the two-sided Student's t
quantile of the confidence level on ``df_residual`` degrees of freedom. These
are the textbook least-squares intervals; with precision weights the new
observation is taken to have weight 1.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import special

from .errors import SpecError

__all__ = ["Prediction", "predict"]


@dataclass(frozen=True, slots=True)
class Prediction:
    """Predictions at ``n`` points; every field is an array of shape ``(n,)``."""

    mean: np.ndarray
    mean_std_error: np.ndarray
    mean_ci_low: np.ndarray
    mean_ci_high: np.ndarray
    prediction_std_error: np.ndarray
    prediction_low: np.ndarray
    prediction_high: np.ndarray


def predict(x, *, estimates, covariance, residual_std_error: float,
            df_residual: int, confidence: float, intercept: bool = True,
            feature_means=None, weight_sum: float | None = None) -> Prediction:
    """Predict y at the rows of ``x`` from one group's fit.

    Parameters
    ----------
    x : array_like, shape (n, p)
        Feature values, one row per point, columns in the fit's feature order.
    estimates : array_like, shape (k,)
        Coefficients in term order (intercept first when fitted), k = p (+1).
    covariance : array_like, shape (k, k) or (k*k,)
        Coefficient covariance, row-major when flat.
    residual_std_error : float
        Residual standard error ``s`` of the fit.
    df_residual : int
        Residual degrees of freedom, > 0.
    confidence : float
        Level of both intervals, in (0, 1).
    intercept : bool
        Whether ``estimates`` starts with an intercept.
    feature_means : array_like, shape (p,), optional
        The group's weighted feature means; with ``weight_sum`` and an intercept the
        variance of the mean is taken as ``s²/W + (x - m) V_x (x - m)ᵀ``, which does
        not cancel when the features sit far from zero (timestamps in seconds
        since 1970 lose ~8 digits in ``d V dᵀ``).
    weight_sum : float, optional
        The group's sum of weights W.

    Raises
    ------
    SpecError
        ``points`` of the wrong shape or not finite, ``confidence`` outside
        (0, 1); ``df_residual`` or the fit values unusable.
    """
    b = np.asarray(estimates, dtype=np.float64).reshape(-1)
    k = b.shape[0]
    p = k - 1 if intercept else k
    pts = np.asarray(x, dtype=np.float64)
    if pts.ndim == 1:
        pts = pts.reshape(1, -1)
    if pts.ndim != 2 or pts.shape[1] != p or pts.shape[0] == 0:
        raise SpecError("points", f"expected {p} feature value(s) per point, got shape {pts.shape}")
    if not np.isfinite(pts).all():
        bad = int(np.argwhere(~np.isfinite(pts))[0, 0])
        raise SpecError("points", f"point {bad} has a non-finite value")
    c = float(confidence)
    if not math.isfinite(c) or not 0.0 < c < 1.0:
        raise SpecError("confidence", f"{confidence!r} must lie strictly between 0 and 1")
    v = np.asarray(covariance, dtype=np.float64).reshape(k, k)
    s = float(residual_std_error)
    if int(df_residual) <= 0:
        raise SpecError("df_residual", f"{df_residual} degrees of freedom, need at least 1")
    if not (np.isfinite(b).all() and np.isfinite(v).all() and math.isfinite(s)):
        raise SpecError("estimates", "the fit has non-finite coefficients or covariance")
    centre = None
    if intercept and feature_means is not None and weight_sum is not None:
        m = np.asarray(feature_means, dtype=np.float64).reshape(-1)
        if m.shape[0] == p and np.isfinite(m).all() and float(weight_sum) > 0:
            centre = (m, float(weight_sum))
    return _predict(pts, b, v, s, int(df_residual), c, intercept, centre)


def _predict(pts: np.ndarray, b: np.ndarray, v: np.ndarray, s: float, df: int,
             confidence: float, intercept: bool, centre=None) -> Prediction:
    """`predict` without the input validation."""
    d = np.hstack([np.ones((pts.shape[0], 1)), pts]) if intercept else pts
    mean = d @ b
    if centre is not None:
        m, w = centre
        dc = pts - m
        var_mean = s * s / w + np.einsum("ij,jk,ik->i", dc, v[1:, 1:], dc)
    else:
        # d V dᵀ row by row; clip the tiny negatives rounding can give.
        var_mean = np.maximum(np.einsum("ij,jk,ik->i", d, v, d), 0.0)
    se_mean = np.sqrt(var_mean)
    se_pred = np.sqrt(var_mean + s * s)
    t = float(special.stdtrit(df, 0.5 + confidence / 2.0))
    return Prediction(
        mean=mean,
        mean_std_error=se_mean,
        mean_ci_low=mean - t * se_mean,
        mean_ci_high=mean + t * se_mean,
        prediction_std_error=se_pred,
        prediction_low=mean - t * se_pred,
        prediction_high=mean + t * se_pred,
    )
