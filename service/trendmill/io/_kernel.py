"""Compiled per-row kernels of the scan: one batch of rows -> merged into per-group state.

Twin of ``trendmill.engine.moments.moments_from_rows`` (the pure-numpy reference the
tests compare it with). Per batch, per group: pass 1 takes the weighted mean about
the group's first row in the batch (so offsets cost no digits); pass 2 accumulates
centred products with compensated (two-sum) addition, plus the residual sums that
correct the mean; then Chan's update merges the batch into the running state.
The QR kernel rotates each centred row into the group's R factor (Givens) instead
of squaring it. ``nogil`` lets Arrow decode the next batch meanwhile.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

__all__ = ["accumulate_comoment", "accumulate_qr", "ints_to_float"]


@njit(cache=True, nogil=True)
def _row_ok(z, w, i, d, use_w):
    """0: use the row, 1: null/NaN, 2: infinite, 3: weight <= 0 or bad (negative: 4)."""
    for j in range(d):
        v = z[j, i]
        if v != v:
            return 1
    if use_w:
        wi = w[i]
        if wi != wi:
            return 1
        if wi < 0 or wi == math.inf:
            return 4
        if wi == 0:
            return 3
    for j in range(d):
        if math.isinf(z[j, i]):
            return 2
    return 0


@njit(cache=True, nogil=True)
def _batch_means(codes, z, w, use_w, groups, skipped, infinite):
    """Pass 1: per-group count, weight sum and mean of the batch, and which rows are used.

    Returns (cnt, wsum, mean, ok, number of negative/infinite weights).
    """
    d, n = z.shape
    ok = np.zeros(n, np.bool_)
    cnt = np.zeros(groups, np.int64)
    wsum = np.zeros(groups)
    first = np.empty((groups, d))
    acc = np.zeros((groups, d))
    bad = 0
    for i in range(n):
        g = codes[i]
        state = _row_ok(z, w, i, d, use_w)
        if state != 0:
            if state == 1:
                skipped[g] += 1
            elif state == 2:
                infinite[g] += 1
            elif state == 4:
                bad += 1
            continue
        ok[i] = True
        wi = w[i] if use_w else 1.0
        if cnt[g] == 0:
            for j in range(d):
                first[g, j] = z[j, i]
        cnt[g] += 1
        wsum[g] += wi
        for j in range(d):
            acc[g, j] += wi * (z[j, i] - first[g, j])
    mean = np.zeros((groups, d))
    for g in range(groups):
        if cnt[g] > 0:
            for j in range(d):
                mean[g, j] = first[g, j] + acc[g, j] / wsum[g]
    return cnt, wsum, mean, ok, bad


@njit(cache=True, nogil=True)
def accumulate_comoment(codes, z, w, use_w, n_tot, w_tot, mean_tot, c_tot, skipped, infinite):
    """Merge one batch into the co-moment state (arrays updated in place).

    codes (n,) int64 group ids < len(n_tot); z (d, n) float64 (x..., y) with NaN for
    nulls; w (n,) weights (ignored unless use_w). Returns the number of rows with a
    negative or infinite weight (the caller raises).
    """
    groups = n_tot.shape[0]
    d, n = z.shape
    cnt, wsum, mean, ok, bad = _batch_means(codes, z, w, use_w, groups, skipped, infinite)
    if bad:
        return bad
    hi = np.zeros((groups, d, d))
    lo = np.zeros((groups, d, d))
    e = np.zeros((groups, d))
    r = np.empty(d)
    for i in range(n):
        g = codes[i]
        if not ok[i]:
            continue
        wi = w[i] if use_w else 1.0
        for j in range(d):
            r[j] = z[j, i] - mean[g, j]
            e[g, j] += wi * r[j]
        for a in range(d):
            wa = wi * r[a]
            for b in range(a, d):
                # two-sum: hi + lo carries the sum exactly to twice the precision
                t = wa * r[b]
                s = hi[g, a, b] + t
                bp = s - hi[g, a, b]
                lo[g, a, b] += (hi[g, a, b] - (s - bp)) + (t - bp)
                hi[g, a, b] = s
    for g in range(groups):
        if cnt[g] == 0:
            continue
        wb = wsum[g]
        for a in range(d):
            for b in range(a, d):
                c = (hi[g, a, b] + lo[g, a, b]) - e[g, a] * e[g, b] / wb
                hi[g, a, b] = c
                hi[g, b, a] = c
        # Chan's update with the corrected batch mean
        wa_ = w_tot[g]
        wt = wa_ + wb
        fb = wb / wt
        f = wa_ * fb
        for a in range(d):
            mb = mean[g, a] + e[g, a] / wb
            r[a] = mb - mean_tot[g, a]
        for a in range(d):
            for b in range(d):
                c_tot[g, a, b] += hi[g, a, b] + f * r[a] * r[b]
        for a in range(d):
            mean_tot[g, a] += r[a] * fb
        w_tot[g] = wt
        n_tot[g] += cnt[g]
    return 0


@njit(cache=True, nogil=True)
def _rotate_in(rmat, g, row, d):
    """Givens-rotate ``row`` (destroyed) into the upper-triangular rmat[g]."""
    for j in range(d):
        b = row[j]
        if b == 0.0:
            continue
        a = rmat[g, j, j]
        h = math.hypot(a, b)
        c = a / h
        s = b / h
        rmat[g, j, j] = h
        for k in range(j + 1, d):
            t = rmat[g, j, k]
            rmat[g, j, k] = c * t + s * row[k]
            row[k] = c * row[k] - s * t


@njit(cache=True, nogil=True)
def accumulate_qr(codes, z, w, use_w, n_tot, w_tot, mean_tot, r_tot, skipped, infinite):
    """Merge one batch into the QR state (R^T R = C); same contract as accumulate_comoment."""
    groups = n_tot.shape[0]
    d, n = z.shape
    cnt, wsum, mean, ok, bad = _batch_means(codes, z, w, use_w, groups, skipped, infinite)
    if bad:
        return bad
    row = np.empty(d)
    # Chan's cross term first: rotating sqrt(Wa Wb / W) (mb - ma) into R is the merge,
    # the batch's centred rows follow into the same factor.
    for g in range(groups):
        if cnt[g] == 0:
            continue
        wt = w_tot[g] + wsum[g]
        fb = wsum[g] / wt
        f = math.sqrt(w_tot[g] * fb)
        for a in range(d):
            delta = mean[g, a] - mean_tot[g, a]
            row[a] = f * delta
            mean_tot[g, a] += delta * fb
        _rotate_in(r_tot, g, row, d)
        w_tot[g] = wt
        n_tot[g] += cnt[g]
    for i in range(n):
        g = codes[i]
        if not ok[i]:
            continue
        sw = math.sqrt(w[i]) if use_w else 1.0
        for j in range(d):
            row[j] = sw * (z[j, i] - mean[g, j])
        _rotate_in(r_tot, g, row, d)
    return 0


@njit(cache=True, nogil=True)
def ints_to_float(ints, origin, per_unit, out):
    """out = (ints - origin) / per_unit: the subtraction is exact in int64, then one rounding."""
    if per_unit == 1.0:
        for i in range(ints.shape[0]):
            out[i] = float(ints[i] - origin)
    else:
        for i in range(ints.shape[0]):
            out[i] = float(ints[i] - origin) / per_unit
