"""Each bandwidth rule pinned by a hand computation of its plug-in formula on one fixed data set.

Every intermediate constant (kernel constants by scipy.integrate.quad, the spread of the score,
pilot polynomials by numpy least squares, neighbour variances by brute force) is computed inside
this file; only the final bandwidths come from seamline. One test function per rule, each with
its formula written out, so that a deliberate change of one rule is one small visible edit here.

Rules as currently implemented (default fit: local linear p = 1, bias degree q = 2, nu = 0,
triangular kernel, neighbour variance):
- variance pilot c = C_NR(K) min(sd, IQR/1.349) n^(-1/5), C_NR(K) = (8 sqrt(pi) R(K) / (3 mu_2(K)^2))^(1/5)
  (Silverman 1986's normal-reference constant; a convention for the pilot);
- curvature pilot: a degree-(q+1) polynomial fitted by least squares to the nearer half of each side;
- pilot_bandwidth="two-step": the curvature from an order-(q+1) local fit at its own MSE bandwidth
  (from a global order-(q+2) polynomial), plus a regulariser (test_two_step_pilot_rule);
- pilot (bias) bandwidth b: MSE-optimal for the (p+1)-th derivative with a degree-q fit
  (Calonico, Cattaneo & Titiunik 2014, Econometrica 82(6), section 3 structure);
- h: the MSE-optimal plug-in with the regulariser R = lead^2 Var(curvature) and one refinement;
- coverage: h_MSE n^(-p/((2p+3)(p+3))) (Calonico, Cattaneo & Farrell 2020, rule of thumb);
- ik: Imbens & Kalyanaraman (2012, Review of Economic Studies 79(3)) steps with the constants
  1.84 (computed here), 3.56, 720 and C_K (computed here; IK report 3.4375 for the edge kernel,
  from memory).
Tolerance: 1e-9 relative (round-off only).

The data set is invented by the seeded generator below (test input only).
"""
from __future__ import annotations

from math import ceil, factorial, pi, sqrt

import numpy as np
import pandas as pd
import pytest
from scipy import integrate

import seamline
from _first_principles import kernel, neighbor_residuals

RTOL_EXACT = 1e-9
P, Q, NU = 1, 2, 0


def make_data(seed: int = 314, n: int = 900) -> pd.DataFrame:
    """Invented: different curvature on the two sides, heteroskedastic noise, continuous score."""
    rng = np.random.default_rng(seed)
    x = 2.0 * rng.beta(1.6, 1.9, n) - 1.0
    y = np.where(x >= 0, 0.9 + 0.4 * x - 2.2 * x ** 2 + 1.2 * x ** 3, 0.3 + 1.1 * x + 0.8 * x ** 2)
    return pd.DataFrame({"x": x, "y": y + rng.normal(0.0, 0.25 + 0.1 * x, n)})


class Side:
    """One side's signed distances and outcome, with brute-force neighbour variances."""

    def __init__(self, x: np.ndarray, y: np.ndarray):
        order = np.argsort(np.abs(x))
        self.x, self.y = x[order], y[order]
        self.d = np.abs(self.x)
        self.sigma2 = neighbor_residuals(self.x, self.y)[:, 0] ** 2

    def fit(self, t: float, degree: int, order: int, kern: str = "triangular"):
        """(linear weights of the order-th derivative estimate, lead = [Gamma^-1 theta]_order) at t,
        in the scaled basis u = x / t used by the plug-in constants."""
        u = self.x / t
        k = kernel(np.abs(u), kern)
        basis = np.vander(u, degree + 1, increasing=True)
        gamma = basis.T @ (basis * k[:, None])
        theta = basis.T @ (k * u ** (degree + 1))
        weights = factorial(order) / t ** order * np.linalg.solve(gamma, basis.T * k)[order]
        return weights, float(np.linalg.solve(gamma, theta)[order])

    def variance(self, weights: np.ndarray) -> float:
        return float(np.sum(weights ** 2 * self.sigma2))


@pytest.fixture(scope="module")
def case():
    frame = make_data()
    x, y = frame.x.to_numpy(), frame.y.to_numpy()
    below, above = Side(x[x < 0], y[x < 0]), Side(x[x >= 0], y[x >= 0])
    design = seamline.Design(frame, score="x", cutoff=0.0, outcome="y")
    return frame, (below, above), design


def normalised(kern: str):
    area = integrate.quad(lambda u: kernel(np.abs(np.array(u)), kern), -1, 1)[0]
    return lambda u: float(kernel(np.abs(np.array(u)), kern)) / area


def normal_reference_constant(kern: str) -> float:
    """(8 sqrt(pi) R(K) / (3 mu_2(K)^2))^(1/5) for the normalised kernel (Silverman 1986)."""
    k = normalised(kern)
    r_k = integrate.quad(lambda u: k(u) ** 2, -1, 1)[0]
    mu2 = integrate.quad(lambda u: u * u * k(u), -1, 1)[0]
    return (8.0 * sqrt(pi) * r_k / (3.0 * mu2 ** 2)) ** 0.2


def variance_pilot(frame: pd.DataFrame) -> float:
    x = frame.x.to_numpy()
    sd = np.std(x, ddof=1)
    iqr = np.percentile(x, 75) - np.percentile(x, 25)
    return normal_reference_constant("triangular") * min(sd, iqr / 1.349) * len(x) ** -0.2


def curvature_pilot(side: Side, order: int) -> float:
    """order-th derivative at the cutoff of a degree-`order` polynomial on the nearer half of the side."""
    rows = ceil(0.5 * len(side.x))
    coef = np.linalg.lstsq(np.vander(side.x[:rows], order + 1, increasing=True), side.y[:rows], rcond=None)[0]
    return factorial(order) * coef[order]


def h_from_pilot(sides, n: int, b: tuple[float, float], c: float, common: bool) -> tuple[float, ...]:
    """The MSE-optimal h given the pilot b: two passes of
    h = [ (1+2nu)/(2(p+1-nu)) V / (B^2 + R) ]^(1/(2p+3)) n^(-1/(2p+3)),
    V = n h^(1+2nu) Var(mu_p), B = nu!/(p+1)! lead m_{p+1}, R = (nu!/(p+1)! lead)^2 Var(m_{p+1}),
    m_{p+1} the degree-q estimate of the (p+1)-th derivative at b; started at the variance pilot c."""
    const = (1 + 2 * NU) / (2 * (P + 1 - NU))
    curv = []
    for side, bs in zip(sides, b):
        wts, _ = side.fit(bs, Q, P + 1)
        curv.append((float(wts @ side.y), side.variance(wts)))

    def pieces(side, h, m):
        wts, lead = side.fit(h, P, NU)
        lead *= factorial(NU) / factorial(P + 1)
        return n * h ** (1 + 2 * NU) * side.variance(wts), lead * m[0], lead ** 2 * m[1]

    if common:
        h = c
        for _ in range(2):
            (v0, b0, r0), (v1, b1, r1) = (pieces(s, h, m) for s, m in zip(sides, curv))
            h = (const * (v0 + v1) / ((b1 - b0) ** 2 + r0 + r1)) ** (1 / (2 * P + 3)) * n ** (-1 / (2 * P + 3))
        return (h, h)
    out = []
    for side, m in zip(sides, curv):
        h = c
        for _ in range(2):
            v, bias, reg = pieces(side, h, m)
            h = (const * v / (bias ** 2 + reg)) ** (1 / (2 * P + 3)) * n ** (-1 / (2 * P + 3))
        out.append(h)
    return tuple(out)


def test_variance_pilot_constant():
    """Hand algebra: triangular R(K) = 2/3, mu_2 = 1/6, so C_NR = (8 sqrt(pi) (2/3) 36 / 3)^(1/5)
    = (64 sqrt(pi))^(1/5); uniform K = 1/2 gives (12 sqrt(pi))^(1/5)."""
    assert normal_reference_constant("triangular") == pytest.approx((64.0 * sqrt(pi)) ** 0.2, rel=1e-10)
    assert normal_reference_constant("uniform") == pytest.approx((12.0 * sqrt(pi)) ** 0.2, rel=1e-10)
    assert normal_reference_constant("uniform") == pytest.approx(1.84, abs=0.005)  # IK 2012's 1.84


def test_pilot_bandwidth_rule(case):
    """b = [ (2p+3) V_b / (2 (q-p) B_b^2) ]^(1/(2q+3)) n^(-1/(2q+3)), common (sums of V, difference of
    B) and per side, with V_b = n c^(2p+3) Var(m_{p+1} at c) and
    B_b = (p+1)!/(q+1)! [Gamma_q^-1 theta_q]_{p+1} mu^(q+1), mu^(q+1) from the curvature pilot."""
    frame, sides, design = case
    n = len(frame)
    c = variance_pilot(frame)
    v_b, bias_b = [], []
    for side in sides:
        wts, lead = side.fit(c, Q, P + 1)
        v_b.append(n * c ** (1 + 2 * (P + 1)) * side.variance(wts))
        bias_b.append(factorial(P + 1) / factorial(Q + 1) * lead * curvature_pilot(side, Q + 1))
    expo = 1.0 / (2 * Q + 3)
    b_common = ((3 + 2 * P) * sum(v_b) / (2 * (Q - P) * (bias_b[1] - bias_b[0]) ** 2)) ** expo * n ** -expo
    b_split = [((3 + 2 * P) * v / (2 * (Q - P) * bb ** 2)) ** expo * n ** -expo for v, bb in zip(v_b, bias_b)]
    got = design.fit().pilot_bandwidth
    assert got[0] == got[1]
    assert got[0] == pytest.approx(b_common, rel=RTOL_EXACT)
    got_split = design.fit(bandwidth="mse-split").pilot_bandwidth
    assert got_split == pytest.approx(tuple(b_split), rel=RTOL_EXACT)
    assert max(b_split) < min(s.d[-1] for s in sides)  # no cap or floor was active: the formula decided


def test_two_step_pilot_rule(case):
    """pilot_bandwidth="two-step" (Calonico, Cattaneo & Titiunik 2014, Econometrica 82(6); step order
    from memory, METHODS-II 26.2), with r = q + 1:
    (1) mu^(r+1) per side from a degree-(r+1) polynomial fitted by least squares to the whole side;
    (2) d = [ (2r+1) V_d / (2 B_d^2) ]^(1/(2r+3)) n^(-1/(2r+3)), V_d = n c^(2r+1) (Var_- + Var_+) of the
        degree-r estimate of mu^(r) at the variance pilot c, B_d = r!/(r+1)! (lead_+ mu_+ - lead_- mu_-);
    (3) mu^(r) and its variance from the degree-r fit at d on each side;
    (4) b = [ (2p+3) V_b / (2 (q-p) (B_b^2 + R_b)) ]^(1/(2q+3)) n^(-1/(2q+3)) as in the default rule,
        with the regulariser R_b = sum over sides of ((p+1)!/(q+1)! lead_b)^2 Var(mu^(r))."""
    frame, sides, design = case
    n = len(frame)
    c = variance_pilot(frame)
    r = Q + 1
    far = []
    for side in sides:
        coef = np.linalg.lstsq(np.vander(side.x, r + 2, increasing=True), side.y, rcond=None)[0]
        far.append(factorial(r + 1) * coef[r + 1])
    v_d, bias_d = 0.0, []
    for side, m in zip(sides, far):
        wts, lead = side.fit(c, r, r)
        v_d += n * c ** (2 * r + 1) * side.variance(wts)
        bias_d.append(factorial(r) / factorial(r + 1) * lead * m)
    expo_d = 1.0 / (2 * r + 3)
    d = ((2 * r + 1) * v_d / (2 * (bias_d[1] - bias_d[0]) ** 2)) ** expo_d * n ** -expo_d
    curv = []
    for side in sides:
        wts, _ = side.fit(d, r, r)
        curv.append((float(wts @ side.y), side.variance(wts)))
    v_b, bias_b, reg_b = 0.0, [], 0.0
    for side, (m, var_m) in zip(sides, curv):
        wts, lead = side.fit(c, Q, P + 1)
        v_b += n * c ** (1 + 2 * (P + 1)) * side.variance(wts)
        scale = factorial(P + 1) / factorial(Q + 1) * lead
        bias_b.append(scale * m)
        reg_b += scale ** 2 * var_m
    expo = 1.0 / (2 * Q + 3)
    b = ((3 + 2 * P) * v_b / (2 * (Q - P) * ((bias_b[1] - bias_b[0]) ** 2 + reg_b))) ** expo * n ** -expo
    fit = design.fit(pilot_bandwidth="two-step")
    assert fit.pilot_bandwidth == pytest.approx((b, b), rel=RTOL_EXACT)
    assert d < min(s.d[-1] for s in sides) and b < min(s.d[-1] for s in sides)  # no cap was active
    want = h_from_pilot(sides, n, fit.pilot_bandwidth, c, common=True)
    assert fit.bandwidth == pytest.approx(want, rel=RTOL_EXACT)  # h follows from this b as in the default
    assert b != pytest.approx(design.fit().pilot_bandwidth[0], rel=1e-3)  # really a different rule


def test_mse_rule(case):
    frame, sides, design = case
    fit = design.fit(bandwidth="mse")
    want = h_from_pilot(sides, len(frame), fit.pilot_bandwidth, variance_pilot(frame), common=True)
    assert fit.bandwidth == pytest.approx(want, rel=RTOL_EXACT)
    assert fit.bandwidth_rule == "mse"


def test_mse_split_rule(case):
    frame, sides, design = case
    fit = design.fit(bandwidth="mse-split")
    want = h_from_pilot(sides, len(frame), fit.pilot_bandwidth, variance_pilot(frame), common=False)
    assert fit.bandwidth == pytest.approx(want, rel=RTOL_EXACT)
    assert abs(want[0] - want[1]) > 0.01 * want[0]  # the two sides really differ on these data


def test_coverage_rule_is_mse_times_the_published_factor(case):
    """h_CE = h_MSE n^(-p/((2p+3)(p+3))) (Calonico, Cattaneo & Farrell 2020): for p = 1, n^(-1/20).
    The pilot bandwidth is the MSE rule's."""
    frame, _, design = case
    n = len(frame)
    mse, cov = design.fit(bandwidth="mse"), design.fit(bandwidth="coverage")
    factor = n ** (-1.0 / 20.0)
    assert cov.bandwidth[0] == pytest.approx(mse.bandwidth[0] * factor, rel=1e-14)
    assert cov.bandwidth[1] == pytest.approx(mse.bandwidth[1] * factor, rel=1e-14)
    assert cov.pilot_bandwidth == mse.pilot_bandwidth
    quad = seamline.Design(frame, score="x", cutoff=0.0, outcome="y")
    factor2 = n ** (-2.0 / (7.0 * 5.0))  # p = 2: n^(-2/35)
    assert quad.fit(bandwidth="coverage", degree=2).bandwidth[0] == pytest.approx(
        quad.fit(bandwidth="mse", degree=2).bandwidth[0] * factor2, rel=1e-14)


def test_mse_split_is_equal_on_mirrored_data():
    """Invariance: when the side below is the mirror image of the side above, so are the bandwidths."""
    rng = np.random.default_rng(77)
    d = rng.uniform(0.001, 1.0, 400)
    y = 0.5 + 0.3 * d - 1.4 * d ** 2 + rng.normal(0, 0.2, 400)
    frame = pd.DataFrame({"x": np.concatenate([-d, d]), "y": np.concatenate([y, y])})
    fit = seamline.Design(frame, score="x", cutoff=0.0, outcome="y").fit(bandwidth="mse-split")
    assert fit.bandwidth[0] == pytest.approx(fit.bandwidth[1], rel=1e-12)
    assert fit.pilot_bandwidth[0] == pytest.approx(fit.pilot_bandwidth[1], rel=1e-12)


def ik_constant(kern: str) -> float:
    """C_K = (C_2 / (4 C_1^2))^(1/5) with one-sided moments of the normalised kernel (IK 2012, section 4)."""
    k = normalised(kern)
    nu = [integrate.quad(lambda u: u ** j * k(u), 0, 1)[0] for j in range(4)]
    pi_ = [integrate.quad(lambda u: u ** j * k(u) ** 2, 0, 1)[0] for j in range(3)]
    den = nu[2] * nu[0] - nu[1] ** 2
    c1 = 0.5 * (nu[2] ** 2 - nu[1] * nu[3]) / den
    c2 = (nu[2] ** 2 * pi_[0] - 2 * nu[1] * nu[2] * pi_[1] + nu[1] ** 2 * pi_[2]) / den ** 2
    return (c2 / (4.0 * c1 ** 2)) ** 0.2


def test_ik_rule(case):
    """IK steps: h1 = 1.84 sd n^(-1/5); f and sigma^2 from the rows within h1; m3 from a global cubic
    with a jump between the side medians (squared value floored at 0.01 in standardised units);
    h2 = 3.56 (sigma^2 / (f m3^2))^(1/7) n_side^(-1/7); m2 from a quadratic within h2; regulariser
    720 sigma^2 / (n2 h2^4);
    h = C_K [(sigma_-^2 + sigma_+^2) / (f ((m2_+ - m2_-)^2 + r_- + r_+))]^(1/5) n^(-1/5)."""
    frame, sides, design = case
    n = len(frame)
    x = frame.x.to_numpy()
    sd = np.std(x, ddof=1)
    h1 = normal_reference_constant("uniform") * sd * n ** -0.2
    inside = [s.d <= h1 for s in sides]
    sigma2 = [float(np.var(s.y[k], ddof=1)) for s, k in zip(sides, inside)]
    f_hat = sum(k.sum() for k in inside) / (2.0 * n * h1)
    near = [slice(0, len(s.x) // 2 + 1) for s in sides]
    xs = np.concatenate([s.x[r] for s, r in zip(sides, near)]) / sd
    ys = np.concatenate([s.y[r] for s, r in zip(sides, near)])
    jump = np.concatenate([np.zeros(near[0].stop), np.ones(near[1].stop)])
    coef = np.linalg.lstsq(np.column_stack([np.ones_like(xs), jump, xs, xs ** 2, xs ** 3]), ys, rcond=None)[0]
    m3 = 6.0 * coef[4] / sd ** 3
    to_std = sd ** 3 / np.std(ys, ddof=1)
    m3_sq = max((m3 * to_std) ** 2, 0.01) / to_std ** 2
    m2, reg = [], []
    for s, s2 in zip(sides, sigma2):
        h2 = 3.56 * (s2 / (f_hat * m3_sq)) ** (1 / 7) * len(s.x) ** (-1 / 7)
        k = s.d <= h2
        quad = np.linalg.lstsq(np.vander(s.x[k], 3, increasing=True), s.y[k], rcond=None)[0]
        m2.append(2.0 * quad[2])
        reg.append(720.0 * s2 / (k.sum() * h2 ** 4))
    want = ik_constant("triangular") * ((sigma2[0] + sigma2[1])
                                        / (f_hat * ((m2[1] - m2[0]) ** 2 + reg[0] + reg[1]))) ** 0.2 * n ** -0.2
    assert ik_constant("triangular") == pytest.approx(3.4375, abs=5e-5)  # IK 2012 (from memory)
    fit = design.fit(bandwidth="ik")
    assert fit.bandwidth == pytest.approx((want, want), rel=RTOL_EXACT)
