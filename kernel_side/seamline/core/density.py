"""Density (manipulation) tests at the cutoff: pure numerical cores.

Two published methods, both on a float64 score array that the data layer has already cleaned:

* ``local_cdf_density_test``: the local polynomial density estimator built on the empirical
  distribution function (Cattaneo, Jansson & Ma 2020, JASA 115(531): 1449-1455; METHODS section 8.2).
  On each side the full-sample empirical CDF, evaluated at that side's observations, is fitted by a
  kernel-weighted polynomial of order p in (X - c)/h; the density is the fitted slope divided by h.
  The variance is the Hajek-projection sandwich of METHODS 8.2, computed in O(n log n) with suffix
  sums over the sorted scores; no n x n matrix is ever formed. The robust (bias-corrected) version
  is the order p+1 fit at the same bandwidth (valid by the identity of METHODS 4.5).
* ``binned_density_test``: the binned log-difference test (McCrary 2008, Journal of Econometrics
  142(2): 698-714; METHODS section 8.1): a fine histogram that never straddles the cutoff, local
  linear triangular fits of the normalised counts on each side, theta = ln f+ - ln f-.

Sides: "below" is X < c and "above" is X >= c (METHODS 0.2).
Results are frozen dataclasses of numbers and read-only arrays; nothing is printed or warned here.
"""
from __future__ import annotations

import dataclasses
import inspect
import math
from dataclasses import dataclass

import numpy as np
from scipy import stats

from ..errors import (
    InvalidBandwidthError,
    InvalidOptionError,
    OneSidedDataError,
    TooFewDistinctValuesError,
    shown,
)
from ..options import DENSITY_METHODS, KERNELS, check_level, check_option
from .cdf_windows import WindowEngine, WindowSums
from .kernels import kernel_poly, kernel_weights, normal_reference_constant

__all__ = [
    "DensityEstimate",
    "DensityGrid",
    "DensityHistogram",
    "binned_bandwidth",
    "binned_bin_width",
    "binned_density_test",
    "density_test",
    "local_cdf_bandwidth",
    "local_cdf_density_test",
    "tie_share",
    "with_level",
]

# McCrary's rule-of-thumb bandwidth constant as published (from memory; METHODS 8.1 flags it).
# The theoretical boundary local-linear triangular constant would be (R*/mu*^2)^(1/5) = 3.4375.
MCCRARY_KAPPA = 3.348
# Variance constant of the boundary local linear triangular smoother: R* = int_0^1 K*^2 = 24/5
# (derived in METHODS 8.1 / 1.4, check value A14).
MCCRARY_R_STAR = 24.0 / 5.0


# ---------------------------------------------------------------------------------------------
# Result objects
# ---------------------------------------------------------------------------------------------
def _frozen(a, dtype=float) -> np.ndarray:
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


# ---------------------------------------------------------------------------------------------
# Validation helpers (messages: "`<argument>` must be <rule>; got <value>. <How to fix>.")
# ---------------------------------------------------------------------------------------------
def _score_array(score) -> np.ndarray:
    x = np.asarray(score, dtype=float)
    if x.ndim != 1:
        raise InvalidOptionError(
            f"`score` must be a one-dimensional array; got shape {x.shape}. Pass a single column.")
    if not np.all(np.isfinite(x)):
        raise InvalidOptionError(
            "`score` must hold only finite values; got NaN or infinity. "
            "Drop or fill the missing rows before the density test.")
    return x


def _check_positive(argument: str, value, error=InvalidOptionError) -> float:
    ok = (isinstance(value, (int, float, np.floating, np.integer)) and not isinstance(value, bool)
          and math.isfinite(float(value)) and float(value) > 0)
    if not ok:
        raise error(f"`{argument}` must be a positive finite number; got {shown(value)}. "
                    f"Pass a value greater than 0 or leave `{argument}` unset to choose it from the data.")
    return float(value)


def _bandwidth_pair(bandwidth) -> tuple[float, float] | None:
    if bandwidth is None:
        return None
    if isinstance(bandwidth, (tuple, list, np.ndarray)):
        if len(bandwidth) != 2:
            raise InvalidBandwidthError(
                f"`bandwidth` must be one positive number or a pair (below, above); got {shown(bandwidth)}. "
                "Pass a single number or two numbers.")
        return (_check_positive("bandwidth", bandwidth[0], InvalidBandwidthError),
                _check_positive("bandwidth", bandwidth[1], InvalidBandwidthError))
    h = _check_positive("bandwidth", bandwidth, InvalidBandwidthError)
    return h, h


def _check_grid_points(grid_points) -> int:
    if not (isinstance(grid_points, (int, np.integer)) and not isinstance(grid_points, bool)
            and grid_points >= 0):
        raise InvalidOptionError(
            f"`grid_points` must be a whole number >= 0; got {shown(grid_points)}. "
            "Use 0 to skip the plotting grid or e.g. 20 points per side.")
    return int(grid_points)


def _check_plot_range(plot_range, cutoff: float) -> tuple[float, float] | None:
    if plot_range is None:
        return None
    try:
        low, high = (float(v) for v in plot_range)
    except (TypeError, ValueError):
        raise InvalidOptionError(
            f"`plot_range` must be a pair (low, high) of numbers; got {shown(plot_range)}. "
            "Pass two numbers around the cutoff.") from None
    if not (math.isfinite(low) and math.isfinite(high) and low < cutoff < high):
        raise InvalidOptionError(
            f"`plot_range` must satisfy low < cutoff < high; got {shown(plot_range)} with cutoff {cutoff:g}. "
            "Pass a range that contains the cutoff.")
    return low, high


def _split(xs: np.ndarray, cutoff: float) -> int:
    """Number of sorted scores below the cutoff; raise if a side is empty."""
    n_below = int(np.searchsorted(xs, cutoff, side="left"))
    if n_below == 0 or n_below == xs.size:
        empty = "below" if n_below == 0 else "above"
        raise OneSidedDataError(
            f"`score` must have observations on both sides of the cutoff; got none {empty} {cutoff:g}. "
            "Check the cutoff value or the sample filter.")
    return n_below


def _n_distinct(sorted_values: np.ndarray) -> int:
    if sorted_values.size == 0:
        return 0
    return 1 + int(np.count_nonzero(np.diff(sorted_values)))


def tie_share(score) -> float:
    """Share of observations whose score value also occurs in another observation.

    0 for a continuous score; 1 when every value is repeated (a fully discrete score).
    """
    xs = np.asarray(score, dtype=float)
    xs = xs if _is_sorted(xs) else np.sort(xs)
    if xs.size < 2:
        return 0.0
    eq = xs[1:] == xs[:-1]
    tied = np.zeros(xs.size, dtype=bool)
    tied[1:] |= eq
    tied[:-1] |= eq
    return float(np.mean(tied))


def _z(level: float) -> float:
    return float(stats.norm.ppf(0.5 + level / 2.0))


def _two_sided(t: float) -> float:
    return float(2.0 * stats.norm.sf(abs(t))) if math.isfinite(t) else math.nan


# ---------------------------------------------------------------------------------------------
# Local-CDF estimator (Cattaneo, Jansson & Ma 2020)
# ---------------------------------------------------------------------------------------------
class _Sample:
    """Sorted scores with the empirical CDF at each of them, prepared once.

    ``x`` may already be sorted (the design passes its sorted score): then it is not sorted again.
    Window sums for the fits come from ``windows`` (seamline.core.cdf_windows), so a fit or a
    variance costs O(n / block + block) rather than a pass over its window.
    """

    def __init__(self, x: np.ndarray, cutoff: float):
        self.xs = x if _is_sorted(x) else np.sort(x)
        self.n = self.xs.size
        # N(<= X_(i)) counts ties, i.e. the right-continuous empirical CDF times n: the end of the
        # run of equal values holding i (the same integers as searchsorted(xs, xs, "right")).
        new_value = np.empty(self.n, dtype=bool)
        new_value[:1] = True
        np.not_equal(self.xs[1:], self.xs[:-1], out=new_value[1:])
        self.group = np.cumsum(new_value) - 1          # index of each score's distinct value
        ends = np.append(np.flatnonzero(new_value[1:]) + 1, self.n)
        self.le = ends[self.group]
        self.cutoff = cutoff
        self.n_below = _split(self.xs, cutoff)
        self.windows = WindowEngine(self.xs, self.le)

    def side_range(self, side: str) -> tuple[int, int]:
        return (0, self.n_below) if side == "below" else (self.n_below, self.n)

    def distinct(self, a: int, b: int) -> int:
        """Number of distinct scores among sorted rows [a, b)."""
        return int(self.group[b - 1] - self.group[a] + 1) if b > a else 0


def _is_sorted(x: np.ndarray) -> bool:
    return x.size < 2 or bool(np.all(x[1:] >= x[:-1]))


@dataclass
class _CdfFit:
    """Kernel-weighted polynomial fit of the empirical CDF over sorted rows [a, b) (all weighted)."""

    a: int
    b: int
    sums: WindowSums
    s_inv: np.ndarray    # inverse of S = (1/n) sum_j w_j r r'
    beta: np.ndarray     # coefficients in u = (X - x0)/h
    theta: np.ndarray    # (1/n) sum_j w_j r(u_j) u_j^(p+1)
    h: float
    degree: int

    @property
    def density(self) -> float:
        return float(self.beta[1] / self.h)

    @property
    def n_used(self) -> int:
        return self.b - self.a


def _window(sample: _Sample, side: str, x0: float, h: float, kernel: str) -> tuple[int, int]:
    """Sorted rows of ``side`` with positive kernel weight at (x0, h): a contiguous run [a, b).

    |u| falls then rises along the sorted scores, so only the runs of equal scores at the two ends
    can have zero weight (|u| = 1 up to rounding); they are skipped one run at a time.
    """
    xs = sample.xs
    lo, hi = sample.side_range(side)
    a = max(lo, int(np.searchsorted(xs, x0 - h, side="left")))
    b = min(hi, int(np.searchsorted(xs, x0 + h, side="right")))

    def weighted(i: int) -> bool:
        return bool(kernel_weights(kernel, np.abs((xs[i:i + 1] - x0) / h))[0] / h > 0)

    while a < b and not weighted(a):
        a = int(np.searchsorted(xs, xs[a], side="right"))
    while a < b and not weighted(b - 1):
        b = int(np.searchsorted(xs, xs[b - 1], side="left"))
    return a, max(a, b)


def _cdf_fit(sample: _Sample, side: str, x0: float, h: float, degree: int,
             kernel: str) -> _CdfFit | None:
    """Fit F(X) on r_p((X - x0)/h) over one side's scores within h of x0; None if too few values."""
    a, b = _window(sample, side, x0, h, kernel)
    if sample.distinct(a, b) < degree + 1:
        return None
    n = sample.n
    kink = int(np.searchsorted(sample.xs, x0, side="left"))
    sums = sample.windows.fit_sums(a, b, kink, x0, h, degree, kernel)
    s_inv = np.linalg.inv(sums.gram / n)
    # with_counts = sum_j w_j r_j N_j, and F(X_j) = N_j / n
    beta = s_inv @ (sums.with_counts / n / n)
    return _CdfFit(a=a, b=b, sums=sums, s_inv=s_inv, beta=beta, theta=sums.bias / n, h=h, degree=degree)


def _beta_cov(sample: _Sample, fit_a: _CdfFit, fit_b: _CdfFit | None = None) -> np.ndarray:
    """Covariance of the coefficient vectors: S_a^-1 [(1/n) sum_i psi_a psi_b'] S_b^-1 / n.

    psi_i = (1/n) (A(X_i) - NW/n) with A and NW as in seamline.core.cdf_windows, so
    sum_i psi_a psi_b' = (sum_i A_a A_b' - NW_a NW_b' / n) / n^2. For one window the first sum comes
    from the window engine; for two windows with every row of a before every row of b (the two
    sides of the cutoff) it is NW_a (sum_j w_j r_j over b)', since min(X_j, X_l) = X_j then.
    """
    n = sample.n
    sa = sample.windows.add_variance(fit_a.sums, fit_a.degree)
    if fit_b is None:
        sb, outer = sa, sa.pairs
    else:
        if fit_a.b > fit_b.a:
            raise ValueError("the first window must lie below the second")
        sb = sample.windows.add_variance(fit_b.sums, fit_b.degree)
        outer = np.outer(sa.with_counts, sb.total)
    omega = (outer - np.outer(sa.with_counts, sb.with_counts) / n) / n ** 3
    s_b = fit_a.s_inv if fit_b is None else fit_b.s_inv
    return fit_a.s_inv @ omega @ s_b.T / n


def _density_var(sample: _Sample, fit: _CdfFit) -> float:
    return float(_beta_cov(sample, fit)[1, 1] / fit.h ** 2)


def _robust_scale(x: np.ndarray) -> float:
    """min(sd, IQR/1.349): Silverman's robust scale (common practice)."""
    sd = float(np.std(x, ddof=1)) if x.size > 1 else 0.0
    q75, q25 = np.percentile(x, [75, 25])   # callers pass the sorted scores: a cheap selection
    iqr = float(q75 - q25) / 1.349
    positive = [s for s in (sd, iqr) if s > 0]
    return min(positive) if positive else 0.0


def _min_bandwidth(sample: _Sample, side: str, needed: int) -> float:
    """Smallest h whose window on `side` holds `needed` observations (or all of that side)."""
    lo, hi = sample.side_range(side)
    k = min(needed, hi - lo)
    # sorted scores: the k-th nearest to the cutoff is k places away from the cutoff's position
    kth = sample.xs[hi - k] if side == "below" else sample.xs[lo + k - 1]
    # the triangular and Epanechnikov kernels give zero weight at |u| = 1, so step just past it
    return abs(float(kth) - sample.cutoff) * (1.0 + 1e-9) + 1e-12


def _max_bandwidth(sample: _Sample, side: str) -> float:
    lo, hi = sample.side_range(side)
    far = sample.xs[lo] if side == "below" else sample.xs[hi - 1]
    return abs(float(far) - sample.cutoff) * (1.0 + 1e-9) + 1e-12


def _side_bandwidth(sample: _Sample, side: str, degree: int, kernel: str, scale: float) -> float:
    """Side-specific MSE-optimal bandwidth for the density at the cutoff (METHODS 8.2).

    h = [V / (2p (B^2 + R))]^(1/(2p+1)) n^(-1/(2p+1)), where
      V = n h0 Var(f_hat(h0)), the variance formula of METHODS 8.2 at a pilot h0;
      B = e_1' S^-1 theta f^(p)(c) / (p+1)!, with S and theta the sample kernel moments at h0
          (scale free, so the sign on the side below takes care of itself);
      R = (e_1' S^-1 theta / (p+1)!)^2 Var(f^(p)(c) estimate), the regulariser of METHODS 4.6
          (IK/CCT style) that keeps h finite when the estimated f^(p)(c) is near zero.
    (convention) Variance pilot h0 = C_NR(K) s n^(-1/5) (Silverman's normal reference, METHODS 1.3)
    with s = min(sd, IQR/1.349). Derivative pilot: f^(p)(c) = F^(p+1)(c) from an order p+2 fit to
    the empirical CDF on the side at b0 = min(side range, 3 C_NR(K) s n^(-1/(2p+5))), the rate of an
    MSE-optimal bandwidth for that derivative with an order p+2 fit; its variance (for R) comes
    from the same Hajek-projection formula. Both pilots are widened when needed so the window
    holds max(20, 5(p+3)) observations. The result is clipped to [that minimum, the side's largest
    distance to the cutoff].
    """
    n = sample.n
    p = degree
    h_min = _min_bandwidth(sample, side, max(20, 5 * (p + 3)))
    h_max = max(_max_bandwidth(sample, side), h_min)
    c_nr = normal_reference_constant(kernel)
    pilot = float(np.clip(c_nr * scale * n ** (-0.2), h_min, h_max))
    fit = _cdf_fit(sample, side, sample.cutoff, pilot, p, kernel)
    b0 = float(np.clip(3.0 * c_nr * scale * n ** (-1.0 / (2 * p + 5)), h_min, h_max))
    dfit = _cdf_fit(sample, side, sample.cutoff, b0, p + 2, kernel)
    if fit is None or dfit is None:  # too few distinct values near the cutoff: use the whole side
        return h_max
    v_const = n * pilot * _density_var(sample, fit)
    to_deriv = math.factorial(p + 1) / b0 ** (p + 1)
    deriv = to_deriv * float(dfit.beta[p + 1])
    deriv_var = to_deriv ** 2 * float(_beta_cov(sample, dfit)[p + 1, p + 1])
    lead = float((fit.s_inv @ fit.theta)[1]) / math.factorial(p + 1)
    denom = lead ** 2 * (deriv ** 2 + max(deriv_var, 0.0))
    if not (denom > 0.0 and math.isfinite(denom) and v_const > 0):
        return h_max
    h = (v_const / (2 * p * denom * n)) ** (1.0 / (2 * p + 1))
    return float(np.clip(h, h_min, h_max))


def local_cdf_bandwidth(score, cutoff: float, *, degree: int = 2,
                        kernel: str = "triangular") -> tuple[float, float]:
    """Side-specific MSE-optimal bandwidths for the local-CDF density estimator at the cutoff.

    Parameters
    ----------
    score : 1-D float array of the running variable (finite).
    cutoff : the cutoff c.
    degree : order p of the polynomial fitted to the empirical CDF (>= 1).
    kernel : "triangular", "uniform" or "epanechnikov".

    Returns
    -------
    (h_below, h_above)

    Notes
    -----
    Plug-in rule of METHODS 8.2: the density from an order-p CDF fit has bias proportional to
    h^p f^(p)(c) and variance proportional to 1/(n h), so h ~ n^(-1/(2p+1)). Pilot choices are
    seamline conventions (see ``_side_bandwidth``).
    """
    x = _score_array(score)
    kernel = check_option("kernel", kernel, KERNELS)
    degree = _check_degree(degree)
    sample = _Sample(x, float(cutoff))
    _check_side_values(sample, degree)
    scale = _robust_scale(x)
    return (_side_bandwidth(sample, "below", degree, kernel, scale),
            _side_bandwidth(sample, "above", degree, kernel, scale))


def _check_degree(degree) -> int:
    ok = isinstance(degree, (int, np.integer)) and not isinstance(degree, bool)
    if not (ok and 1 <= degree <= 6):
        raise InvalidOptionError(
            f"`degree` must be a whole number from 1 to 6; got {shown(degree)}. "
            "Use 2 (the usual choice for the local-CDF density estimator).")
    return int(degree)


def _check_side_values(sample: _Sample, degree: int) -> None:
    """The robust fit has order p+1, so each side needs p+2 distinct scores."""
    need = degree + 2
    for side in ("below", "above"):
        lo, hi = sample.side_range(side)
        got = sample.distinct(lo, hi)
        if got < need:
            raise TooFewDistinctValuesError(
                f"`score` must take at least {need} distinct values {side} the cutoff for degree "
                f"{degree} (its robust fit has degree {degree + 1}); got {got}. "
                "Use a lower `degree` or the binned method.")


def _grid_points(low: float, high: float, cutoff: float,
                 count: int) -> tuple[np.ndarray, np.ndarray]:
    """count points from low to the cutoff (below) and from the cutoff to high (above)."""
    if count == 0:
        return np.empty(0), np.empty(0)
    if count == 1:
        return np.array([cutoff]), np.array([cutoff])
    return np.linspace(low, cutoff, count), np.linspace(cutoff, high, count)


def _histogram(xs: np.ndarray, cutoff: float, width: float, low: float, high: float,
               n_total: int) -> DensityHistogram:
    """Whole bins [c + k w, c + (k+1) w) covering [low, high]; the cutoff is always an edge.

    Every score inside the outer edges is counted, so the end bins are not cut short.
    """
    k_lo = int(math.floor((low - cutoff) / width))
    k_hi = int(math.ceil((high - cutoff) / width))
    k_lo, k_hi = min(k_lo, -1), max(k_hi, 1)
    ks = np.arange(k_lo, k_hi)
    left = cutoff + ks * width
    right = cutoff + (ks + 1) * width
    left[ks == 0] = cutoff
    right[ks == -1] = cutoff
    # assign by index so rounding in c + k w can never put a point on the wrong side of c
    sel = xs[(xs >= left[0]) & (xs <= right[-1])]
    k = np.floor((sel - cutoff) / width).astype(np.int64)
    k = np.where(sel < cutoff, np.minimum(k, -1), np.maximum(k, 0))
    k = np.minimum(k, k_hi - 1)                  # the top edge is closed
    count = np.bincount(k - k_lo, minlength=ks.size)[: ks.size]
    side = np.where(ks < 0, "below", "above")
    return DensityHistogram(side=_frozen(side, dtype=str), left=_frozen(left), right=_frozen(right),
                            count=_frozen(count, dtype=np.int64),
                            height=_frozen(count / (n_total * width)), bin_width=float(width))


def local_cdf_density_test(score, cutoff: float, *, degree: int = 2, kernel: str = "triangular",
                           bandwidth: float | tuple[float, float] | None = None,
                           level: float = 0.95, grid_points: int = 20,
                           plot_range: tuple[float, float] | None = None,
                           bin_width: float | None = None) -> DensityEstimate:
    """Local polynomial density test built on the empirical CDF (Cattaneo, Jansson & Ma 2020).

    Parameters
    ----------
    score : 1-D float array of the running variable (finite; the data layer cleans it).
    cutoff : the cutoff c. Observations with score >= c are "above", the rest "below".
    degree : order p of the polynomial fitted to the empirical CDF (default 2); the density is the
        fitted slope, and the robust fit has order p+1.
    kernel : "triangular" (default), "uniform" or "epanechnikov".
    bandwidth : one number for both sides, a pair (below, above), or None for the side-specific
        MSE-optimal plug-in (:func:`local_cdf_bandwidth`).
    level : confidence level of the intervals (default 0.95).
    grid_points : number of plotting points per side (0 skips the grid).
    plot_range : (low, high) span of the grid and histogram; default [c - h_below, c + h_above]
        clipped to the data.
    bin_width : histogram bin width; default the Freedman-Diaconis width 2 IQR n^(-1/3)
        (common practice).

    Returns
    -------
    DensityEstimate

    Raises
    ------
    OneSidedDataError, TooFewDistinctValuesError, InvalidBandwidthError, InvalidOptionError

    Notes
    -----
    Per side s: beta_s minimises sum_{i in s} K((X_i - c)/h_s) (F(X_i) - r_p((X_i - c)/h_s)' beta)^2
    with F the full-sample empirical CDF; f_s = beta_s1 / h_s. The variance is the Hajek-projection
    sandwich S^-1 Omega S^-1 / n of METHODS 8.2; the statistic uses the robust (order p+1) fits and
    includes the cross covariance of the two sides (both depend on the same empirical CDF), computed
    from the same psi terms at no extra cost.

    References
    ----------
    Cattaneo, M. D., Jansson, M. and Ma, X. (2020). Simple local polynomial density estimators.
    Journal of the American Statistical Association 115(531), 1449-1455.
    """
    x = _score_array(score)
    cutoff = float(cutoff)
    kernel = check_option("kernel", kernel, KERNELS)
    degree = _check_degree(degree)
    level = check_level(level)
    grid_points = _check_grid_points(grid_points)
    plot_range = _check_plot_range(plot_range, cutoff)
    pair = _bandwidth_pair(bandwidth)
    if bin_width is not None:
        bin_width = _check_positive("bin_width", bin_width)
    sample = _Sample(x, cutoff)
    _check_side_values(sample, degree)
    # highest fit: the bandwidth's derivative pilot (degree + 2), else the robust fit (degree + 1)
    sample.windows.reserve(degree + (2 if pair is None else 1) + len(kernel_poly(kernel)) - 1)
    if pair is None:
        scale = _robust_scale(sample.xs)
        pair = (_side_bandwidth(sample, "below", degree, kernel, scale),
                _side_bandwidth(sample, "above", degree, kernel, scale))
    n = sample.n
    z = _z(level)

    fits, robust = {}, {}
    for side, h in zip(("below", "above"), pair):
        fits[side] = _cdf_fit(sample, side, cutoff, h, degree, kernel)
        robust[side] = _cdf_fit(sample, side, cutoff, h, degree + 1, kernel)
        if fits[side] is None or robust[side] is None:
            lo, hi = sample.side_range(side)
            xs_side = sample.xs[lo:hi]
            got = _n_distinct(xs_side[np.abs(xs_side - cutoff) < h])
            raise InvalidBandwidthError(
                f"`bandwidth` must leave at least {degree + 2} distinct scores {side} the cutoff "
                f"with positive kernel weight; got {got} within {h:g}. "
                "Pass a wider bandwidth or a lower `degree`.")

    def side_numbers(fd):
        est = {s: fd[s].density for s in fd}
        var = {s: _density_var(sample, fd[s]) for s in fd}
        cov = float(_beta_cov(sample, fd["below"], fd["above"])[1, 1] / (pair[0] * pair[1]))
        diff = est["above"] - est["below"]
        var_diff = var["above"] + var["below"] - 2.0 * cov
        t = diff / math.sqrt(var_diff) if var_diff > 0 else math.nan
        return est, var, cov, t

    est, var, _, t_conv = side_numbers(fits)
    est_r, var_r, cov_r, t_rob = side_numbers(robust)
    se = {s: math.sqrt(max(var[s], 0.0)) for s in var}
    se_r = {s: math.sqrt(max(var_r[s], 0.0)) for s in var_r}

    low, high = plot_range if plot_range is not None else (
        max(sample.xs[0], cutoff - pair[0]), min(sample.xs[-1], cutoff + pair[1]))
    gx_below, gx_above = _grid_points(low, high, cutoff, grid_points)
    rows = []
    for side, points, h in (("below", gx_below, pair[0]), ("above", gx_above, pair[1])):
        for x0 in points:
            fp = _cdf_fit(sample, side, float(x0), h, degree, kernel)
            fq = _cdf_fit(sample, side, float(x0), h, degree + 1, kernel)
            if fp is None or fq is None:
                rows.append((x0, side, math.nan, math.nan, math.nan, math.nan))
                continue
            sq = math.sqrt(max(_density_var(sample, fq), 0.0))
            rows.append((x0, side, fp.density, sq, fq.density - z * sq, fq.density + z * sq))
    grid = _grid_from_rows(rows)

    if bin_width is None:
        q75, q25 = np.percentile(sample.xs, [75, 25])
        iqr = float(q75 - q25)
        bin_width = 2.0 * iqr * n ** (-1.0 / 3.0) if iqr > 0 else (high - low) / 20.0
    hist = _histogram(sample.xs, cutoff, bin_width, low, high, n)

    reason = "" if math.isfinite(t_rob) else "the variance of the difference is not positive"
    positive = est["below"] > 0 and est["above"] > 0
    return DensityEstimate(
        method="local-cdf", cutoff=cutoff,
        density_below=est["below"], density_above=est["above"],
        se_below=se["below"], se_above=se["above"],
        density_below_robust=est_r["below"], density_above_robust=est_r["above"],
        se_below_robust=se_r["below"], se_above_robust=se_r["above"],
        ci_below=(est_r["below"] - z * se_r["below"], est_r["below"] + z * se_r["below"]),
        ci_above=(est_r["above"] - z * se_r["above"], est_r["above"] + z * se_r["above"]),
        difference=est["above"] - est["below"],
        log_difference=math.log(est["above"] / est["below"]) if positive else math.nan,
        statistic=t_rob, p_value=_two_sided(t_rob),
        statistic_conventional=t_conv, p_value_conventional=_two_sided(t_conv),
        cross_covariance=cov_r, bandwidth=(float(pair[0]), float(pair[1])),
        n_below=sample.n_below, n_above=n - sample.n_below,
        n_used=(fits["below"].n_used, fits["above"].n_used), n=n,
        degree=degree, kernel=kernel, level=level, bin_width=float(bin_width),
        tie_share=tie_share(sample.xs), grid=grid, histogram=hist, reason=reason)


def _grid_from_rows(rows) -> DensityGrid:
    if rows:
        gx, gs, gd, ge, gl, gh = zip(*rows)
    else:
        gx = gs = gd = ge = gl = gh = ()
    return DensityGrid(x=_frozen(gx), side=_frozen(gs, dtype="<U5"), density=_frozen(gd),
                       std_error=_frozen(ge), ci_low=_frozen(gl), ci_high=_frozen(gh))


# ---------------------------------------------------------------------------------------------
# Binned log-difference test (McCrary 2008)
# ---------------------------------------------------------------------------------------------
def binned_bin_width(score) -> float:
    """McCrary's default bin size b = 2 sd(X) n^(-1/2) (METHODS 8.1; from memory)."""
    x = _score_array(score)
    return float(2.0 * np.std(x, ddof=1) / math.sqrt(x.size))


class _Binned:
    """The histogram of McCrary's first step: midpoints, normalised heights, side of each bin."""

    def __init__(self, x: np.ndarray, cutoff: float, width: float):
        n = x.size
        k = np.floor((x - cutoff) / width).astype(np.int64)
        # guard against rounding: a bin index must agree with the side of the observation
        k = np.where(x < cutoff, np.minimum(k, -1), np.maximum(k, 0))
        self.k_lo, k_hi = int(k.min()), int(k.max())
        self.k_lo = min(self.k_lo, -1)
        k_hi = max(k_hi, 0)
        self.ks = np.arange(self.k_lo, k_hi + 1)
        self.count = np.bincount(k - self.k_lo, minlength=self.ks.size).astype(float)
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
    x = _score_array(score)
    cutoff = float(cutoff)
    _split(np.sort(x), cutoff)
    width = binned_bin_width(x) if bin_width is None else _check_positive("bin_width", bin_width)
    binned = _Binned(x, cutoff, width)
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
    x = _score_array(score)
    cutoff = float(cutoff)
    level = check_level(level)
    grid_points = _check_grid_points(grid_points)
    plot_range = _check_plot_range(plot_range, cutoff)
    xs = np.sort(x)
    n_below = _split(xs, cutoff)
    n = x.size
    width = binned_bin_width(x) if bin_width is None else _check_positive("bin_width", bin_width)
    if bandwidth is not None:
        h = _check_positive("bandwidth", bandwidth, InvalidBandwidthError)
    binned = _Binned(x, cutoff, width)
    if bandwidth is None:
        h = _binned_bandwidth(binned)
    z = _z(level)

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
        max(xs[0], cutoff - h), min(xs[-1], cutoff + h))
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
    grid = _grid_from_rows(rows)

    side_words = np.where(binned.below, "below", "above")
    left = cutoff + binned.ks * width
    right = cutoff + (binned.ks + 1) * width
    left[binned.ks == 0] = cutoff
    right[binned.ks == -1] = cutoff
    hist = DensityHistogram(side=_frozen(side_words, dtype="<U5"), left=_frozen(left),
                            right=_frozen(right), count=_frozen(binned.count, dtype=np.int64),
                            height=_frozen(binned.height), bin_width=float(width))
    return DensityEstimate(
        method="binned", cutoff=cutoff,
        density_below=est["below"], density_above=est["above"],
        se_below=se["below"], se_above=se["above"],
        density_below_robust=math.nan, density_above_robust=math.nan,
        se_below_robust=math.nan, se_above_robust=math.nan,
        ci_below=(est["below"] - z * se["below"], est["below"] + z * se["below"]),
        ci_above=(est["above"] - z * se["above"], est["above"] + z * se["above"]),
        difference=est["above"] - est["below"], log_difference=theta,
        statistic=t, p_value=_two_sided(t), statistic_conventional=t,
        p_value_conventional=_two_sided(t), cross_covariance=0.0,
        bandwidth=(float(h), float(h)), n_below=n_below, n_above=n - n_below,
        n_used=(used["below"], used["above"]), n=n, degree=1, kernel="triangular", level=level,
        bin_width=float(width), tie_share=tie_share(x), grid=grid, histogram=hist, reason=reason)


def with_level(estimate: DensityEstimate, level: float) -> DensityEstimate:
    """The same density test reported at another confidence ``level`` (only intervals change).

    Intervals are centre +- z se with the centres and standard errors of the estimate: for
    "local-cdf" the robust estimates at the cutoff and, on the grid, the robust fit at each point
    (recovered as the midpoint of its interval); for "binned" the conventional ones.
    """
    level = check_level(level)
    z = _z(level)
    if estimate.method == "local-cdf":
        centres = (estimate.density_below_robust, estimate.density_above_robust)
        ses = (estimate.se_below_robust, estimate.se_above_robust)
    else:
        centres = (estimate.density_below, estimate.density_above)
        ses = (estimate.se_below, estimate.se_above)
    g = estimate.grid
    mid = 0.5 * (g.ci_low + g.ci_high) if estimate.method == "local-cdf" else g.density
    grid = dataclasses.replace(g, ci_low=_frozen(mid - z * g.std_error), ci_high=_frozen(mid + z * g.std_error))
    return dataclasses.replace(
        estimate, level=level, grid=grid,
        ci_below=(centres[0] - z * ses[0], centres[0] + z * ses[0]),
        ci_above=(centres[1] - z * ses[1], centres[1] + z * ses[1]))


def density_test(score, cutoff: float, *, method: str = "local-cdf", **options) -> DensityEstimate:
    """Density test at the cutoff by ``method`` ("local-cdf" or "binned"); options pass through.

    See :func:`local_cdf_density_test` and :func:`binned_density_test` for the options of each.
    """
    method = check_option("method", method, DENSITY_METHODS)
    func = local_cdf_density_test if method == "local-cdf" else binned_density_test
    allowed = [name for name, par in inspect.signature(func).parameters.items()
               if par.kind is inspect.Parameter.KEYWORD_ONLY]
    unknown = sorted(set(options) - set(allowed))
    if unknown:
        raise InvalidOptionError(
            f"`{unknown[0]}` must be an option of the {shown(method)} density method; got {unknown}. "
            f"Use only {', '.join(allowed)}.")
    return func(score, cutoff, **options)
