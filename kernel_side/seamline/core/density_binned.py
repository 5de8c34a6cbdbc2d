"""The binned log-difference density test (McCrary 2008): pure numerical core.

McCrary (2008, Journal of Econometrics 142(2): 698-714; METHODS section 8.1): a fine histogram
that never straddles the cutoff, local linear triangular fits of the normalised counts on each
side, theta = ln f+ - ln f-. The histogram is counted chunk by chunk over each side's sorted
scores (``density_sample.SortedScores``), so nothing of length n is made beside them.
Sides: "below" is X < c and "above" is X >= c (METHODS 0.2).
"""
from __future__ import annotations

import math

import numpy as np

from ..errors import InvalidBandwidthError, TooFewDistinctValuesError
from ..options import check_level
from .density_results import DensityEstimate, DensityHistogram, frozen
from .density_sample import (
    CHUNK,
    SortedScores,
    bin_index,
    check_grid_points,
    check_plot_range,
    check_positive,
    grid_from_rows,
    grid_points as _grid_points,
    score_array,
    sorted_scores,
    two_sided,
    z_value,
)
from .kernels import kernel_weights

# McCrary's rule-of-thumb bandwidth constant as published (from memory; METHODS 8.1 flags it).
# The theoretical boundary local-linear triangular constant would be (R*/mu*^2)^(1/5) = 3.4375.
MCCRARY_KAPPA = 3.348
# Variance constant of the boundary local linear triangular smoother: R* = int_0^1 K*^2 = 24/5
# (derived in METHODS 8.1 / 1.4, check value A14).
MCCRARY_R_STAR = 24.0 / 5.0


def binned_bin_width(score) -> float:
    """McCrary's default bin size b = 2 sd(X) n^(-1/2) (METHODS 8.1; from memory)."""
    x = score_array(score)
    return float(2.0 * np.std(x, ddof=1) / math.sqrt(x.size))


def _sorted_bin_width(sample: SortedScores) -> float:
    """binned_bin_width of the sorted scores (their sd summed in sorted order)."""
    return float(2.0 * sample.std() / math.sqrt(sample.n))


class _Binned:
    """The histogram of McCrary's first step: midpoints, normalised heights, side of each bin."""

    def __init__(self, sample: SortedScores, cutoff: float, width: float):
        n = sample.n
        # the bin index never falls along the sorted scores: its range is that of the end scores
        ends = bin_index(np.array([sample.first, sample.last]), cutoff, width)
        self.k_lo = min(int(ends[0]), -1)
        k_hi = max(int(ends[1]), 0)
        self.ks = np.arange(self.k_lo, k_hi + 1)
        count = np.zeros(self.ks.size, dtype=np.int64)
        for part in sample.parts:
            for start in range(0, part.size, CHUNK):
                k = bin_index(part[start:start + CHUNK], cutoff, width)
                count += np.bincount(k - self.k_lo, minlength=self.ks.size)
        self.count = count.astype(float)
        self.mid = cutoff + (self.ks + 0.5) * width
        self.height = self.count / (n * width)
        self.below = self.ks < 0
        self.width, self.n, self.cutoff = width, n, cutoff


def _rule_of_thumb_side(mid: np.ndarray, height: np.ndarray, cutoff: float, side: str) -> float:
    """McCrary's side bandwidth kappa [s2 (b - a) / sum f''(X_j)^2]^(1/5) (METHODS 8.1; from memory).

    A global polynomial of order 4 (lower when the side has fewer than 6 bins) is fitted to the
    normalised counts; s2 = mean squared residual; (b - a) is the span from the cutoff to the
    side's farthest bin midpoint (convention: the side's grid range, up to half a bin).
    """
    j = mid.size
    deg = min(4, j - 2)
    if deg < 2:
        side_word = "below" if side == "below" else "above"
        raise TooFewDistinctValuesError(
            f"`bin_width` must leave at least 4 histogram bins {side_word} the cutoff for the "
            f"rule-of-thumb bandwidth; got {j}. Pass a smaller `bin_width` or an explicit `bandwidth`.")
    span = float(np.max(np.abs(mid - cutoff)))
    u = (mid - cutoff) / span
    coef = np.polynomial.polynomial.polyfit(u, height, deg)
    resid = height - np.polynomial.polynomial.polyval(u, coef)
    s2 = float(np.mean(resid ** 2))
    poly = np.polynomial.polynomial
    second = poly.polyval(u, poly.polyder(coef, 2)) / span ** 2
    denom = float(np.sum(second ** 2))
    if denom <= 0.0 or s2 <= 0.0:
        return span
    return float(MCCRARY_KAPPA * (s2 * span / denom) ** 0.2)


def binned_bandwidth(score, cutoff: float, *, bin_width: float | None = None) -> float:
    """McCrary's rule-of-thumb bandwidth h = (h_below + h_above) / 2 (METHODS 8.1; from memory).

    Parameters
    ----------
    score : 1-D float array of the running variable.
    cutoff : the cutoff c.
    bin_width : histogram bin size; default 2 sd(X) n^(-1/2).
    """
    x = score_array(score)
    cutoff = float(cutoff)
    sample = sorted_scores(x, cutoff)
    width = binned_bin_width(x) if bin_width is None else check_positive("bin_width", bin_width)
    binned = _Binned(sample, cutoff, width)
    return _binned_bandwidth(binned)


def _binned_bandwidth(binned: _Binned) -> float:
    c = binned.cutoff
    h_b = _rule_of_thumb_side(binned.mid[binned.below], binned.height[binned.below], c, "below")
    h_a = _rule_of_thumb_side(binned.mid[~binned.below], binned.height[~binned.below], c, "above")
    return 0.5 * (h_b + h_a)


def _binned_smoother(binned: _Binned, side: str, x0: float,
                     h: float) -> tuple[np.ndarray, np.ndarray] | None:
    """Local linear triangular weights a_j (f_hat = sum a_j height_j) for the side's bins near x0."""
    mask = binned.below if side == "below" else ~binned.below
    idx = np.flatnonzero(mask)
    d = binned.mid[idx] - x0
    k = kernel_weights("triangular", np.abs(d) / h)
    keep = k > 0
    idx, d, k = idx[keep], d[keep], k[keep]
    if idx.size < 2:
        return None
    r = np.column_stack((np.ones_like(d), d / h))
    gram = (r * k[:, None]).T @ r
    a = (np.linalg.solve(gram, np.eye(2)[0]) @ (r * k[:, None]).T)
    return idx, a


def binned_density_test(score, cutoff: float, *, bin_width: float | None = None,
                        bandwidth: float | None = None, level: float = 0.95,
                        grid_points: int = 20,
                        plot_range: tuple[float, float] | None = None) -> DensityEstimate:
    """Binned log-difference density test at the cutoff (McCrary 2008).

    Parameters
    ----------
    score : 1-D float array of the running variable (finite).
    cutoff : the cutoff c.
    bin_width : histogram bin size; default 2 sd(X) n^(-1/2) (:func:`binned_bin_width`).
    bandwidth : bandwidth of the local linear fits (the same on both sides); default McCrary's rule
        of thumb (:func:`binned_bandwidth`). The author presents the rule as a starting point to be
        checked by eye.
    level : confidence level of the intervals.
    grid_points : number of plotting points per side (0 skips the grid).
    plot_range : (low, high) span of the grid; default [c - h, c + h] clipped to the data.

    Returns
    -------
    DensityEstimate
        ``histogram`` holds the test's own histogram over the whole data range.

    Notes
    -----
    Bins are [c + k b, c + (k+1) b), so none straddles c; empty bins are kept with count 0.
    Heights Y_j = count_j / (n b) are smoothed on each side by weighted least squares on
    (1, X_j - c) with triangular weights K((X_j - c)/h); the intercepts are f_below, f_above.
    theta = ln f_above - ln f_below, se(theta) = sqrt((24/5)(1/f_above + 1/f_below) / (n h)).
    Grid bands use the multinomial variance of the linear smoother,
    Var(sum a_j N_j) = sum a_j^2 N_j - (sum a_j N_j)^2 / n, so at the cutoff they can differ slightly
    from ``se_below``/``se_above``, which use the asymptotic form behind the test.

    References
    ----------
    McCrary, J. (2008). Manipulation of the running variable in the regression discontinuity design:
    a density test. Journal of Econometrics 142(2), 698-714.
    """
    x = score_array(score)
    cutoff = float(cutoff)
    check_level(level), check_grid_points(grid_points), check_plot_range(plot_range, cutoff)
    sample = sorted_scores(x, cutoff)
    if bin_width is None:
        bin_width = binned_bin_width(x)      # the sd in input order, as it always was
    return binned_test_sorted(sample, bin_width=bin_width, bandwidth=bandwidth, level=level,
                              grid_points=grid_points, plot_range=plot_range)


def binned_test_sorted(sample: SortedScores, *, bin_width: float | None = None,
                       bandwidth: float | None = None, level: float = 0.95, grid_points: int = 20,
                       plot_range: tuple[float, float] | None = None) -> DensityEstimate:
    """:func:`binned_density_test` on scores already sorted per side (``SortedScores``); the
    default bin width takes the sd of the sorted scores (equal to the input order's up to rounding)."""
    cutoff = sample.cutoff
    level = check_level(level)
    grid_points = check_grid_points(grid_points)
    plot_range = check_plot_range(plot_range, cutoff)
    n_below = sample.n_below
    n = sample.n
    width = _sorted_bin_width(sample) if bin_width is None else check_positive("bin_width", bin_width)
    if bandwidth is not None:
        h = check_positive("bandwidth", bandwidth, InvalidBandwidthError)
    binned = _Binned(sample, cutoff, width)
    if bandwidth is None:
        h = _binned_bandwidth(binned)
    z = z_value(level)

    est, used = {}, {}
    for side in ("below", "above"):
        fit = _binned_smoother(binned, side, cutoff, h)
        if fit is None:
            raise InvalidBandwidthError(
                f"`bandwidth` must cover at least 2 histogram bins {side} the cutoff; got {h:g} "
                f"with bins of width {width:g}. Pass a wider `bandwidth` or a smaller `bin_width`.")
        idx, a = fit
        est[side] = float(a @ binned.height[idx])
        used[side] = int(idx.size)
    se = {s: math.sqrt(MCCRARY_R_STAR * max(est[s], 0.0) / (n * h)) for s in est}
    positive = est["below"] > 0 and est["above"] > 0
    if positive:
        theta = math.log(est["above"]) - math.log(est["below"])
        se_theta = math.sqrt(MCCRARY_R_STAR / (n * h) * (1.0 / est["above"] + 1.0 / est["below"]))
        t = theta / se_theta
        reason = ""
    else:
        theta = t = math.nan
        reason = "a density estimate at the cutoff is not positive, so its logarithm is undefined"

    low, high = plot_range if plot_range is not None else (
        max(sample.first, cutoff - h), min(sample.last, cutoff + h))
    gx_below, gx_above = _grid_points(low, high, cutoff, grid_points)
    rows = []
    for side, points in (("below", gx_below), ("above", gx_above)):
        for x0 in points:
            fit = _binned_smoother(binned, side, float(x0), h)
            if fit is None:
                rows.append((x0, side, math.nan, math.nan, math.nan, math.nan))
                continue
            idx, a = fit
            counts = binned.count[idx]
            var_counts = float(a ** 2 @ counts - (a @ counts) ** 2 / n)
            s = math.sqrt(max(var_counts, 0.0)) / (n * width)
            d = float(a @ binned.height[idx])
            rows.append((x0, side, d, s, d - z * s, d + z * s))
    grid = grid_from_rows(rows)

    side_words = np.where(binned.below, "below", "above")
    left = cutoff + binned.ks * width
    right = cutoff + (binned.ks + 1) * width
    left[binned.ks == 0] = cutoff
    right[binned.ks == -1] = cutoff
    hist = DensityHistogram(side=frozen(side_words, dtype="<U5"), left=frozen(left),
                            right=frozen(right), count=frozen(binned.count, dtype=np.int64),
                            height=frozen(binned.height), bin_width=float(width))
    return DensityEstimate(
        method="binned", cutoff=cutoff,
        density_below=est["below"], density_above=est["above"],
        se_below=se["below"], se_above=se["above"],
        density_below_robust=math.nan, density_above_robust=math.nan,
        se_below_robust=math.nan, se_above_robust=math.nan,
        ci_below=(est["below"] - z * se["below"], est["below"] + z * se["below"]),
        ci_above=(est["above"] - z * se["above"], est["above"] + z * se["above"]),
        difference=est["above"] - est["below"], log_difference=theta,
        statistic=t, p_value=two_sided(t), statistic_conventional=t,
        p_value_conventional=two_sided(t), cross_covariance=0.0,
        bandwidth=(float(h), float(h)), n_below=n_below, n_above=n - n_below,
        n_used=(used["below"], used["above"]), n=n, degree=1, kernel="triangular", level=level,
        bin_width=float(width), tie_share=sample.tie_share(), grid=grid, histogram=hist, reason=reason)
