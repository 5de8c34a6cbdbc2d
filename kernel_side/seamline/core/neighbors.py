"""Nearest-neighbour residuals for the variance of local polynomial estimators.

For each observation the J nearest neighbours on the same side (all ties at the J-th distance kept)
give sigma2_i = M/(M+1) (Y_i - mean of neighbours)^2 (Abadie & Imbens 2006 style; METHODS section 2.2).
We return the scaled residuals e_i = sqrt(M/(M+1)) (Y_i - mean) for several variables at once, so that
every (co)variance the engine needs is a product e_ia * e_ib, computed on demand.
"""
from __future__ import annotations

import numpy as np

CHUNK = 1 << 16


def neighbor_residuals(x_sorted: np.ndarray, values: np.ndarray, neighbors: int = 3,
                       rel_tol: float = 1e-12, tol: float | None = None,
                       counts: bool = True) -> tuple[np.ndarray, np.ndarray | None]:
    """Scaled nearest-neighbour residuals for observations on one side of the cutoff.

    Parameters
    ----------
    x_sorted : (n,) float array, sorted ascending (the score on one side).
    values : (n, k) float array of variables (outcome, take-up, covariates) in the same order.
    neighbors : J, the number of neighbours (3 is the literature default).
    rel_tol : distances closer than ``rel_tol * range(x)`` count as ties, so that floating-point
        noise in discrete scores does not break ties arbitrarily.
    tol : an absolute tie tolerance instead (a part of a side computed with the whole side's).
    counts : also return M_i (False: None instead, and no n-long array of them is made).

    Returns
    -------
    residuals : (n, k) array, sqrt(M_i/(M_i+1)) * (values_i - mean of neighbours of i).
    n_neighbors : (n,) int array, M_i (>= J when the side has more than J observations), or None.
    """
    x = np.asarray(x_sorted, dtype=float)
    vals = np.asarray(values, dtype=float)
    if vals.ndim == 1:
        vals = vals[:, None]
    n = len(x)
    if n < 2:
        return np.full_like(vals, np.nan), (np.zeros(n, dtype=int) if counts else None)
    if tol is None:
        tol = rel_tol * max(x[-1] - x[0], np.finfo(float).tiny)
    # Where a new group of (near-)equal values starts, found chunk by chunk: no full-length gaps array.
    new_group = np.empty(n, dtype=bool)
    new_group[0] = True
    for start in range(1, n, CHUNK):
        stop = min(start + CHUNK, n)
        np.greater(x[start:stop] - x[start - 1:stop - 1], tol, out=new_group[start:stop])
    resid = np.empty_like(vals)
    m = np.empty(n, dtype=int) if counts else None
    if new_group.all():
        # Without ties every neighbour lies within J positions, so chunks with a J-row halo are
        # exact and keep the temporaries small.
        del new_group
        for start in range(0, n, CHUNK):
            stop = min(start + CHUNK, n)
            lo, hi = max(0, start - neighbors), min(n, stop + neighbors)
            r, mm = _without_ties(x[lo:hi], vals[lo:hi], neighbors, tol)
            resid[start:stop] = r[start - lo: stop - lo]
            if m is not None:
                m[start:stop] = mm[start - lo: stop - lo]
        return resid, m
    starts = np.flatnonzero(new_group)
    del new_group
    # Every neighbour of a group lies within J groups of it (each expansion step adds a group), so
    # chunks of groups with a J-group halo on each side give exactly the whole-side result.
    n_groups = len(starts)
    for g0 in range(0, n_groups, CHUNK):
        g1 = min(g0 + CHUNK, n_groups)
        h0, h1 = max(0, g0 - neighbors), min(n_groups, g1 + neighbors)
        lo, hi = starts[h0], (starts[h1] if h1 < n_groups else n)
        first, stop = starts[g0], (starts[g1] if g1 < n_groups else n)
        _with_ties(x[lo:hi], vals[lo:hi], neighbors, tol, starts[h0:h1] - lo,
                   (first - lo, stop - lo), resid[first:stop], None if m is None else m[first:stop])
    return resid, m


def _with_ties(x: np.ndarray, vals: np.ndarray, neighbors: int, tol: float, starts: np.ndarray,
               rows: tuple[int, int], resid: np.ndarray, m_rows: np.ndarray | None) -> None:
    """Residuals when some values are tied, written into ``resid`` and ``m_rows`` for ``rows``.

    ``starts`` are the first rows of the groups of ties in ``x``; ``rows`` (a range of whole groups,
    J groups from either end of ``x`` unless the side ends there) are the rows to fill.
    """
    n = len(x)
    # A mass point is one group; distances are measured between groups.
    counts = np.diff(np.r_[starts, n])
    g_val = x[starts]
    g_sum = np.add.reduceat(vals, starts, axis=0)
    n_groups = len(starts)

    # Expand a range [lo, hi] of groups around each group until it holds >= J other observations.
    # Ties between the left and right candidate are taken together, so every observation at the
    # J-th distance is kept. Each step adds at least one group, so J steps suffice.
    lo = np.arange(n_groups)
    hi = lo.copy()
    have = counts - 1
    for _ in range(neighbors):
        active = have < neighbors
        if not active.any():
            break
        left_d = np.where(lo > 0, g_val - g_val[np.maximum(lo - 1, 0)], np.inf)
        right_d = np.where(hi < n_groups - 1, g_val[np.minimum(hi + 1, n_groups - 1)] - g_val, np.inf)
        can = active & np.isfinite(np.minimum(left_d, right_d))
        take_left = can & (left_d <= right_d + tol)
        take_right = can & (right_d <= left_d + tol)
        have = have + np.where(take_left, counts[np.maximum(lo - 1, 0)], 0)
        have = have + np.where(take_right, counts[np.minimum(hi + 1, n_groups - 1)], 0)
        lo = lo - take_left
        hi = hi + take_right

    # Sum the (at most J + 2) groups in each range directly rather than by differencing prefix sums,
    # which would lose precision for outcomes with a large offset.
    range_sum = np.zeros_like(g_sum)
    width = hi - lo
    for offset in range(int(width.max()) + 1):
        inside = offset <= width
        idx = np.minimum(lo + offset, n_groups - 1)
        range_sum += np.where(inside[:, None], g_sum[idx], 0.0)

    # Per-row residuals in chunks, so the temporaries stay small for large groups.
    first, last = rows
    for start in range(first, last, CHUNK):
        stop = min(start + CHUNK, last)
        group = np.searchsorted(starts, np.arange(start, stop), side="right") - 1
        m = have[group].astype(float)
        with np.errstate(invalid="ignore", divide="ignore"):
            neighbor_mean = (range_sum[group] - vals[start:stop]) / m[:, None]
            scale = np.sqrt(m / (m + 1.0))
        resid[start - first: stop - first] = scale[:, None] * (vals[start:stop] - neighbor_mean)
        if m_rows is not None:
            m_rows[start - first: stop - first] = have[group]


def _without_ties(x: np.ndarray, vals: np.ndarray, neighbors: int, tol: float):
    """Same result when all values are distinct: neighbours lie among the J nearest on each side.

    The J-th smallest distance of the merged left/right lists is min over l of max(L_l, R_{J-l}), where
    L_j (R_j) is the distance to the j-th value on the left (right). Every distance up to it is kept,
    so a tie between the two sides at the J-th distance keeps both (M = J + 1). Only array shifts are
    needed, no gathers.
    """
    n, j_max = len(x), neighbors
    pad_x = np.concatenate([np.full(j_max, -np.inf), x, np.full(j_max, np.inf)])
    left = [x - pad_x[j_max - j: j_max - j + n] for j in range(1, j_max + 1)]
    right = [pad_x[j_max + j: j_max + j + n] - x for j in range(1, j_max + 1)]
    zero = np.zeros(n)
    radius = np.full(n, np.inf)
    for l in range(j_max + 1):
        a = left[l - 1] if l > 0 else zero
        b = right[j_max - l - 1] if l < j_max else zero
        np.minimum(radius, np.maximum(a, b), out=radius)
    limit = np.where(np.isfinite(radius), radius + tol, np.inf)
    pad_v = np.concatenate([np.zeros((j_max, vals.shape[1])), vals, np.zeros((j_max, vals.shape[1]))])
    total = np.zeros_like(vals)
    m = np.zeros(n)
    for j in range(1, j_max + 1):
        for dist, rows in ((left[j - 1], slice(j_max - j, j_max - j + n)),
                           (right[j - 1], slice(j_max + j, j_max + j + n))):
            take = (dist <= limit) & np.isfinite(dist)
            m += take
            total += np.where(take[:, None], pad_v[rows], 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        scale = np.sqrt(m / (m + 1.0))
        resid = scale[:, None] * (vals - total / m[:, None])
    return resid, m.astype(int)
