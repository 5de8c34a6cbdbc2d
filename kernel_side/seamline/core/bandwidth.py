"""Data-driven bandwidths: MSE-optimal (common and per side), coverage-error rescaling, and IK.

All selectors work on a linear combination ``lam`` of the side variables, so one code path serves
sharp outcomes, fuzzy designs (lam = outcome - tau * take-up; the 1/jump factor cancels in the
arg-min) and covariate adjustment (lam = outcome - gamma' covariates).
References: Calonico, Cattaneo & Titiunik (2014) for the MSE plug-in structure and the two-step
pilot of the bias bandwidth, Imbens & Kalyanaraman (2012) for IK, Calonico, Cattaneo & Farrell
(2020) for the coverage-error rate (METHODS sections 3, 4.6, 5; METHODS-II 26.2). Pilot choices
marked (convention) are ours where the papers leave room.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from math import factorial
from typing import Callable

import numpy as np

from .kernels import ik_constant, normal_reference_constant
from .locpoly import SideFit, fit_side
from .side import Side
from ..errors import TooFewDistinctValuesError

# variance_fn(side_fit, lam) -> conventional variance of side_fit's estimate for variable lam
VarianceFn = Callable[[SideFit, np.ndarray], float]


@dataclass
class Selection:
    """Bandwidths chosen by the MSE rules for one specification (all pairs are (below, above)).

    The per-side pair (``h_split``, ``b_split``) is computed when first read: a common-bandwidth fit
    never needs it, and a side whose curvature is flat selects a wide per-side bias bandwidth, which
    on the streamed route (core.window_side) would widen the window for nothing.
    """
    h_common: float
    b_common: float
    pilot: float
    warnings: list[str] = field(default_factory=list)
    split: Callable[[], tuple[tuple[float, float], tuple[float, float]]] | None = None
    _split_value: tuple | None = field(default=None, repr=False)

    def _pair(self) -> tuple:
        if self._split_value is None:
            self._split_value = self.split()
        return self._split_value

    @property
    def h_split(self) -> tuple[float, float]:
        return self._pair()[0]

    @property
    def b_split(self) -> tuple[float, float]:
        return self._pair()[1]


def _lead(fit: SideFit) -> float:
    """e_nu' Gamma^-1 theta: the leading bias factor of an order-p fit, in bandwidth units."""
    return float(np.linalg.solve(fit.gamma_p, fit.theta)[fit.nu])


def _floor(side: Side, h: float, needed: int, kernel: str) -> float:
    """Enlarge h so that ``needed`` distinct score values get positive weight on this side."""
    need_h = side.bandwidth_for_distinct(needed, kernel)
    return max(h, need_h) if np.isfinite(need_h) else h


# (convention) The curvature pilot is a polynomial fitted to the half of each side nearest the cutoff,
# echoing Imbens-Kalyanaraman's median trimming: a fit over the whole side averages away curvature
# that changes quickly near the cutoff (Lee design, METHODS 14.1) and then over-smooths badly.
PILOT_SHARE = 0.5


def _global_derivative(side: Side, order: int, lam: np.ndarray, degree: int,
                       share: float = PILOT_SHARE) -> float:
    """order-th derivative at the cutoff of a polynomial of ``degree`` fitted to the nearer part of the side."""
    rows = max(int(np.ceil(share * side.n)), 1)
    degree = min(degree, side.distinct_within(rows) - 1)
    if degree < order:
        return 0.0  # (convention) too few distinct values for the pilot: treat the curvature as unknown-zero
    summary = side.pilot_sums(share, degree)   # None: the side holds the pilot's rows (always in memory)
    if summary is not None:
        top, gram, cross = summary
        beta = np.linalg.solve(gram, cross)
        return float(factorial(order) / top ** order * beta[order] @ lam)
    top = float(side.distance[rows - 1])
    fit = fit_side(side, top, top, degree, degree, order, "uniform")
    return float(fit.derivative(order) @ lam)


def _two_step_curvature(sides: tuple[Side, Side], *, q: int, kernel: str, lam: np.ndarray,
                        variance_fn: VarianceFn, c: float, n: float, top: float
                        ) -> tuple[list[float], list[float]]:
    """mu^(q+1) on each side and its variance, by the published two-step pilot (CCT 2014, METHODS-II 26.2).

    (from memory: the step order of the published selector) A global polynomial of order q+2 on each
    whole side gives mu^(q+2); with it, a bandwidth d MSE-optimal for the (q+1)-th derivative jump with
    order-(q+1) local fits; mu^(q+1) is then the order-(q+1) local fit at d. The variance of that estimate
    is returned for the regularisation term of b.
    """
    r = q + 1
    far = [_global_derivative(s, r + 1, lam, r + 1, share=1.0) for s in sides]
    fits_d = [fit_side(s, c, c, r, r, r, kernel) for s in sides]
    v_d = sum(n * c ** (1 + 2 * r) * variance_fn(f, lam) for f in fits_d)
    bias_d = [factorial(r) / factorial(r + 1) * _lead(f) * m for f, m in zip(fits_d, far)]
    bias2 = (bias_d[1] - bias_d[0]) ** 2
    expo = 1.0 / (2 * r + 3)
    d = top if not (bias2 > 0 and v_d > 0) else min(((2 * r + 1) * v_d / (2 * bias2)) ** expo * n ** -expo, top)
    d = max(d, *(_floor(s, 0.0, r + 1, kernel) for s in sides))
    est, var = [], []
    for s in sides:
        f = fit_side(s, d, d, r, r, r, kernel)
        est.append(float(f.estimate @ lam))
        var.append(variance_fn(f, lam))
    return est, var


def mse_selection(below: Side, above: Side, *, p: int, q: int, nu: int, kernel: str,
                  lam: np.ndarray, variance_fn: VarianceFn, score_scale: float,
                  n_total: int, pilot_rule: str = "nearer-half") -> Selection:
    """MSE-optimal bandwidths for the nu-th derivative jump with an order-p fit (METHODS 4.6).

    Steps: (1) variance pilot c = C_NR(K) * min(sd, IQR/1.349) * n^(-1/5) (convention);
    (2) pilot for mu^(q+1): an order-(q+1) polynomial on the nearer half of each side (pilot_rule
    "nearer-half", our convention) or the published two-step sequence ("two-step", with a regulariser
    in b; ``_two_step_curvature``); (3) bias bandwidth b,
    MSE-optimal for the (p+1)-th derivative with an order-q fit; (4) mu^(p+1)(b); (5) h from
    h = [(1+2nu) V / (2(p+1-nu)(B^2 + R))]^(1/(2p+3)) n^(-1/(2p+3)), with one refinement step
    that re-evaluates V and the bias constants at the new h.
    """
    sides = (below, above)
    for side, name in zip(sides, ("below", "above")):
        have = side.distinct_within(side.n)
        if have < q + 1:
            raise TooFewDistinctValuesError(
                f"the score must take at least {q + 1} distinct values {name} the cutoff for a data-driven "
                f"bandwidth with a degree-{q} bias fit; got {have}. Lower `degree`/`bias_degree` or pass a "
                "manual bandwidth and pilot_bandwidth.")
    warnings: list[str] = []
    n = float(n_total)
    top = max(below.far, above.far)
    c = normal_reference_constant(kernel) * score_scale * n ** (-0.2)
    c = min(max(c, *(_floor(s, 0.0, q + 1, kernel) for s in sides)), top)

    # (1)-(3): bias bandwidth b for the (p+1)-th derivative, order q
    if pilot_rule == "two-step":
        curv_q, curv_var = _two_step_curvature(sides, q=q, kernel=kernel, lam=lam, variance_fn=variance_fn,
                                               c=c, n=n, top=top)
    else:
        curv_q, curv_var = [_global_derivative(s, q + 1, lam, q + 1) for s in sides], [0.0, 0.0]
    fits_b = [fit_side(s, c, c, q, q, p + 1, kernel) for s in sides]
    v_b = [n * c ** (1 + 2 * (p + 1)) * variance_fn(f, lam) for f in fits_b]
    scale_bb = factorial(p + 1) / factorial(q + 1)
    bias_b = [scale_bb * _lead(f) * m for f, m in zip(fits_b, curv_q)]
    # regulariser: the variance of the estimated bias term (zero for the nearer-half pilot, which has none)
    reg_b = [(scale_bb * _lead(f)) ** 2 * v for f, v in zip(fits_b, curv_var)]
    expo_b = 1.0 / (2 * q + 3)

    def b_rule(v: float, bias2: float) -> float:
        if not (bias2 > 0 and v > 0):  # no curvature signal (or a degenerate pilot window): widest window
            return top
        return float(((3 + 2 * p) * v / (2 * (q - p) * bias2)) ** expo_b * n ** -expo_b)

    b_common = min(b_rule(sum(v_b), (bias_b[1] - bias_b[0]) ** 2 + sum(reg_b)), top)
    b_common = max(b_common, *(_floor(s, 0.0, q + 1, kernel) for s in sides))

    # (4) curvature mu^(p+1) at b and its variance (the regulariser R)
    def curvature(side: Side, b: float) -> tuple[float, float]:
        f = fit_side(side, b, b, q, q, p + 1, kernel)
        return float(f.estimate @ lam), variance_fn(f, lam)

    curv_common = [curvature(s, b_common) for s in sides]

    expo = 1.0 / (2 * p + 3)
    const = (1 + 2 * nu) / (2 * (p + 1 - nu))
    scale_b = factorial(nu) / factorial(p + 1)

    def pieces(side: Side, h: float, curv: tuple[float, float]) -> tuple[float, float, float]:
        f = fit_side(side, h, h, p, p, nu, kernel)
        lead = scale_b * _lead(f)
        return n * h ** (1 + 2 * nu) * variance_fn(f, lam), lead * curv[0], lead ** 2 * curv[1]

    def h_rule(v: float, bias2: float, reg: float, cap: float) -> float:
        denom = bias2 + reg
        if not (denom > 0 and v > 0):
            return cap
        return float(min((const * v / denom) ** expo * n ** -expo, cap))

    h_common = c
    for _ in range(2):  # pilot pass, then one refinement at the selected h
        parts = [pieces(s, h_common, cv) for s, cv in zip(sides, curv_common)]
        h_common = h_rule(parts[0][0] + parts[1][0], (parts[1][1] - parts[0][1]) ** 2,
                          parts[0][2] + parts[1][2], top)
        h_common = max(h_common, *(_floor(s, 0.0, p + 1, kernel) for s in sides))

    def split() -> tuple[tuple[float, float], tuple[float, float]]:
        b_split = tuple(min(b_rule(v, bb ** 2 + rb), s.far)
                        for v, bb, rb, s in zip(v_b, bias_b, reg_b, sides))
        b_split = tuple(_floor(s, bb, q + 1, kernel) for s, bb in zip(sides, b_split))
        curv_split = [curvature(s, bb) for s, bb in zip(sides, b_split)]
        h_split = []
        for s, cv in zip(sides, curv_split):
            h_s = c
            for _ in range(2):
                v, bias, reg = pieces(s, h_s, cv)
                h_s = _floor(s, h_rule(v, bias ** 2, reg, s.far), p + 1, kernel)
            h_split.append(h_s)
        return (h_split[0], h_split[1]), b_split

    if h_common >= top * 0.999:
        warnings.append("The MSE-optimal bandwidth reached the range of the data: the estimated "
                        "curvature difference is close to zero. Consider a manual bandwidth.")
    return Selection(h_common, b_common, c, warnings, split)


def coverage_factor(n_total: int, p: int) -> float:
    """Rule-of-thumb coverage-error rescaling n^(-p / ((2p+3)(p+3))) of an MSE bandwidth (CCF 2020)."""
    return float(n_total) ** (-p / ((2 * p + 3) * (p + 3)))


def _cubic_from_sums(summaries, lam: np.ndarray) -> tuple[np.ndarray, float]:
    """IK's global cubic with a jump and the outcome's weighted sd from per-side sums (``Side.cubic_sums``):
    the normal equations of the weighted least squares, and np.cov's aweights formula."""
    gram = sum(m["gram"] for m in summaries)
    cross = sum(m["cross"] for m in summaries) @ lam
    coef = np.linalg.solve(gram, cross)
    w1, w2 = sum(m["w"] for m in summaries), sum(m["w2"] for m in summaries)
    wy = sum(m["wv"] for m in summaries) @ lam
    wyy = float(lam @ sum(m["wvv"] for m in summaries) @ lam)
    rows = sum(m["rows"] for m in summaries)
    if rows <= 1:
        return coef, 1.0
    return coef, float(np.sqrt((wyy - wy ** 2 / w1) / (w1 - w2 / w1)))


def ik_bandwidth(below: Side, above: Side, *, kernel: str, lam: np.ndarray, score_sd: float,
                 n_total: int) -> tuple[float, list[str]]:
    """Imbens-Kalyanaraman (2012) bandwidth for the local linear jump (METHODS section 3.2).

    Step order and median trimming follow the published version as we recall it (from memory); all
    constants (1.84, 3.56, 720, C_K) are re-derived in METHODS. Weighted data use weighted means
    and variances (convention).
    """
    warnings: list[str] = []
    n = float(n_total)
    sides = (below, above)
    h1 = normal_reference_constant("uniform") * score_sd * n ** (-0.2)

    def window_stats(side: Side, h: float) -> tuple[int, float]:
        rows = max(side.count_positive(h, "uniform"), min(side.n, 2))
        y = side.values[:rows] @ lam
        w = side.w(slice(0, rows))
        mean = np.average(y, weights=w)
        var = float(np.sum(w * (y - mean) ** 2) / (np.sum(w) * (rows - 1) / rows)) if rows > 1 else 0.0
        return rows, var

    stats = [window_stats(s, h1) for s in sides]
    if min(st[0] for st in stats) < 2:
        warnings.append("Few observations near the cutoff for the IK pilot; the window was enlarged.")
    f_hat = (stats[0][0] + stats[1][0]) / (2.0 * n * h1)
    sigma2 = [st[1] for st in stats]

    # third derivative from a global cubic with a jump, between the two side medians
    summaries = [s.cubic_sums(score_sd) for s in sides]
    if all(m is not None for m in summaries):
        # sides that hold only their nearest rows: the same least squares from summed normal equations
        coef, y_sd = _cubic_from_sums(summaries, lam)
    else:
        xs, ys, ts, ws = [], [], [], []
        for s in sides:
            rows = max(s.n // 2 + 1, min(s.n, 4))
            xs.append(s.sign * s.distance[:rows])
            ys.append(s.values[:rows] @ lam)
            ts.append(np.full(rows, 1.0 if s.sign > 0 else 0.0))
            ws.append(s.w(slice(0, rows)))
        x, y, t, w = (np.concatenate(v) for v in (xs, ys, ts, ws))
        xs = x / score_sd  # standardized score keeps the cubic well conditioned in any units
        design = np.column_stack([np.ones_like(xs), t, xs, xs ** 2, xs ** 3])
        sw = np.sqrt(w)
        coef = np.linalg.lstsq(design * sw[:, None], y * sw, rcond=None)[0]
        y_sd = float(np.sqrt(np.cov(y, aweights=w))) if len(y) > 1 else 1.0
    m3 = 6.0 * coef[4] / score_sd ** 3
    # (convention) IK floor the squared third derivative at 0.01; we apply it in standardized units
    # (score and outcome divided by their standard deviations) so the rule does not depend on units.
    to_std = score_sd ** 3 / y_sd if y_sd > 0 else 1.0
    m3_floor_sq = max((m3 * to_std) ** 2, 0.01) / to_std ** 2

    m2, reg = [], []
    for s, s2 in zip(sides, sigma2):
        h2 = 3.56 * (s2 / (f_hat * m3_floor_sq)) ** (1 / 7) * s.n ** (-1 / 7)
        h2 = _floor(s, min(h2, s.far), 3, "uniform")
        fit = fit_side(s, h2, h2, 2, 2, 2, "uniform", direct=True)
        m2.append(float(fit.derivative(2) @ lam))
        n2 = s.count_positive(h2, "uniform")
        reg.append(720.0 * s2 / (n2 * h2 ** 4))
    denom = f_hat * ((m2[1] - m2[0]) ** 2 + reg[0] + reg[1])
    h = ik_constant(kernel) * ((sigma2[0] + sigma2[1]) / denom) ** 0.2 * n ** (-0.2)
    top = max(below.far, above.far)
    h = max(min(h, top), *(_floor(s, 0.0, 3, kernel) for s in sides))
    return float(h), warnings
