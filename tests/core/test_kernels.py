"""Kernel constants against the values derived and num-checked in METHODS.md (sections 1.3, 1.4, 3.1, 3.5)."""
import pytest

from seamline.core.bandwidth import coverage_factor
from seamline.core.kernels import boundary_constants, ik_constant, normal_reference_constant, one_sided_moments

TOL = 1e-5  # METHODS tables print 6 decimals


@pytest.mark.parametrize("kernel, p, nu, r_star, mu_star, const", [
    # METHODS 1.4 table (derived + num-checked)
    ("triangular", 0, 0, 1.333333, 0.333333, 1.817121),
    ("triangular", 1, 0, 4.800000, -0.100000, 3.437544),
    ("triangular", 2, 0, 10.285714, 0.028571, 4.976588),
    ("triangular", 1, 1, 19.200000, 0.800000, 2.825235),
    ("triangular", 2, 1, 274.285714, -0.428571, 4.549163),
    ("triangular", 3, 1, 1600.000000, 0.190476, 6.156226),
    ("uniform", 1, 0, 4.000000, -0.166667, 2.701920),
    ("uniform", 2, 0, 9.000000, 0.050000, 4.161095),
    ("uniform", 2, 1, 192.000000, -0.600000, 3.926918),
    ("epanechnikov", 1, 0, 4.497982, -0.115789, 3.199896),
    ("epanechnikov", 2, 0, 9.816468, 0.033482, 4.724483),
    ("epanechnikov", 2, 1, 246.349206, -0.464286, 4.378596),
])
def test_boundary_constants_match_methods_table(kernel, p, nu, r_star, mu_star, const):
    got = boundary_constants(kernel, p, nu)
    assert got == pytest.approx((r_star, mu_star, const), rel=TOL, abs=1e-6)


@pytest.mark.parametrize("kernel, ck, nr", [
    ("triangular", 3.437544, 2.5760), ("uniform", 2.701920, 1.8431), ("epanechnikov", 3.199896, 2.3449)])
def test_ik_and_normal_reference_constants(kernel, ck, nr):
    # METHODS appendix A1 and A3 (derived + num-checked; IK 2012 report 3.4375 for the edge kernel)
    assert ik_constant(kernel) == pytest.approx(ck, rel=TOL)
    assert normal_reference_constant(kernel) == pytest.approx(nr, rel=1e-4)


def test_one_sided_moments_triangular():
    # METHODS 1.4: nu_j = 1/2, 1/6, 1/12, 1/20 and pi_j = 1/3, 1/12, 1/30 for the triangular kernel
    nu, pi = one_sided_moments("triangular", 3)
    assert nu[:4] == pytest.approx([1 / 2, 1 / 6, 1 / 12, 1 / 20])
    assert pi[:3] == pytest.approx([1 / 3, 1 / 12, 1 / 30])


def test_oracle_bandwidth_lee_designs():
    # METHODS 3.5 / 14.2: C_K [ (s+^2 + s-^2) / (f (m2+ - m2-)^2) ]^(1/5) n^(-1/5) with the true constants
    sigma2, f0, n = 0.1295 ** 2, 0.625, 500
    for m2_minus, m2_plus, expected in ((14.36, -6.00, 0.1655), (6.56, -109.62, 0.0825), (-7.18, -0.60, 0.2601)):
        h = ik_constant("triangular") * (2 * sigma2 / (f0 * (m2_plus - m2_minus) ** 2)) ** 0.2 * n ** -0.2
        assert h == pytest.approx(expected, abs=5e-5)


def test_coverage_rescaling_factor():
    # METHODS 5 (derived + num-checked): 500^(-1/20) = 0.732911; p = 2: 500^(-2/35) = 0.7011
    assert coverage_factor(500, 1) == pytest.approx(0.732911, abs=1e-6)
    assert coverage_factor(500, 2) == pytest.approx(0.7011, abs=1e-4)
    assert coverage_factor(5000, 3) == pytest.approx(0.6230, abs=1e-4)
