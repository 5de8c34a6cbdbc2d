"""The local-CDF density test (Cattaneo, Jansson & Ma 2020): pure numerical core.

The local polynomial density estimator built on the empirical distribution function (JASA
115(531): 1449-1455; METHODS section 8.2). On each side the full-sample empirical CDF, evaluated
at that side's observations, is fitted by a kernel-weighted polynomial of order p in (X - c)/h;
the density is the fitted slope divided by h. The variance is the Hajek-projection sandwich of
METHODS 8.2, computed in O(n log n) with suffix sums over the sorted scores; no n x n matrix is
ever formed. The robust (bias-corrected) version is the order p+1 fit at the same bandwidth (valid
by the identity of METHODS 4.5).

Every window sum comes from the window engine of the fit's side (``seamline.core.cdf_windows``)
over the side's sorted scores as given (``density_sample.SortedScores``): a fit or a variance
costs O(n / block + block) and nothing of length n is made, so the test's working memory is the
engines' block tables (under one byte per row) and chunks of a few hundred kB.
Sides: "below" is X < c and "above" is X >= c (METHODS 0.2).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import InvalidBandwidthError, InvalidOptionError, TooFewDistinctValuesError, shown
from ..options import KERNELS, check_level, check_option
from .cdf_windows import WindowSums
from .density_results import DensityEstimate
from .density_sample import (
    SortedScores,
    bandwidth_pair,
    check_grid_points,
    check_plot_range,
    check_positive,
    grid_from_rows,
    grid_points as _grid_points,
    histogram,
    n_distinct,
    score_array,
    sorted_scores,
    two_sided,
    z_value,
)
from .kernels import kernel_poly, kernel_weights, normal_reference_constant


def _Sample(x, cutoff: float) -> SortedScores:
    """The prepared sample of a score array in any order (the name the tests use)."""
    return sorted_scores(x, cutoff)


@dataclass
class _CdfFit:
    """Kernel-weighted polynomial fit of the empirical CDF over the side's sorted rows [a, b)
    (all weighted; rows of the whole sample: offset + a to offset + b)."""

    side: str
    offset: int
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


def _window(sample: SortedScores, side: str, x0: float, h: float, kernel: str) -> tuple[int, int]:
    """Sorted rows of ``side`` with positive kernel weight at (x0, h): a contiguous run [a, b).

    |u| falls then rises along the sorted scores, so only the runs of equal scores at the two ends
    can have zero weight (|u| = 1 up to rounding); they are skipped one run at a time.
    """
    xs = sample.part(side)
    a = int(np.searchsorted(xs, x0 - h, side="left"))
    b = int(np.searchsorted(xs, x0 + h, side="right"))

    def weighted(i: int) -> bool:
        return bool(kernel_weights(kernel, np.abs((xs[i:i + 1] - x0) / h))[0] / h > 0)

    while a < b and not weighted(a):
        a = int(np.searchsorted(xs, xs[a], side="right"))
    while a < b and not weighted(b - 1):
        b = int(np.searchsorted(xs, xs[b - 1], side="left"))
    return a, max(a, b)


def _cdf_fit(sample: SortedScores, side: str, x0: float, h: float, degree: int,
             kernel: str) -> _CdfFit | None:
    """Fit F(X) on r_p((X - x0)/h) over one side's scores within h of x0; None if too few values."""
    a, b = _window(sample, side, x0, h, kernel)
    if sample.distinct(side, a, b, degree + 1) < degree + 1:
        return None
    n = sample.n
    kink = int(np.searchsorted(sample.part(side), x0, side="left"))
    sums = sample.engine(side).fit_sums(a, b, kink, x0, h, degree, kernel)
    s_inv = np.linalg.inv(sums.gram / n)
    # with_counts = sum_j w_j r_j N_j, and F(X_j) = N_j / n
    beta = s_inv @ (sums.with_counts / n / n)
    return _CdfFit(side=side, offset=sample.offset(side), a=a, b=b, sums=sums, s_inv=s_inv, beta=beta, theta=sums.bias / n, h=h, degree=degree)


def _beta_cov(sample: SortedScores, fit_a: _CdfFit, fit_b: _CdfFit | None = None) -> np.ndarray:
    """Covariance of the coefficient vectors: S_a^-1 [(1/n) sum_i psi_a psi_b'] S_b^-1 / n.

    psi_i = (1/n) (A(X_i) - NW/n) with A and NW as in seamline.core.cdf_windows, so
    sum_i psi_a psi_b' = (sum_i A_a A_b' - NW_a NW_b' / n) / n^2. For one window the first sum comes
    from the window engine; for two windows with every row of a before every row of b (the two
    sides of the cutoff) it is NW_a (sum_j w_j r_j over b)', since min(X_j, X_l) = X_j then.
    """
    n = sample.n
    sa = sample.engine(fit_a.side).add_variance(fit_a.sums, fit_a.degree)
    if fit_b is None:
        sb, outer = sa, sa.pairs
    else:
        if fit_a.offset + fit_a.b > fit_b.offset + fit_b.a:
            raise ValueError("the first window must lie below the second")
        sb = sample.engine(fit_b.side).add_variance(fit_b.sums, fit_b.degree)
        outer = np.outer(sa.with_counts, sb.total)
    omega = (outer - np.outer(sa.with_counts, sb.with_counts) / n) / n ** 3
    s_b = fit_a.s_inv if fit_b is None else fit_b.s_inv
    return fit_a.s_inv @ omega @ s_b.T / n


def _density_var(sample: SortedScores, fit: _CdfFit) -> float:
    return float(_beta_cov(sample, fit)[1, 1] / fit.h ** 2)


def _robust_scale(sample: SortedScores) -> float:
    """min(sd, IQR/1.349): Silverman's robust scale (common practice), of the whole sample."""
    sd = sample.std()
    q75, q25 = sample.percentile([75, 25])
    iqr = float(q75 - q25) / 1.349
    positive = [s for s in (sd, iqr) if s > 0]
    return min(positive) if positive else 0.0


def _min_bandwidth(sample: SortedScores, side: str, needed: int) -> float:
    """Smallest h whose window on `side` holds `needed` observations (or all of that side)."""
    xs = sample.part(side)
    k = min(needed, xs.size)
    # sorted scores: the k-th nearest to the cutoff is k places away from the cutoff's position
    kth = xs[xs.size - k] if side == "below" else xs[k - 1]
    # the triangular and Epanechnikov kernels give zero weight at |u| = 1, so step just past it
    return abs(float(kth) - sample.cutoff) * (1.0 + 1e-9) + 1e-12


def _max_bandwidth(sample: SortedScores, side: str) -> float:
    xs = sample.part(side)
    far = xs[0] if side == "below" else xs[-1]
    return abs(float(far) - sample.cutoff) * (1.0 + 1e-9) + 1e-12


def _side_bandwidth(sample: SortedScores, side: str, degree: int, kernel: str, scale: float) -> float:
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
    kernel = check_option("kernel", kernel, KERNELS)
    degree = _check_degree(degree)
    sample = sorted_scores(score, float(cutoff))
    _check_side_values(sample, degree)
    scale = _robust_scale(sample)
    return (_side_bandwidth(sample, "below", degree, kernel, scale),
            _side_bandwidth(sample, "above", degree, kernel, scale))


def _check_degree(degree) -> int:
    ok = isinstance(degree, (int, np.integer)) and not isinstance(degree, bool)
    if not (ok and 1 <= degree <= 6):
        raise InvalidOptionError(
            f"`degree` must be a whole number from 1 to 6; got {shown(degree)}. "
            "Use 2 (the usual choice for the local-CDF density estimator).")
    return int(degree)


def _check_side_values(sample: SortedScores, degree: int) -> None:
    """The robust fit has order p+1, so each side needs p+2 distinct scores."""
    need = degree + 2
    for side in ("below", "above"):
        got = sample.distinct(side, 0, sample.part(side).size, need)
        if got < need:
            raise TooFewDistinctValuesError(
                f"`score` must take at least {need} distinct values {side} the cutoff for degree "
                f"{degree} (its robust fit has degree {degree + 1}); got {got}. "
                "Use a lower `degree` or the binned method.")



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
    cutoff = float(cutoff)
    x = score_array(score)
    # the options first, as before: a bad option is reported before anything about the data
    check_option("kernel", kernel, KERNELS), _check_degree(degree), check_level(level)
    check_grid_points(grid_points), check_plot_range(plot_range, cutoff), bandwidth_pair(bandwidth)
    if bin_width is not None:
        check_positive("bin_width", bin_width)
    return local_cdf_test_sorted(sorted_scores(x, cutoff), degree=degree, kernel=kernel,
                                 bandwidth=bandwidth, level=level, grid_points=grid_points,
                                 plot_range=plot_range, bin_width=bin_width)


def local_cdf_test_sorted(sample: SortedScores, *, degree: int = 2, kernel: str = "triangular",
                          bandwidth: float | tuple[float, float] | None = None,
                          level: float = 0.95, grid_points: int = 20,
                          plot_range: tuple[float, float] | None = None,
                          bin_width: float | None = None) -> DensityEstimate:
    """:func:`local_cdf_density_test` on scores already sorted per side (``SortedScores``)."""
    cutoff = sample.cutoff
    kernel = check_option("kernel", kernel, KERNELS)
    degree = _check_degree(degree)
    level = check_level(level)
    grid_points = check_grid_points(grid_points)
    plot_range = check_plot_range(plot_range, cutoff)
    pair = bandwidth_pair(bandwidth)
    if bin_width is not None:
        bin_width = check_positive("bin_width", bin_width)
    _check_side_values(sample, degree)
    # highest fit: the bandwidth's derivative pilot (degree + 2), else the robust fit (degree + 1)
    for engine in sample.engines:
        engine.reserve(degree + (2 if pair is None else 1) + len(kernel_poly(kernel)) - 1)
    if pair is None:
        scale = _robust_scale(sample)
        pair = (_side_bandwidth(sample, "below", degree, kernel, scale),
                _side_bandwidth(sample, "above", degree, kernel, scale))
    n = sample.n
    z = z_value(level)

    fits, robust = {}, {}
    for side, h in zip(("below", "above"), pair):
        fits[side] = _cdf_fit(sample, side, cutoff, h, degree, kernel)
        robust[side] = _cdf_fit(sample, side, cutoff, h, degree + 1, kernel)
        if fits[side] is None or robust[side] is None:
            xs_side = sample.part(side)
            got = n_distinct(xs_side[np.abs(xs_side - cutoff) < h])
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
        max(sample.first, cutoff - pair[0]), min(sample.last, cutoff + pair[1]))
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
    grid = grid_from_rows(rows)

    if bin_width is None:
        q75, q25 = sample.percentile([75, 25])
        iqr = float(q75 - q25)
        bin_width = 2.0 * iqr * n ** (-1.0 / 3.0) if iqr > 0 else (high - low) / 20.0
    hist = histogram(sample, cutoff, bin_width, low, high, n)

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
        statistic=t_rob, p_value=two_sided(t_rob),
        statistic_conventional=t_conv, p_value_conventional=two_sided(t_conv),
        cross_covariance=cov_r, bandwidth=(float(pair[0]), float(pair[1])),
        n_below=sample.n_below, n_above=n - sample.n_below,
        n_used=(fits["below"].n_used, fits["above"].n_used), n=n,
        degree=degree, kernel=kernel, level=level, bin_width=float(bin_width),
        tie_share=sample.tie_share(), grid=grid, histogram=hist, reason=reason)

