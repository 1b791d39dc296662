"""Mergeable per-group sufficient statistics and Chan's pairwise update.

A state covers G groups over the d = p + 1 columns z = (x_1 .. x_p, y):

- ``n``     (G,)      rows used,
- ``w``     (G,)      sum of weights (= n without weights),
- ``mean``  (G, d)    weighted mean of z, in the scan's shifted coordinates,
- ``cross`` (G, d, d) either the centred co-moment matrix C = sum w (z - m)(z - m)^T
  (``form="comoment"``) or an upper-triangular R with R^T R = C (``form="qr"``),
  the same information without ever squaring the data.

Merging (Chan, Golub & LeVeque 1979):
``W = Wa + Wb, delta = mb - ma, m = ma + delta Wb / W, C = Ca + Cb + (Wa Wb / W) delta delta^T``;
QR form: ``R = qr([Ra; Rb; sqrt(Wa Wb / W) delta^T]).R`` (a tall-skinny QR merge), batched
over groups.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Moments", "FORMS", "empty_moments", "merge_moments", "merge_into",
           "to_comoment", "uncentred", "canonical_r"]

FORMS = ("comoment", "qr")


@dataclass(frozen=True, slots=True)
class Moments:
    """Sufficient statistics of G groups (see module docstring for shapes)."""

    n: np.ndarray
    w: np.ndarray
    mean: np.ndarray
    cross: np.ndarray
    form: str = "comoment"

    def __post_init__(self) -> None:
        if self.form not in FORMS:
            raise ValueError(f"form == {self.form!r}, must be one of {FORMS}")
        g, d = self.mean.shape
        if self.n.shape != (g,) or self.w.shape != (g,) or self.cross.shape != (g, d, d):
            raise ValueError(
                f"inconsistent shapes: n {self.n.shape}, w {self.w.shape}, "
                f"mean {self.mean.shape}, cross {self.cross.shape}")

    @property
    def groups(self) -> int:
        return self.mean.shape[0]

    @property
    def dim(self) -> int:
        return self.mean.shape[1]

    def take(self, idx: np.ndarray) -> "Moments":
        return Moments(self.n[idx], self.w[idx], self.mean[idx], self.cross[idx], self.form)


def empty_moments(groups: int, dim: int, *, form: str = "comoment") -> Moments:
    """A state of ``groups`` groups holding no rows (the identity of the merge)."""
    return Moments(np.zeros(groups, np.int64), np.zeros(groups), np.zeros((groups, dim)),
                   np.zeros((groups, dim, dim)), form)


def canonical_r(r: np.ndarray) -> np.ndarray:
    """Flip row signs so every diagonal entry of the stacked R factors is >= 0.

    QR is unique only up to row signs; fixing them makes states comparable and
    merges reproducible whatever LAPACK chose.
    """
    sign = np.where(np.diagonal(r, axis1=-2, axis2=-1) < 0, -1.0, 1.0)
    return r * sign[..., :, None]


def merge_moments(a: Moments, b: Moments) -> Moments:
    """Chan's pairwise update of two states over the same G groups, group by group."""
    if a.form != b.form or a.mean.shape != b.mean.shape:
        raise ValueError(f"cannot merge {a.form} {a.mean.shape} with {b.form} {b.mean.shape}")
    w = a.w + b.w
    with np.errstate(invalid="ignore", divide="ignore"):
        frac_b = np.where(w > 0, b.w / w, 0.0)
        # Wa*Wb/W written as Wa*(Wb/W): no overflow for huge weight sums.
        f = a.w * frac_b
    delta = b.mean - a.mean
    mean = a.mean + delta * frac_b[:, None]
    if a.form == "comoment":
        cross = a.cross + b.cross + f[:, None, None] * (delta[:, :, None] * delta[:, None, :])
    else:
        stacked = np.concatenate([a.cross, b.cross, (np.sqrt(f)[:, None] * delta)[:, None, :]], axis=1)
        cross = canonical_r(np.linalg.qr(stacked, mode="r")) if len(w) else a.cross.copy()
    return Moments(a.n + b.n, w, mean, cross, a.form)


def merge_into(total: Moments, idx: np.ndarray, part: Moments) -> None:
    """Merge ``part`` into groups ``idx`` (unique) of ``total``, updating total's arrays in place.

    In place because the coordinator folds hundreds of partitions into one state of
    up to millions of groups; copying it each time would dominate.
    """
    merged = merge_moments(total.take(idx), part)
    total.n[idx], total.w[idx] = merged.n, merged.w
    total.mean[idx], total.cross[idx] = merged.mean, merged.cross


def to_comoment(m: Moments) -> Moments:
    """The co-moment form of a state (C = R^T R for the QR form)."""
    if m.form == "comoment":
        return m
    c = np.swapaxes(m.cross, -1, -2) @ m.cross
    return Moments(m.n, m.w, m.mean, c, "comoment")


def uncentred(m: Moments, shift: np.ndarray) -> np.ndarray:
    """The uncentred cross-product about zero, in the state's own form.

    ``shift`` (d,) is what the scan subtracted from each column, so the true mean
    is ``mean + shift``. Co-moment form: ``C + W m m^T``; QR form: ``qr([R; sqrt(W) m^T]).R``.
    """
    true_mean = m.mean + shift
    if m.form == "comoment":
        return m.cross + m.w[:, None, None] * (true_mean[:, :, None] * true_mean[:, None, :])
    row = (np.sqrt(m.w)[:, None] * true_mean)[:, None, :]
    return canonical_r(np.linalg.qr(np.concatenate([m.cross, row], axis=1), mode="r"))


def moments_from_rows(codes: np.ndarray, z: np.ndarray, groups: int, *,
                      weights: np.ndarray | None = None, form: str = "comoment") -> Moments:
    """State of ``groups`` groups from rows (pure numpy; the scan has a compiled twin).

    ``codes`` (n,) group of each row; ``z`` (n, d) finite values (x..., y); ``weights``
    (n,) > 0 or None. Two-pass: means first, then centred products with the
    residual-sum correction, so large offsets cost no digits.
    """
    codes = np.asarray(codes, dtype=np.int64)
    z = np.asarray(z, dtype=float)
    d = z.shape[1]
    w = np.ones(len(codes)) if weights is None else np.asarray(weights, dtype=float)
    n = np.bincount(codes, minlength=groups).astype(np.int64)
    wsum = np.bincount(codes, weights=w, minlength=groups)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.stack([np.bincount(codes, weights=w * z[:, j], minlength=groups) for j in range(d)], axis=1)
        mean = np.where(wsum[:, None] > 0, mean / wsum[:, None], 0.0)
    r = z - mean[codes]
    e = np.stack([np.bincount(codes, weights=w * r[:, j], minlength=groups) for j in range(d)], axis=1)
    out = np.zeros((groups, d, d))
    if form == "comoment":
        for i in range(d):
            for j in range(i, d):
                out[:, i, j] = out[:, j, i] = np.bincount(codes, weights=w * r[:, i] * r[:, j], minlength=groups)
        with np.errstate(invalid="ignore", divide="ignore"):
            corr = np.where(wsum[:, None, None] > 0, e[:, :, None] * e[:, None, :] / wsum[:, None, None], 0.0)
        out -= corr
    else:
        order = np.argsort(codes, kind="stable")
        bounds = np.searchsorted(codes[order], np.arange(groups + 1))
        sw = np.sqrt(w)[:, None] * r
        for gi in range(groups):
            rows = order[bounds[gi]:bounds[gi + 1]]
            if len(rows):
                rr = np.linalg.qr(np.vstack([sw[rows], np.zeros((max(0, d - len(rows)), d))]), mode="r")
                out[gi] = canonical_r(rr[:d])
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = mean + np.where(wsum[:, None] > 0, e / wsum[:, None], 0.0)
    return Moments(n, wsum, mean, out, form)
