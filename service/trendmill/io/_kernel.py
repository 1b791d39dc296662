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

from . import _unrolled

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
def _batch_means(codes, z, w, use_w, slot, skipped, infinite):
    """Pass 1: batch-local slots of the groups present, their counts, weight sums and means.

    ``slot`` (>= groups, all -1) maps a group to its slot in this batch, so scratch
    space grows with the groups of the batch, not of the partition; it is all -1
    again on return. Returns (member slot per row or -1, slot -> group, cnt, wsum, mean,
    number of negative/infinite weights).
    """
    d, n = z.shape
    member = np.empty(n, np.int64)
    cap = min(n, slot.shape[0])
    group_of = np.empty(cap, np.int64)
    cnt = np.zeros(cap, np.int64)
    wsum = np.zeros(cap)
    first = np.empty((cap, d))
    acc = np.zeros((cap, d))
    used = 0
    bad = 0
    prev_g = -1
    k = -1
    for i in range(n):
        g = codes[i]
        # fast path: v - v == 0 holds exactly for finite v (NaN and +-inf give NaN)
        finite = True
        for j in range(d):
            v = z[j, i]
            finite &= v - v == 0.0
        if use_w:
            v = w[i]
            finite &= (v - v == 0.0) and v > 0.0
        state = 0 if finite else _row_ok(z, w, i, d, use_w)
        if state != 0:
            member[i] = -1
            if state == 1:
                skipped[g] += 1
            elif state == 2:
                infinite[g] += 1
            elif state == 4:
                bad += 1
            continue
        if g != prev_g:     # rows come in runs of one group: look the slot up once per run
            prev_g = g
            k = slot[g]
            if k < 0:
                k = used
                used += 1
                slot[g] = k
                group_of[k] = g
                for j in range(d):
                    first[k, j] = z[j, i]
        member[i] = k
        wi = w[i] if use_w else 1.0
        cnt[k] += 1
        wsum[k] += wi
        for j in range(d):
            acc[k, j] += wi * (z[j, i] - first[k, j])
    mean = np.empty((used, d))
    for k in range(used):
        slot[group_of[k]] = -1      # back to all -1 for the next batch
        for j in range(d):
            mean[k, j] = first[k, j] + acc[k, j] / wsum[k]
    return member, group_of[:used], cnt[:used], wsum[:used], mean, bad


@njit(cache=True, nogil=True)
def _flush(hi, lo, e, k, lhi, llo, le, d):
    """Add a run's local sums into slot k (two-sum, so nothing is lost), then clear them."""
    t = 0
    for a in range(d):
        e[k, a] += le[a]
        le[a] = 0.0
        for b in range(a, d):
            x = lhi[t]
            s = hi[k, t] + x
            bp = s - hi[k, t]
            lo[k, t] += (hi[k, t] - (s - bp)) + (x - bp) + llo[t]
            hi[k, t] = s
            lhi[t] = 0.0
            llo[t] = 0.0
            t += 1


@njit(cache=True, nogil=True)
def _centred_sums(member, z, w, use_w, mean, used):
    """Pass 2: per slot, two-sum accumulated centred products (packed upper triangle
    ``hi + lo``) and residual sums ``e``."""
    d, n = z.shape
    tri = d * (d + 1) // 2
    hi = np.zeros((used, tri))
    lo = np.zeros((used, tri))
    e = np.zeros((used, d))
    # rows of one group usually come in runs (files sorted by key): sum a run in
    # locals and touch the group's slot once per run
    lhi = np.zeros(tri)
    llo = np.zeros(tri)
    le = np.zeros(d)
    r = np.empty(d)
    cur = -1
    for i in range(n):
        k = member[i]
        if k < 0:
            continue
        if k != cur:
            if cur >= 0:
                _flush(hi, lo, e, cur, lhi, llo, le, d)
            cur = k
        wi = w[i] if use_w else 1.0
        for j in range(d):
            r[j] = z[j, i] - mean[k, j]
            le[j] += wi * r[j]
        t = 0
        for a in range(d):
            wa = wi * r[a]
            for b in range(a, d):
                x = wa * r[b]
                s = lhi[t] + x
                bp = s - lhi[t]
                llo[t] += (lhi[t] - (s - bp)) + (x - bp)
                lhi[t] = s
                t += 1
    if cur >= 0:
        _flush(hi, lo, e, cur, lhi, llo, le, d)
    return hi, lo, e


@njit(cache=True, nogil=True)
def _two_sum(a, b):
    s = a + b
    bp = s - a
    return s, (a - (s - bp)) + (b - bp)


@njit(cache=True, nogil=True)
def _add_exact(hi, lo, k, t, hv, lv):
    s, err = _two_sum(hi[k, t], hv)
    hi[k, t] = s
    lo[k, t] += err + lv


def accumulate_comoment(codes, z, w, use_w, n_tot, w_tot, mean_tot, c_tot, skipped, infinite, slot):
    """Merge one batch into the co-moment state (arrays updated in place).

    codes (n,) int64 group ids < len(n_tot); z (d, n) float64 (x..., y) with NaN for
    nulls; w (n,) weights (ignored unless use_w); slot (>= len(n_tot)) int64 all -1,
    left so. Returns the number of rows with a negative or infinite weight (the
    caller raises). Three compiled passes: means, centred sums (written out for
    small d, see ``_unrolled``), Chan's merge.
    """
    member, group_of, cnt, wsum, mean, bad = _batch_means(codes, z, w, use_w, slot, skipped, infinite)
    if bad:
        return bad
    sums = _unrolled.centred_sums(z.shape[0]) or _centred_sums
    hi, lo, e = sums(member, z, w, use_w, mean, group_of.shape[0])
    _merge_batch(group_of, cnt, wsum, mean, hi, lo, e, n_tot, w_tot, mean_tot, c_tot)
    return 0


@njit(cache=True, nogil=True)
def _merge_batch(group_of, cnt, wsum, mean, hi, lo, e, n_tot, w_tot, mean_tot, c_tot):
    """Chan's update of each group's running state with the batch's, mean corrected by ``e``."""
    d = mean.shape[1]
    delta = np.empty(d)
    for k in range(group_of.shape[0]):
        g = group_of[k]
        wb = wsum[k]
        wt = w_tot[g] + wb
        fb = wb / wt
        f = w_tot[g] * fb
        for a in range(d):
            delta[a] = mean[k, a] + e[k, a] / wb - mean_tot[g, a]
        t = 0
        for a in range(d):
            for b in range(a, d):
                c = (hi[k, t] + lo[k, t]) - e[k, a] * e[k, b] / wb + f * delta[a] * delta[b]
                c_tot[g, a, b] += c
                if b != a:
                    c_tot[g, b, a] += c
                t += 1
        for a in range(d):
            mean_tot[g, a] += delta[a] * fb
        w_tot[g] = wt
        n_tot[g] += cnt[k]


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
def accumulate_qr(codes, z, w, use_w, n_tot, w_tot, mean_tot, r_tot, skipped, infinite, slot):
    """Merge one batch into the QR state (R^T R = C); same contract as accumulate_comoment."""
    d, n = z.shape
    member, group_of, cnt, wsum, mean, bad = _batch_means(codes, z, w, use_w, slot, skipped, infinite)
    if bad:
        return bad
    row = np.empty(d)
    # Chan's cross term first: rotating sqrt(Wa Wb / W) (mb - ma) into R is the merge,
    # the batch's centred rows follow into the same factor.
    for k in range(group_of.shape[0]):
        g = group_of[k]
        wt = w_tot[g] + wsum[k]
        fb = wsum[k] / wt
        f = math.sqrt(w_tot[g] * fb)
        for a in range(d):
            delta = mean[k, a] - mean_tot[g, a]
            row[a] = f * delta
            mean_tot[g, a] += delta * fb
        _rotate_in(r_tot, g, row, d)
        w_tot[g] = wt
        n_tot[g] += cnt[k]
    for i in range(n):
        k = member[i]
        if k < 0:
            continue
        sw = math.sqrt(w[i]) if use_w else 1.0
        for j in range(d):
            row[j] = sw * (z[j, i] - mean[k, j])
        _rotate_in(r_tot, codes[i], row, d)
    return 0


@njit(cache=True, nogil=True)
def ints_to_float(ints, origin, per_unit, out):
    """out = (ints - origin) / per_unit: the subtraction is exact in int64, then one rounding.

    A difference beyond the int64 range (wrapped: its sign disagrees with the
    comparison) is taken in float64 instead.
    """
    for i in range(ints.shape[0]):
        v = ints[i]
        diff = v - origin
        if (v >= origin) != (diff >= 0):
            x = float(v) - float(origin)
        else:
            x = float(diff)
        out[i] = x if per_unit == 1.0 else x / per_unit


@njit(cache=True, nogil=True)
def int_range(v):
    """(min, max) of a non-empty integer array in one pass."""
    lo = v[0]
    hi = v[0]
    for x in v:
        if x < lo:
            lo = x
        elif x > hi:
            hi = x
    return lo, hi


@njit(cache=True, nogil=True)
def dense_lookup(v, lo, lut, next_id, out):
    """out[i] = lut[v[i] - lo], giving unseen values the next ids in order of appearance.

    Returns the positions (v - lo) of the new values, in id order.
    """
    fresh = np.empty(v.shape[0], np.int64)
    nf = 0
    for i in range(v.shape[0]):
        pos = v[i] - lo
        g = lut[pos]
        if g < 0:
            g = next_id + nf
            lut[pos] = g
            fresh[nf] = pos
            nf += 1
        out[i] = g
    return fresh[:nf]
