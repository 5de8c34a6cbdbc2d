"""Kernel constants against in-test numerical integration (scipy.integrate.quad) and hand algebra."""
from math import factorial, pi, sqrt

import numpy as np
import pytest
from scipy import integrate, stats

from seamline.core.bandwidth import coverage_factor
from seamline.core.kernels import boundary_constants, ik_constant, normal_reference_constant, one_sided_moments

RTOL_QUAD = 1e-9  # quad on polynomials on [0, 1] is accurate to round-off

KERNELS = {"triangular": lambda u: 1.0 - u, "uniform": lambda u: 1.0, "epanechnikov": lambda u: 1.0 - u * u}


def _normalised(name):
    area = 2.0 * integrate.quad(KERNELS[name], 0, 1)[0]
    return lambda u: KERNELS[name](u) / area


def _quad_boundary_constants(name, p, nu):
    """Equivalent boundary kernel K*(u) = e_nu' Gamma^-1 r_p(u) K(u) on [0, 1] (Fan & Gijbels 1996),
    R* = int K*^2, mu* = int u^(p+1) K*, C = [(2nu+1) (p+1)!^2 R* / (2 (p+1-nu) mu*^2)]^(1/(2p+3))."""
    k = _normalised(name)
    gamma = np.array([[integrate.quad(lambda u: u ** (i + j) * k(u), 0, 1)[0] for j in range(p + 1)]
                      for i in range(p + 1)])
    e = np.linalg.solve(gamma, np.eye(p + 1)[nu])
    kstar = lambda u: float(np.polynomial.polynomial.polyval(u, e)) * k(u)
    r_star = integrate.quad(lambda u: kstar(u) ** 2, 0, 1)[0]
    mu_star = integrate.quad(lambda u: u ** (p + 1) * kstar(u), 0, 1)[0]
    const = ((2 * nu + 1) * factorial(p + 1) ** 2 * r_star / (2 * (p + 1 - nu) * mu_star ** 2)) ** (1 / (2 * p + 3))
    return r_star, mu_star, const


@pytest.mark.parametrize("name", list(KERNELS))
@pytest.mark.parametrize("p,nu", [(0, 0), (1, 0), (2, 0), (1, 1), (2, 1), (3, 1)])
def test_boundary_constants_against_quad(name, p, nu):
    # Reference: scipy.integrate.quad of the equivalent boundary kernel (in-test computation)
    assert boundary_constants(name, p, nu) == pytest.approx(_quad_boundary_constants(name, p, nu), rel=RTOL_QUAD)


def test_boundary_constant_published_value():
    # Imbens & Kalyanaraman (2012) report C_K = 3.4375 for the edge (triangular) kernel, local linear (from memory)
    assert boundary_constants("triangular", 1, 0)[2] == pytest.approx(3.4375, abs=1e-4)
    assert ik_constant("triangular") == pytest.approx(3.4375, abs=1e-4)


@pytest.mark.parametrize("name", list(KERNELS))
def test_ik_constant_is_the_local_linear_boundary_constant(name):
    """C_K of IK 2012 is the one-sided MSE constant of the local linear fit (same formula, p = 1, nu = 0)."""
    assert ik_constant(name) == pytest.approx(_quad_boundary_constants(name, 1, 0)[2], rel=RTOL_QUAD)


def test_normal_reference_constants_by_hand():
    # (8 sqrt(pi) R(K) / (3 mu_2^2))^(1/5) (Silverman 1986) with, by hand, triangular R = 2/3,
    # mu_2 = 1/6; uniform K = 1/2: R = 1/2, mu_2 = 1/3; Epanechnikov K = 3/4 (1 - u^2): R = 3/5, mu_2 = 1/5.
    assert normal_reference_constant("triangular") == pytest.approx((64 * sqrt(pi)) ** 0.2, rel=1e-12)
    assert normal_reference_constant("uniform") == pytest.approx((12 * sqrt(pi)) ** 0.2, rel=1e-12)
    assert normal_reference_constant("epanechnikov") == pytest.approx((40 * sqrt(pi)) ** 0.2, rel=1e-12)


def test_one_sided_moments_triangular():
    # Beta integrals by hand: int_0^1 u^j (1-u) du = 1/((j+1)(j+2)), int_0^1 u^j (1-u)^2 du = 2/((j+1)(j+2)(j+3))
    nu, pi_ = one_sided_moments("triangular", 3)
    assert nu[:4] == pytest.approx([1 / ((j + 1) * (j + 2)) for j in range(4)], rel=1e-12)
    assert pi_[:3] == pytest.approx([2 / ((j + 1) * (j + 2) * (j + 3)) for j in range(3)], rel=1e-12)


def test_oracle_bandwidth_lee_designs():
    """Population MSE-optimal h = C_K [2 sigma^2 / (f(0) (m2+ - m2-)^2)]^(1/5) n^(-1/5) (IK 2012) on
    CCT 2014's Models 1-3 (coefficients from memory): m2 = 2 x the x^2 coefficient of each side,
    f(0) the density of 2 Beta(2, 4) - 1 at 0 (scipy.stats.beta), sigma = 0.1295. The rounded values
    0.1655, 0.0825, 0.2601 are the population bandwidths used by the Monte Carlo tests."""
    sigma2, n = 0.1295 ** 2, 500
    f0 = stats.beta.pdf(0.5, 2, 4) / 2
    assert f0 == pytest.approx(0.625, rel=1e-12)
    c_k = _quad_boundary_constants("triangular", 1, 0)[2]
    for a2_minus, a2_plus, expected in ((7.18, -3.00, 0.1655), (3.28, -54.81, 0.0825),
                                        (-0.5 * 7.18, -0.1 * 3.00, 0.2601)):
        h = c_k * (2 * sigma2 / (f0 * (2 * a2_plus - 2 * a2_minus) ** 2)) ** 0.2 * n ** -0.2
        assert h == pytest.approx(expected, abs=5e-5)


@pytest.mark.parametrize("n,p", [(500, 1), (500, 2), (5000, 3)])
def test_coverage_rescaling_factor(n, p):
    # Calonico, Cattaneo & Farrell (2020) rule of thumb: n^(-p / ((2p+3)(p+3))) (from memory)
    assert coverage_factor(n, p) == pytest.approx(n ** (-p / ((2 * p + 3) * (p + 3))), rel=1e-14)
