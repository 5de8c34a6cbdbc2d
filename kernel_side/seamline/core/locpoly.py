"""Local polynomial boundary fits on one side of the cutoff, as linear smoothers.

For side s (sign -1 below, +1 above), order p at bandwidth h and a bias fit of order q at bandwidth b,
the estimate of the nu-th derivative at the cutoff and its bias-corrected version are
    mu     = sum_i a_i Y_i,      a_i    = w_i K(d_i/h) c_h' r_p(s d_i/h)
    mu_bc  = sum_i abc_i Y_i,    abc_i  = a_i - w_i K(d_i/b) c_b' r_q(s d_i/b)
(METHODS sections 1.2 and 4.3). A ``SideFit`` holds c_h, c_b and the fitted coefficients; variances
are quadratic forms in them. Two interchangeable paths compute the ingredients: the moment engine
(O(log n) per bandwidth) and a direct pass over the window (needed for HC2/HC3 leverages, clusters
and covariates, and used as the internal cross-check).
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property
from math import factorial

import numpy as np

from .kernels import kernel_poly, kernel_weights
from .moments import window_gram
from .side import Side


@dataclass
class SideFit:
    side: Side
    kernel: str
    h: float
    b: float
    p: int
    q: int
    nu: int
    gamma_p: np.ndarray
    gamma_q: np.ndarray
    theta: np.ndarray
    c_h: np.ndarray          # conventional smoother coefficients
    c_b: np.ndarray          # bias-correction smoother coefficients
    beta_h: np.ndarray       # (p+1, k) order-p coefficients in u = x/h units, one column per variable
    beta_b: np.ndarray       # (q+1, k) order-q coefficients in u = x/b units
    n_h: int                 # rows with positive weight in the order-p fit
    n_b: int                 # rows with positive weight in the order-q fit

    @property
    def estimate(self) -> np.ndarray:
        """nu-th derivative of each variable at the cutoff (conventional)."""
        return self.derivative(self.nu)

    @property
    def bias(self) -> np.ndarray:
        """Estimated leading bias of ``estimate`` for each variable."""
        if self.q <= self.p:
            return np.zeros(self.beta_h.shape[1])
        rho = self.h / self.b
        lead = np.linalg.solve(self.gamma_p, self.theta)[self.nu]
        return factorial(self.nu) / self.h ** self.nu * rho ** (self.p + 1) * lead * self.beta_b[self.p + 1]

    @property
    def estimate_bc(self) -> np.ndarray:
        return self.estimate - self.bias

    def derivative(self, order: int, robust: bool = False) -> np.ndarray:
        """order-th derivative at the cutoff from the order-p fit (or the order-q bias fit)."""
        beta, bw = (self.beta_b, self.b) if robust else (self.beta_h, self.h)
        value = factorial(order) / bw ** order * beta[order]
        return value + self.side.offsets if order == 0 else value


def fit_side(side: Side, h: float, b: float, p: int, q: int, nu: int, kernel: str,
             direct: bool = False) -> SideFit:
    """Solve the order-p fit at h and the order-q fit at b on one side."""
    kp = kernel_poly(kernel)
    one = np.array([1.0])
    s = float(side.sign)
    k = side.values.shape[1]
    if direct:
        rows = side.count_positive(max(h, b), kernel)
        d = side.distance[:rows]
        w = side.w(slice(0, rows))
        rp = np.vander(s * d / h, p + 2, increasing=True)
        kw_h = w * kernel_weights(kernel, d / h)
        g = (rp * kw_h[:, None]).T @ rp
        gamma_p, theta = g[: p + 1, : p + 1], g[: p + 1, p + 1]
        xy_h = (rp[:, : p + 1] * kw_h[:, None]).T @ side.values[:rows]
        rq = np.vander(s * d / b, q + 1, increasing=True)
        kw_b = w * kernel_weights(kernel, d / b)
        gamma_q = (rq * kw_b[:, None]).T @ rq
        xy_b = (rq * kw_b[:, None]).T @ side.values[:rows]
    else:
        mom = side.moments
        wkey = side.series("w")
        g = window_gram(mom, h, [(*wkey, one)], p + 2, p + 2, kp, one, 1.0, 1.0, s)
        gamma_p, theta = g[: p + 1, : p + 1], g[: p + 1, p + 1]
        gamma_q = window_gram(mom, b, [(*wkey, one)], q + 1, q + 1, kp, one, 1.0, 1.0, s)
        xy_h = np.empty((p + 1, k))
        xy_b = np.empty((q + 1, k))
        for a in range(k):
            term = [(*side.series("wv", a), one)]
            xy_h[:, a] = window_gram(mom, h, term, p + 1, 1, kp, one, 1.0, 1.0, s)[:, 0]
            xy_b[:, a] = window_gram(mom, b, term, q + 1, 1, kp, one, 1.0, 1.0, s)[:, 0]
    beta_h = np.linalg.solve(gamma_p, xy_h)
    beta_b = np.linalg.solve(gamma_q, xy_b)
    scale = factorial(nu) / h ** nu
    c_h = scale * np.linalg.solve(gamma_p, np.eye(p + 1)[nu])
    lead = np.linalg.solve(gamma_p, theta)[nu]
    if q > p:
        c_b = scale * (h / b) ** (p + 1) * lead * np.linalg.solve(gamma_q, np.eye(q + 1)[p + 1])
    else:  # no bias fit requested (pilots): the bias-corrected smoother equals the conventional one
        c_b = np.zeros(q + 1)
    return SideFit(side, kernel, h, b, p, q, nu, gamma_p, gamma_q, theta, c_h, c_b, beta_h, beta_b,
                   side.count_positive(h, kernel), side.count_positive(b, kernel))


# ---------------------------------------------------------------------------------------------
# Variance through the moment engine: NN or HC0 (HC1 is HC0 times a factor applied by the caller)
# ---------------------------------------------------------------------------------------------
def _pairs(lam: np.ndarray):
    for a in range(len(lam)):
        for b in range(a, len(lam)):
            c = lam[a] * lam[b] * (1.0 if a == b else 2.0)
            if c != 0.0:
                yield a, b, c


def _omega_terms(side: Side, lam: np.ndarray, kind: str, fit_beta: np.ndarray | None,
                 fit_bw: float, t: float):
    """Terms (key, series, poly in v = d/t) whose sum is w_i^2 * omega_i for the window t."""
    terms = []
    if kind == "neighbors":
        for a, b, c in _pairs(lam):
            terms.append((*side.series("w2nn", a, b), np.array([c])))
        return terms
    # HC0: omega = (y_lam - Q(d))^2, Q the fitted polynomial of the residual fit, written in v = d/t
    q_coef = (fit_beta @ lam) * (side.sign * t / fit_bw) ** np.arange(fit_beta.shape[0])
    for a, b, c in _pairs(lam):
        terms.append((*side.series("w2vv", a, b), np.array([c])))
    for a in range(len(lam)):
        if lam[a] != 0.0:
            terms.append((*side.series("w2v", a), -2.0 * lam[a] * q_coef))
    terms.append((*side.series("w2"), np.convolve(q_coef, q_coef)))
    return terms


def variance_fast(sf: SideFit, lam: np.ndarray, kind: str, robust: bool) -> float:
    """sum_i a_i^2 omega_i (or with the bias-corrected weights) via window moments."""
    side, kp, s = sf.side, kernel_poly(sf.kernel), float(sf.side.sign)
    mom = side.moments
    if not robust:
        terms = _omega_terms(side, lam, kind, sf.beta_h, sf.h, sf.h)
        g = window_gram(mom, sf.h, terms, sf.p + 1, sf.p + 1, kp, kp, 1.0, 1.0, s)
        return float(sf.c_h @ g @ sf.c_h)
    h, b = sf.h, sf.b
    g_hh = window_gram(mom, h, _omega_terms(side, lam, kind, sf.beta_b, b, h),
                       sf.p + 1, sf.p + 1, kp, kp, 1.0, 1.0, s)
    g_bb = window_gram(mom, b, _omega_terms(side, lam, kind, sf.beta_b, b, b),
                       sf.q + 1, sf.q + 1, kp, kp, 1.0, 1.0, s)
    t = min(h, b)
    g_hb = window_gram(mom, t, _omega_terms(side, lam, kind, sf.beta_b, b, t),
                       sf.p + 1, sf.q + 1, kp, kp, t / h, t / b, s)
    return float(sf.c_h @ g_hh @ sf.c_h - 2.0 * sf.c_h @ g_hb @ sf.c_b + sf.c_b @ g_bb @ sf.c_b)


# ---------------------------------------------------------------------------------------------
# Direct window arrays: weights, residuals and leverages row by row
# ---------------------------------------------------------------------------------------------
@dataclass
class WindowArrays:
    rows: int                 # first `rows` observations of the side (distance <= max(h, b))
    a: np.ndarray             # conventional smoother weights (0 beyond h)
    abc: np.ndarray           # bias-corrected smoother weights
    kw_h: np.ndarray          # w * K(d/h)
    rp: np.ndarray            # r_p(s d / h)
    resid_h: np.ndarray       # (rows, k) residuals of the order-p fit at h
    resid_b: np.ndarray       # (rows, k) residuals of the order-q fit at b
    kw_b: np.ndarray          # w * K(d/b)
    rq: np.ndarray            # r_q(s d / b)
    gamma_p: np.ndarray       # the order-p fit's weighted cross-product matrix (for the leverages)
    gamma_q: np.ndarray

    # Leverages only for the HC2/HC3 direct passes: computed on first use, not with every window.
    @cached_property
    def lev_h(self) -> np.ndarray:
        """Leverage in the order-p weighted fit."""
        return self.kw_h * np.einsum("ij,ij->i", self.rp @ np.linalg.inv(self.gamma_p), self.rp)

    @cached_property
    def lev_b(self) -> np.ndarray:
        """Leverage in the order-q weighted fit."""
        return self.kw_b * np.einsum("ij,ij->i", self.rq @ np.linalg.inv(self.gamma_q), self.rq)


def window_arrays(sf: SideFit) -> WindowArrays:
    side, s = sf.side, float(sf.side.sign)
    rows = side.count_positive(max(sf.h, sf.b), sf.kernel)
    d = side.distance[:rows]
    w = side.w(slice(0, rows))
    kw_h = w * kernel_weights(sf.kernel, d / sf.h)
    kw_b = w * kernel_weights(sf.kernel, d / sf.b)
    rp = np.vander(s * d / sf.h, sf.p + 1, increasing=True)
    rq = np.vander(s * d / sf.b, sf.q + 1, increasing=True)
    a = kw_h * (rp @ sf.c_h)
    abc = a - kw_b * (rq @ sf.c_b)
    vals = side.values[:rows]
    resid_h = vals - rp @ sf.beta_h
    resid_b = vals - rq @ sf.beta_b
    return WindowArrays(rows, a, abc, kw_h, rp, resid_h, resid_b, kw_b, rq, sf.gamma_p, sf.gamma_q)


HC_BLOCK = 1 << 16      # rows per block of ``hc_meat`` (its temporaries stay a few arrays this long)


def hc_meat(sf: SideFit, lam: np.ndarray, power: int) -> np.ndarray:
    """sum_i r_i r_i' K_i^2 e_i^2 / (1 - lev_i)^power of the order-p fit at h (the HC0 / HC2 / HC3
    meat of its coefficients, e the residuals of the combined variable ``lam``), block by block
    over the rows inside h: the sum ``window_arrays`` gives (its rows past h weigh 0) without its
    per-row arrays over max(h, b), about 90 bytes a row."""
    side, s = sf.side, float(sf.side.sign)
    rows = side.count_positive(sf.h, sf.kernel)
    inv = np.linalg.inv(sf.gamma_p)
    coef = sf.beta_h[:, : len(lam)] @ lam
    meat = np.zeros((sf.p + 1, sf.p + 1))
    block = HC_BLOCK
    for a in range(0, rows, block):
        sl = slice(a, min(a + block, rows))
        d = side.distance[sl]
        kw = side.w(sl) * kernel_weights(sf.kernel, d / sf.h)
        r = np.vander(s * d / sf.h, sf.p + 1, increasing=True)
        omega = (side.values[sl, : len(lam)] @ lam - r @ coef) ** 2
        if power:
            lev = kw * np.einsum("ij,ij->i", r @ inv, r)
            omega /= (1.0 - np.minimum(lev, 1 - 1e-12)) ** power
        meat += (r * (kw ** 2 * omega)[:, None]).T @ r
    return meat
