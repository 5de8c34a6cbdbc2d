"""Results of the density (manipulation) tests: frozen dataclasses of numbers and read-only arrays.

``DensityEstimate`` is what both tests return (``density_local_cdf``, ``density_binned``), with its
plotting grid (``DensityGrid``) and histogram (``DensityHistogram``); ``with_level`` re-reports an
estimate at another confidence level (only the intervals change). Nothing is printed or warned here.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np
from scipy import stats

from ..options import check_level


def frozen(a, dtype=float) -> np.ndarray:
    out = np.array(a, dtype=dtype)  # always a private copy
    out.setflags(write=False)
    return out


@dataclass(frozen=True, eq=False)
class DensityGrid:
    """Fitted densities on a grid of points on each side, for plotting.

    Every point is estimated with that side's observations only (so the curve may jump at the
    cutoff); points at the cutoff itself are the one-sided boundary estimates.

    Attributes
    ----------
    x : evaluation points (score units).
    side : "below" or "above" for each point.
    density : point estimate (local-cdf: order-p fit; binned: local linear smoother of the histogram).
    std_error : standard error used for the band (local-cdf: of the robust order p+1 fit;
        binned: multinomial standard error of the linear smoother).
    ci_low, ci_high : confidence band at ``level`` (local-cdf: robust; binned: conventional).
        NaN where the window holds too few distinct scores.
    """

    x: np.ndarray
    side: np.ndarray
    density: np.ndarray
    std_error: np.ndarray
    ci_low: np.ndarray
    ci_high: np.ndarray


@dataclass(frozen=True, eq=False)
class DensityHistogram:
    """Histogram of the score with bins that never straddle the cutoff.

    Bins are [left, right) except the last bin above the cutoff, which is closed on the right.

    Attributes
    ----------
    side : "below" or "above" for each bin.
    left, right : bin edges; the cutoff is always an edge.
    count : number of observations in the bin.
    height : count / (n * bin_width), on the scale of the full-sample density.
    bin_width : common width of the bins.
    """

    side: np.ndarray
    left: np.ndarray
    right: np.ndarray
    count: np.ndarray
    height: np.ndarray
    bin_width: float


@dataclass(frozen=True, eq=False)
class DensityEstimate:
    """Result of a density (manipulation) test at the cutoff.

    Attributes
    ----------
    method : "local-cdf" (Cattaneo-Jansson-Ma 2020) or "binned" (McCrary 2008).
    cutoff : the cutoff c.
    density_below, density_above : estimates of the density of the score at c from each side
        (local-cdf: order-``degree`` fit; binned: local linear fit of the histogram).
    se_below, se_above : their standard errors (binned: sqrt((24/5) f / (n h)), the form behind the
        published test statistic).
    density_below_robust, density_above_robust, se_below_robust, se_above_robust : local-cdf only,
        the order degree+1 fit at the same bandwidth (bias-corrected); NaN for "binned".
    ci_below, ci_above : (low, high) interval at ``level`` for each side's density at c
        (local-cdf: robust; binned: conventional).
    difference : density_above - density_below (point estimates).
    log_difference : ln(density_above) - ln(density_below); NaN if an estimate is not positive.
    statistic, p_value : the test of equal densities at c, two-sided normal p-value
        (local-cdf: robust difference over its standard error, cross term included;
        binned: McCrary's log difference over its standard error).
    statistic_conventional, p_value_conventional : local-cdf: the same test with the order-degree
        fits; binned: equal to ``statistic`` and ``p_value`` (the published test is conventional).
    cross_covariance : estimated covariance between the two sides' (robust) estimates that enters
        the statistic (0 for binned, whose published standard error has no cross term).
    bandwidth : (below, above) bandwidths (binned: the same value twice).
    n_below, n_above : observations on each side of the cutoff.
    n_used : (below, above) observations (local-cdf) or histogram bins (binned) with positive
        kernel weight in the fits at the cutoff.
    n : total number of observations.
    degree : polynomial order of the main fit (binned: 1).
    kernel : kernel name (binned: "triangular").
    level : confidence level of the intervals.
    bin_width : width of the histogram bins.
    tie_share : share of observations whose score value is shared with another observation
        (the local-cdf estimator assumes a continuous score; large values deserve a warning).
    grid : fitted densities with bands for plotting (:class:`DensityGrid`).
    histogram : histogram counts (:class:`DensityHistogram`).
    reason : empty when the statistic is defined, otherwise why it is NaN.
    """

    method: str
    cutoff: float
    density_below: float
    density_above: float
    se_below: float
    se_above: float
    density_below_robust: float
    density_above_robust: float
    se_below_robust: float
    se_above_robust: float
    ci_below: tuple[float, float]
    ci_above: tuple[float, float]
    difference: float
    log_difference: float
    statistic: float
    p_value: float
    statistic_conventional: float
    p_value_conventional: float
    cross_covariance: float
    bandwidth: tuple[float, float]
    n_below: int
    n_above: int
    n_used: tuple[int, int]
    n: int
    degree: int
    kernel: str
    level: float
    bin_width: float
    tie_share: float
    grid: DensityGrid
    histogram: DensityHistogram
    reason: str


def with_level(estimate: DensityEstimate, level: float) -> DensityEstimate:
    """The same density test reported at another confidence ``level`` (only intervals change).

    Intervals are centre +- z se with the centres and standard errors of the estimate: for
    "local-cdf" the robust estimates at the cutoff and, on the grid, the robust fit at each point
    (recovered as the midpoint of its interval); for "binned" the conventional ones.
    """
    level = check_level(level)
    z = float(stats.norm.ppf(0.5 + level / 2.0))
    if estimate.method == "local-cdf":
        centres = (estimate.density_below_robust, estimate.density_above_robust)
        ses = (estimate.se_below_robust, estimate.se_above_robust)
    else:
        centres = (estimate.density_below, estimate.density_above)
        ses = (estimate.se_below, estimate.se_above)
    g = estimate.grid
    mid = 0.5 * (g.ci_low + g.ci_high) if estimate.method == "local-cdf" else g.density
    grid = dataclasses.replace(g, ci_low=frozen(mid - z * g.std_error), ci_high=frozen(mid + z * g.std_error))
    return dataclasses.replace(
        estimate, level=level, grid=grid,
        ci_below=(centres[0] - z * ses[0], centres[0] + z * ses[0]),
        ci_above=(centres[1] - z * ses[1], centres[1] + z * ses[1]))

