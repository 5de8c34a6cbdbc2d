"""Reference computations for seamline's estimates, built live from statsmodels and linearmodels.

Nothing here stores a number: every reference value is produced by a general-purpose library
(statsmodels WLS/OLS, linearmodels IV2SLS) at test time, on the same rows and weights the engine
is specified to use (the engine contract described below).

The local polynomial estimate of a cutoff design is written as ONE fully interacted weighted
regression (common practice: the two side fits are one interacted regression):

    Y ~ [ 1{below} r_p(x / h_below),  1{above} r_p(x / h_above) ]  (+ covariates Z, additively)
    x = score - cutoff,  r_p(u) = (1, u, ..., u^p),
    weight_i = user_weight_i * K(x_i / h_side(i)),   only rows with weight_i > 0 are used.

The limit of the nu-th derivative on a side is nu! * beta_{side, nu} / h_side**nu (the basis is in
scaled units u = x/h, so the coefficient on u^nu is h^nu times the coefficient on x^nu), and the
estimate is (limit on the treated side) - (limit on the untreated side).

Kernels (support |u| <= 1 inclusive; normalising constants are irrelevant for estimates and for
HC/cluster covariances because each side's weights can be rescaled without changing them, and the
contract fixes the unnormalised forms used here):
    triangular 1 - |u|,  uniform 1,  epanechnikov 1 - u^2.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import statsmodels.api as sm
from linearmodels.iv import IV2SLS

# Tolerance for every engine-vs-reference comparison in tests/reference (declared once; any looser
# tolerance used by a test is justified where it is used).
RTOL = 1e-8
# Absolute floor, relative to the natural scale of the compared quantity (used only where a
# reference value can be exactly zero, e.g. a jump of 0 in a mirrored data set).
ATOL_SCALE = 1e-12

KERNELS = ("triangular", "uniform", "epanechnikov")
HC_TYPES = ("hc0", "hc1", "hc2", "hc3")


def kernel_weights(u: np.ndarray, kernel: str) -> np.ndarray:
    """Unnormalised kernel K(u) with support |u| <= 1 (inclusive)."""
    u = np.asarray(u, dtype=float)
    inside = np.abs(u) <= 1.0
    if kernel == "triangular":
        k = 1.0 - np.abs(u)
    elif kernel == "uniform":
        k = np.ones_like(u)
    elif kernel == "epanechnikov":
        k = 1.0 - u * u
    else:  # pragma: no cover - a typo in a test, not a user error
        raise ValueError(f"unknown kernel {kernel!r}")
    return np.where(inside, k, 0.0)


def as_pair(bandwidth) -> tuple[float, float]:
    """(below, above) from a float or a pair."""
    if np.ndim(bandwidth) == 0:
        return float(bandwidth), float(bandwidth)
    below, above = bandwidth
    return float(below), float(above)


@dataclass(frozen=True)
class Window:
    """The rows, basis and weights of the interacted local regression."""

    keep: np.ndarray          # boolean mask over the input rows: positive weight
    above: np.ndarray         # boolean over kept rows: score >= cutoff
    u: np.ndarray             # scaled distance x / h_side over kept rows
    weight: np.ndarray        # user weight * kernel weight over kept rows
    design: np.ndarray        # [1{below} r_p(u), 1{above} r_p(u), Z]
    h: tuple[float, float]    # (below, above)
    degree: int


def build_window(score, cutoff, bandwidth, kernel, degree, weights=None, covariates=None) -> Window:
    """Rows with positive weight and the fully interacted design of the contract."""
    score = np.asarray(score, dtype=float)
    h_below, h_above = as_pair(bandwidth)
    x = score - cutoff
    above_all = x >= 0  # an observation exactly at the cutoff is "above"
    h = np.where(above_all, h_above, h_below)
    u_all = x / h
    w_all = kernel_weights(u_all, kernel)
    if weights is not None:
        w_all = w_all * np.asarray(weights, dtype=float)
    keep = w_all > 0
    above = above_all[keep]
    u = u_all[keep]
    powers = np.vander(u, degree + 1, increasing=True)
    cols = [powers * (~above)[:, None], powers * above[:, None]]
    if covariates is not None:
        z = np.asarray(covariates, dtype=float)
        cols.append(z.reshape(len(score), -1)[keep])
    return Window(keep, above, u, w_all[keep], np.column_stack(cols), (h_below, h_above), degree)


def contrast(window: Window, derivative: int, treated: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Vectors c with c'beta = limit below, limit above, and the estimate (treated - untreated)."""
    p = window.degree
    k = window.design.shape[1]
    fact = math.factorial(derivative)
    c_below = np.zeros(k)
    c_above = np.zeros(k)
    c_below[derivative] = fact / window.h[0] ** derivative
    c_above[p + 1 + derivative] = fact / window.h[1] ** derivative
    c_est = c_above - c_below if treated == "above" else c_below - c_above
    return c_below, c_above, c_est


@dataclass(frozen=True)
class Reference:
    """A reference estimate with its standard error and the pieces tests compare."""

    estimate: float
    std_error: float
    limits: tuple[float, float]          # (below, above)
    limit_std_errors: tuple[float, float]
    n_used: tuple[int, int]              # rows with positive weight (below, above)
    nobs: int
    result: object                       # the statsmodels / linearmodels result, for inspection


def _sm_cov_args(cov_type: str, cluster, keep):
    if cov_type == "cluster":
        groups = np.asarray(cluster)[keep]
        # statsmodels' default for cluster: use_correction=True, df_correction=True, i.e. the
        # factor G/(G-1) * (N-1)/(N-k) that the contract names.
        return {"cov_type": "cluster", "cov_kwds": {"groups": groups}}
    return {"cov_type": cov_type.upper()}


def wls_reference(score, y, cutoff, bandwidth, *, kernel="triangular", degree=1, treated="above",
                  weights=None, covariates=None, cluster=None, derivative=0,
                  cov_type="hc0") -> Reference:
    """statsmodels WLS of the fully interacted local polynomial (the contract's conventional fit).

    ``cov_type`` is "hc0".."hc3" or "cluster" (then ``cluster`` gives the group labels).
    """
    win = build_window(score, cutoff, bandwidth, kernel, degree, weights, covariates)
    y_kept = np.asarray(y, dtype=float)[win.keep]
    res = sm.WLS(y_kept, win.design, weights=win.weight).fit(**_sm_cov_args(cov_type, cluster, win.keep))
    beta = np.asarray(res.params)
    cov = np.asarray(res.cov_params())
    c_below, c_above, c_est = contrast(win, derivative, treated)
    return Reference(
        estimate=float(c_est @ beta),
        std_error=float(math.sqrt(c_est @ cov @ c_est)),
        limits=(float(c_below @ beta), float(c_above @ beta)),
        limit_std_errors=(float(math.sqrt(c_below @ cov @ c_below)),
                          float(math.sqrt(c_above @ cov @ c_above))),
        n_used=(int((~win.above).sum()), int(win.above.sum())),
        nobs=int(win.keep.sum()),
        result=res,
    )


def ols_subset_reference(score, y, cutoff, bandwidth, *, degree=1, treated="above",
                         cov_type="hc0") -> Reference:
    """statsmodels OLS on the rows with |x| <= h_side, in the raw basis [x^j, T x^j].

    Common practice: a uniform kernel gives every row inside the bandwidth the same weight, so the
    local estimate is plain OLS on that subset. The basis here is deliberately the textbook one
    (raw x, a jump dummy T and its interactions), not the scaled one of ``wls_reference``.
    """
    score = np.asarray(score, dtype=float)
    h_below, h_above = as_pair(bandwidth)
    x = score - cutoff
    above_all = x >= 0
    inside = np.where(above_all, x <= h_above, -x <= h_below)
    x_in = x[inside]
    t = (x_in >= 0).astype(float)
    powers = np.vander(x_in, degree + 1, increasing=True)
    design = np.column_stack([powers, powers[:, :1] * t[:, None], powers[:, 1:] * t[:, None]])
    res = sm.OLS(np.asarray(y, dtype=float)[inside], design).fit(cov_type=cov_type.upper())
    k = design.shape[1]
    c_jump = np.zeros(k)
    c_jump[degree + 1] = 1.0  # coefficient on T: limit above - limit below
    sign = 1.0 if treated == "above" else -1.0
    beta = np.asarray(res.params)
    cov = np.asarray(res.cov_params())
    c_below = np.zeros(k)
    c_below[0] = 1.0
    c_above = c_below + c_jump
    return Reference(
        estimate=float(sign * beta[degree + 1]),
        std_error=float(math.sqrt(cov[degree + 1, degree + 1])),
        limits=(float(c_below @ beta), float(c_above @ beta)),
        limit_std_errors=(float(math.sqrt(c_below @ cov @ c_below)),
                          float(math.sqrt(c_above @ cov @ c_above))),
        n_used=(int((inside & ~above_all).sum()), int((inside & above_all).sum())),
        nobs=int(inside.sum()),
        result=res,
    )


def iv_reference(score, y, takeup, cutoff, bandwidth, *, kernel="triangular", degree=1,
                 treated="above", weights=None) -> Reference:
    """linearmodels IV2SLS of the local fuzzy design (Hahn, Todd & Van der Klaauw 2001: the fuzzy
    estimate is a local 2SLS with the treated-side indicator as instrument).

    dependent = Y, endogenous = take-up D, excluded instrument T = 1{treated side},
    exogenous = [1, 1{below} u..u^p, 1{above} u..u^p] (u = x / h_side; with a common h this spans
    the same columns as [1, x..x^p, T x..T x^p]), weights = user weight * K(u), rows with positive
    weight only; cov_type="robust", debiased=False (the HC0 sandwich of the weighted 2SLS).
    The coefficient on D is the ratio of the two jumps; it does not depend on which side is called
    treated because numerator and denominator change sign together.
    """
    win = build_window(score, cutoff, bandwidth, kernel, degree, weights)
    p = degree
    below_cols = win.design[:, 1:p + 1]
    above_cols = win.design[:, p + 2:2 * p + 2]
    exog = np.column_stack([np.ones(win.u.shape[0]), below_cols, above_cols])
    t = win.above if treated == "above" else ~win.above
    res = IV2SLS(
        dependent=np.asarray(y, dtype=float)[win.keep],
        exog=exog,
        endog=np.asarray(takeup, dtype=float)[win.keep],
        instruments=t.astype(float),
        weights=win.weight,
    ).fit(cov_type="robust", debiased=False)
    params = np.asarray(res.params)
    std = np.asarray(res.std_errors)
    nan = float("nan")
    return Reference(
        estimate=float(params[-1]),
        std_error=float(std[-1]),
        limits=(nan, nan),
        limit_std_errors=(nan, nan),
        n_used=(int((~win.above).sum()), int(win.above.sum())),
        nobs=int(win.keep.sum()),
        result=res,
    )


def bias_corrected_reference(score, y, cutoff, bandwidth, pilot_bandwidth, *, kernel="triangular",
                             degree=1, bias_degree=None, treated="above", derivative=0) -> float:
    """Two-step bias-corrected estimate (Calonico, Cattaneo & Titiunik 2014, section 2), each step a
    statsmodels WLS in the RAW basis of x = score - cutoff, so no bandwidth ratio appears:

    per side:  mu_bc = nu! (beta_p[nu](h) - g[nu] * beta_q[p+1](b)),
    where beta_p(h) is the order-p fit at h (weights K(x/h)), g the WLS coefficients of x^(p+1) on
    [1, x, ..., x^p] with the same weights, and beta_q[p+1](b) the coefficient on x^(p+1) of the
    order-q fit at the pilot bandwidth b (weights K(x/b)).
    """
    q = degree + 1 if bias_degree is None else bias_degree
    p = degree
    nu = derivative
    score = np.asarray(score, dtype=float)
    y = np.asarray(y, dtype=float)
    h_pair = as_pair(bandwidth)
    b_pair = as_pair(pilot_bandwidth)
    limits = []
    for side, h, b in (("below", h_pair[0], b_pair[0]), ("above", h_pair[1], b_pair[1])):
        on_side = (score - cutoff >= 0) if side == "above" else (score - cutoff < 0)
        x = (score - cutoff)[on_side]
        ys = y[on_side]
        wh = kernel_weights(x / h, kernel)
        kh = wh > 0
        x_p = np.vander(x[kh], p + 1, increasing=True)
        fit_h = sm.WLS(ys[kh], x_p, weights=wh[kh]).fit()
        proj = sm.WLS(x[kh] ** (p + 1), x_p, weights=wh[kh]).fit()
        wb = kernel_weights(x / b, kernel)
        kb = wb > 0
        fit_b = sm.WLS(ys[kb], np.vander(x[kb], q + 1, increasing=True), weights=wb[kb]).fit()
        limits.append(math.factorial(nu) * (fit_h.params[nu] - proj.params[nu] * fit_b.params[p + 1]))
    below, above = limits
    return above - below if treated == "above" else below - above


def assert_close(got, expected, *, rtol=RTOL, scale=None, what=""):
    """Assert |got - expected| <= rtol * max(|expected|, scale) with a readable message.

    ``scale`` is the natural size of the quantity when the reference may be (near) zero.
    """
    got = float(got)
    expected = float(expected)
    size = abs(expected) if scale is None else max(abs(expected), abs(float(scale)))
    tol = rtol * size + ATOL_SCALE * (abs(float(scale)) if scale is not None else 0.0)
    if not (abs(got - expected) <= tol) or math.isnan(got) != math.isnan(expected):
        raise AssertionError(
            f"{what}: got {got!r}, expected {expected!r}, |diff| = {abs(got - expected):.3e} > "
            f"tol {tol:.3e} (rtol {rtol:g})"
        )
