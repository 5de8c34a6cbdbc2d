"""Bias-aware (fixed-length) confidence intervals for linear estimators (Armstrong & Kolesar 2018, 2020).

A local polynomial jump estimate is a linear smoother, tau_hat = sum_i w_i Y_i, whose weights
reproduce an intercept and a slope on each side. If on each side the error of the first-order
expansion at the cutoff is at most M x^2 / 2 (the Taylor smoothness class), the worst-case bias is

    max_bias = (M / 2) * sum_i |w_i| x_i^2,

attained by the remainder (M/2) sign(w_i) x_i^2. With se = sd(tau_hat | X) and t = max_bias / se,
the shortest symmetric interval that covers for every bias in [-max_bias, max_bias] is
tau_hat +- cv(t) se, where cv(t) is the level quantile of |N(t, 1)| (the folded normal).

Pure functions on float64 arrays; the estimate layer supplies the engine's weights.
"""
from __future__ import annotations

from typing import Callable

import numpy as np
from scipy import optimize, special

from .legendre import legendre_rows

# Degree of the global polynomial of the smoothness rule of thumb (Armstrong & Kolesar 2020 use a
# quartic on each side; from memory).
RULE_OF_THUMB_DEGREE = 4
GRID_POINTS = 60       # log-spaced bandwidths of the first search pass (convention)


def critical_value(t: float, level: float) -> float:
    """The ``level`` quantile of |N(t, 1)|: the bias-aware critical value for max_bias / se = t.

    Solves Phi(c - t) - Phi(-c - t) = level by brentq on the bracket [t + z_level, t + z_(1+level)/2]
    (the quantile of N(t, 1) bounds it below, a two-tail union bound above); equal to
    ``scipy.stats.foldnorm.ppf(level, c=t)`` and about twenty times faster, which the bandwidth
    search needs.
    """
    t = abs(float(t))
    low, high = t + special.ndtri(level), t + special.ndtri(0.5 + level / 2.0)
    def coverage_gap(c: float) -> float:
        return special.ndtr(c - t) - special.ndtr(-c - t) - level
    if coverage_gap(low) >= 0.0:      # large t: the lower tail has vanished in floating point
        return float(low)
    if coverage_gap(high) <= 0.0:
        return float(high)
    return float(optimize.brentq(coverage_gap, low, high, xtol=1e-14, rtol=4 * np.finfo(float).eps))


def critical_values(t: np.ndarray, level: float) -> np.ndarray:
    """``critical_value`` for an array of t at once (the bandwidth search's grid), by Newton's method.

    On [t + z_level, t + z_(1+level)/2] the coverage Phi(c - t) - Phi(-c - t) is increasing and
    concave in c (c > t), so Newton's iterates from the lower end rise monotonically to the root;
    the ends are handled as ``critical_value`` handles them. Equal to it to about 1e-14.
    """
    t = np.abs(np.asarray(t, dtype=float))
    low = t + special.ndtri(level)
    high = t + special.ndtri(0.5 + level / 2.0)
    c = low.copy()
    for _ in range(60):
        gap = special.ndtr(c - t) - special.ndtr(-c - t) - level
        slope = np.exp(-0.5 * (c - t) ** 2) + np.exp(-0.5 * (c + t) ** 2)
        with np.errstate(divide="ignore", invalid="ignore"):
            step = np.where(slope > 0, -gap * np.sqrt(2.0 * np.pi) / slope, 0.0)
        step = np.where(gap < 0.0, step, 0.0)              # at or past the root (or the lower end holds)
        new = np.minimum(c + step, high)
        if np.all(np.abs(new - c) <= 1e-15 * np.maximum(1.0, np.abs(c))):
            c = new
            break
        c = new
    return c


def taylor_max_bias(weights: np.ndarray, x: np.ndarray, smoothness: float) -> float:
    """Worst-case bias of sum_i w_i Y_i over the Taylor class with bound ``smoothness``.

    Exact (attained) for any weights that reproduce an intercept and a slope on each side.
    """
    return float(0.5 * smoothness * np.sum(np.abs(weights) * np.asarray(x) ** 2))


def side_at_bandwidth(side, h: float, kernel: str, degree: int, n_main: int, taylor: bool = True):
    """What a bias-aware interval needs of one side at bandwidth h, from the side's window moments.

    The order-``degree`` local polynomial at the cutoff is sum_i a_i Y_i with weights
    a_i = w_i K(u_i) Q(u_i), u_i = d_i / h and Q(u) = c' r_p(s u), c = Gamma^-1 e_0 (the engine's
    conventional smoother). Every quantity is a window sum of a series times a polynomial in u:

        Gamma[j, l]  = s^(j+l) sum w K(u) u^(j+l)           limits = Gamma^-1 sum w K(u) r_p(s u) v
        V[a, b]      = sum w^2 nn_a nn_b (K Q)(u)^2         (nearest-neighbour variance, as the engine's)
        unit bias    = (1/2) sum |a_i| d_i^2 = (h^2 / 2) sum over the pieces of [0, 1] between the
                       roots of Q of |sum w K(u) Q(u) u^2|  (Taylor class, bound M = 1)

    so a bandwidth costs a few lookups in the moment tables (one block and a partial block each),
    O(log n + block), instead of a pass over the rows inside it. Returns (limits (k,), V (k, k),
    unit bias or None when ``taylor`` is false, c, rows with positive weight). Equals the engine's
    direct window arrays up to rounding (tests/inference/test_inference_reuse.py).
    """
    from .kernels import kernel_poly
    kp = kernel_poly(kernel)
    s = float(side.sign)
    top = 2 * (len(kp) - 1) + 2 * degree + 2          # the highest power any of the sums needs
    mom = side.moments
    key, series = side.series("w")
    sw = mom.sums(key, series, h, top)
    size = 2 * degree + 1
    kw = np.correlate(sw, kp, mode="valid")[:size]    # sum w K(u) u^m, m = 0..2p
    signs = s ** np.arange(size)
    j = np.arange(degree + 1)
    gamma = (kw * signs)[j[:, None] + j[None, :]]
    xy = np.empty((degree + 1, n_main))
    for a in range(n_main):
        k, f = side.series("wv", a)
        xy[:, a] = np.correlate(mom.sums(k, f, h, top), kp, mode="valid")[: degree + 1] * signs[: degree + 1]
    rhs = np.zeros((degree + 1, n_main + 1))
    rhs[0, 0] = 1.0
    rhs[:, 1:] = xy
    solved = np.linalg.solve(gamma, rhs)               # one factorisation for c and the coefficients
    c, beta = solved[:, 0], solved[:, 1:]
    limits = beta[0] + side.offsets[:n_main]
    q = c * signs[: degree + 1]                        # Q(u) in ascending powers of u
    g = np.convolve(kp, q)                             # (K Q)(u)
    g2 = np.convolve(g, g)
    cov = np.empty((n_main, n_main))
    for a in range(n_main):
        for b in range(a, n_main):
            k, f = side.series("w2nn", a, b)
            cov[a, b] = cov[b, a] = float(np.dot(g2, mom.sums(k, f, h, top)[: len(g2)]))
    bias = None
    if taylor:
        f_poly = np.r_[0.0, 0.0, g]                    # F(u) = K(u) Q(u) u^2
        if degree == 1:                                # local linear: one root, no eigenvalues
            roots = np.array([-q[0] / q[1]]) if q[1] != 0.0 else np.array([])
        else:
            roots = np.polynomial.polynomial.polyroots(q) if np.any(q[1:]) else np.array([])
        real = np.sort(roots.real[(np.abs(roots.imag) <= 1e-12 * np.maximum(1.0, np.abs(roots.real)))
                                  & (roots.real > 0.0) & (roots.real < 1.0)])
        powers = np.arange(len(f_poly))

        def window(u: float) -> float:                 # sum_{d <= u h} w F(d / h)
            if u <= 0.0:
                return 0.0
            m = sw if u == 1.0 else mom.sums(key, series, u * h, top)
            return float(np.dot(f_poly * u ** powers, m[: len(f_poly)]))
        values = [window(u) for u in (0.0, *real, 1.0)]
        bias = float(0.5 * h * h * sum(abs(b - a) for a, b in zip(values[:-1], values[1:])))
    return limits, cov, bias, c, side.count_positive(h, kernel)


def holder_max_bias(weights: np.ndarray, distance: np.ndarray, smoothness: float) -> float:
    """Worst-case bias of sum_i w_i Y_i on one side when |mu''| <= M there (the Hölder class).

    With r(x) = int_0^|x| (|x| - t) mu''(t) dt the remainder after an intercept and a slope, the bias
    is int_0^inf g(t) mu''(t) dt with g(t) = sum_i w_i (|x_i| - t)_+, so the worst case is
    M int |g(t)| dt. g is linear between the sorted distances; each piece is integrated exactly,
    split at its root. Requires weights that reproduce an intercept and a slope on the side.
    """
    order = np.argsort(distance)
    d = np.asarray(distance, dtype=float)[order]
    w = np.asarray(weights, dtype=float)[order]
    # on [d_(k-1), d_(k)] the points k, k+1, ... are beyond t: g(t) = A_k - B_k t
    a_k = np.cumsum((w * d)[::-1])[::-1]
    b_k = np.cumsum(w[::-1])[::-1]
    lo = np.r_[0.0, d[:-1]]
    hi = d
    g_lo, g_hi = a_k - b_k * lo, a_k - b_k * hi
    same_sign = g_lo * g_hi >= 0
    length = hi - lo
    whole = 0.5 * length * np.abs(g_lo + g_hi)
    # a sign change inside the piece: two triangles meeting at the root
    with np.errstate(divide="ignore", invalid="ignore"):
        split = 0.5 * length * (g_lo ** 2 + g_hi ** 2) / (np.abs(g_lo) + np.abs(g_hi))
    area = np.where(same_sign, whole, split)
    return float(smoothness * np.sum(np.where(length > 0, area, 0.0)))


def half_length(max_bias: float, se: float, level: float) -> float:
    """Half-length cv(max_bias / se) * se of the fixed-length interval."""
    if not se > 0:
        return float("nan")
    return critical_value(max_bias / se, level) * se


def second_derivative_bound(x: np.ndarray, y: np.ndarray, degree: int = RULE_OF_THUMB_DEGREE) -> float:
    """max |fitted second derivative| over the observed x of a global polynomial fitted by OLS.

    The polynomial degree drops to what the number of distinct x values allows; a side with fewer
    than three distinct values gives nan (no curvature can be measured there). The fit is solved by
    normal equations in the Legendre basis of x mapped onto [-1, 1] (well conditioned, one pass of
    small products instead of a least-squares factorisation of the n x (degree + 1) matrix); the
    second derivative is evaluated on 201 points spanning the observed x.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    steps = np.diff(x)
    if np.all(steps >= 0) or np.all(steps <= 0):      # a side's sorted scores: no sort needed
        distinct = 1 + int(np.count_nonzero(steps)) if len(x) else 0
    else:
        distinct = len(np.unique(x))
    degree = min(degree, distinct - 1)
    if degree < 2:
        return float("nan")
    lo, hi = float(np.min(x)), float(np.max(x))
    half = 0.5 * (hi - lo)
    t = (x - (lo + half)) / half
    basis = legendre_rows(t, degree)                   # Legendre P_0..P_degree
    coefs = np.linalg.solve(basis @ basis.T, basis @ y)
    second = np.polynomial.legendre.legder(coefs, 2) / half ** 2
    grid = np.linspace(-1.0, 1.0, 201)
    return float(np.max(np.abs(np.polynomial.legendre.legval(grid, second))))


def minimise_on_log_grid(objective: Callable[[float], float], low: float, high: float,
                         points: int = GRID_POINTS,
                         on_grid: Callable[[np.ndarray], np.ndarray] | None = None) -> tuple[float, bool]:
    """Minimise a one-dimensional objective over [low, high]: a log-spaced grid, then a bounded
    refinement between the neighbours of the best grid point (the objective has small steps as
    observations enter the window, so unimodality is not assumed).

    Returns the minimiser and whether it lies at an end of the range. ``on_grid``, when given, is the
    objective at all grid points at once.
    """
    if high <= low:
        return float(low), True
    grid = np.geomspace(low, high, points)
    # ``on_grid``: the objective at every grid point at once (the same numbers, vectorised)
    values = np.asarray(on_grid(grid), dtype=float) if on_grid is not None else np.array([objective(h) for h in grid])
    values = np.where(np.isfinite(values), values, np.inf)
    best = int(np.argmin(values))
    lo, hi = grid[max(best - 1, 0)], grid[min(best + 1, points - 1)]
    found = optimize.minimize_scalar(objective, bounds=(lo, hi), method="bounded",
                                     options={"xatol": 1e-4 * grid[best]})
    h = float(found.x) if found.success and found.fun <= values[best] else float(grid[best])
    at_edge = best in (0, points - 1)
    return h, at_edge


def accepted_set(accepts: Callable[[float], float], centre: float, scale: float,
                 points: int = 2001) -> tuple[tuple[float, float], ...]:
    """The set {tau0 : accepts(tau0) <= 0} as a union of closed intervals (ends may be +-inf).

    ``accepts`` is evaluated on tau0 = centre + scale * tan(theta) for theta on a uniform grid of
    (-pi/2, pi/2), which reaches the whole real line; each sign change is refined with brentq. The
    ends at +-inf take the sign of the outermost grid points.
    """
    theta = np.linspace(-np.pi / 2, np.pi / 2, points + 2)[1:-1]
    tau = centre + scale * np.tan(theta)
    inside = np.array([accepts(t) <= 0.0 for t in tau])
    pieces: list[tuple[float, float]] = []
    start = -np.inf if inside[0] else None
    for i in range(1, len(tau)):
        if inside[i] == inside[i - 1]:
            continue
        edge = optimize.brentq(accepts, tau[i - 1], tau[i], xtol=1e-12 * max(1.0, abs(tau[i])))
        if inside[i]:
            start = edge
        else:
            pieces.append((float(start), float(edge)))
            start = None
    if start is not None:
        pieces.append((float(start), np.inf))
    return tuple(pieces)
