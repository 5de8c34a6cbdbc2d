"""Facts of the trade (common practice) and the bias-correction identity, checked live.

- A uniform kernel gives every row inside the bandwidth equal weight, so the local estimate is OLS
  on that subset (common practice; reference: statsmodels OLS, textbook basis [x^j, T, T x^j]).
- A bandwidth covering all the data turns the local fit into the global polynomial regression with
  a jump (common practice; reference: statsmodels formula OLS on all rows).
- Bias correction with pilot bandwidth b = h and bias degree p + 1 equals the conventional
  degree-(p + 1) estimate at h (Calonico, Cattaneo & Titiunik 2014, Econometrica 82(6), remark on
  b = h). The general b != h case is checked against the two-step definition of the same paper
  (section 2), each step a statsmodels WLS in the raw basis, and against exactness on a degree-(p+1)
  curve.
Tolerance: RTOL = 1e-8 relative (declared in _references).

Input data are invented by the seeded generator in test_statsmodels_wls.
"""
from __future__ import annotations

import numpy as np
import pytest
import statsmodels.formula.api as smf

from _references import (
    HC_TYPES,
    KERNELS,
    assert_close,
    bias_corrected_reference,
    ols_subset_reference,
    wls_reference,
)
from test_statsmodels_wls import make_data

import seamline


def _design(frame, cutoff, treated):
    return seamline.Design(frame, score="score", cutoff=cutoff, outcome="y", treated=treated)


# (data set, bandwidth, treated)
UNIFORM_CASES = [
    ("smooth", 0.4, "above"),
    ("skewed", (3.0, 6.0), "below"),
    ("discrete", (10.0, 7.0), "above"),  # integer h: rows at |x| == h are inside (inclusive support)
]


@pytest.mark.parametrize("variance", HC_TYPES)
@pytest.mark.parametrize("degree", [0, 1, 2, 3])
@pytest.mark.parametrize("name,bandwidth,treated", UNIFORM_CASES)
def test_uniform_kernel_is_ols_on_the_window(name, bandwidth, treated, degree, variance):
    frame, cutoff = make_data(name)
    fit = _design(frame, cutoff, treated).fit(bandwidth=bandwidth, kernel="uniform", degree=degree,
                                              variance=variance)
    ref = ols_subset_reference(frame["score"].to_numpy(), frame["y"].to_numpy(), cutoff, bandwidth,
                               degree=degree, treated=treated, cov_type=variance)
    what = f"uniform=OLS {name}/p={degree}/{variance}"
    assert_close(fit.estimate, ref.estimate, scale=ref.std_error, what=f"{what} estimate")
    assert_close(fit.std_error, ref.std_error, what=f"{what} std_error")
    for got, exp, se in zip(fit.limits, ref.limits, ref.limit_std_errors):
        assert_close(got, exp, scale=se, what=f"{what} limit")
    assert tuple(fit.n_used) == ref.n_used


@pytest.mark.parametrize("variance", ["hc0", "hc3"])
@pytest.mark.parametrize("degree", [0, 1, 2, 3])
@pytest.mark.parametrize("edge", ["exact", "wide"])
@pytest.mark.parametrize("name", ["smooth", "skewed"])
def test_bandwidth_covering_all_data_is_global_polynomial(name, edge, degree, variance):
    frame, cutoff = make_data(name)
    x = frame["score"].to_numpy() - cutoff
    # "exact": each side's bandwidth is its farthest row (inclusive support keeps it);
    # "wide": twice as large, clearly covering everything.
    reach = (float(-x[x < 0].min()), float(x[x >= 0].max()))
    bandwidth = reach if edge == "exact" else (2 * reach[0], 2 * reach[1])
    fit = _design(frame, cutoff, "above").fit(bandwidth=bandwidth, kernel="uniform", degree=degree,
                                              variance=variance)
    data = frame.assign(x=x, T=(x >= 0).astype(float))
    terms = " + ".join(f"I(x**{j})" for j in range(1, degree + 1))
    formula = f"y ~ ({terms}) * T" if degree else "y ~ T"  # intercept implicit: y ~ T + x^j + T:x^j
    glob = smf.ols(formula, data=data).fit(cov_type=variance.upper())
    what = f"global {name}/{edge}/p={degree}/{variance}"
    assert_close(fit.estimate, glob.params["T"], scale=glob.bse["T"], what=f"{what} estimate")
    assert_close(fit.std_error, glob.bse["T"], what=f"{what} std_error")
    assert sum(fit.n_used) == len(frame)


@pytest.mark.parametrize("kernel", KERNELS)
@pytest.mark.parametrize("degree", [0, 1, 2])
@pytest.mark.parametrize("name,bandwidth,treated", [("smooth", 0.5, "above"),
                                                    ("skewed", (4.0, 7.0), "below")])
def test_bias_correction_with_equal_pilot_is_next_degree(name, bandwidth, treated, kernel, degree):
    """CCT 2014: tau_bc(h, b = h, q = p + 1) = tau_{p+1}(h); with the same residual-variance
    construction the robust SE equals the conventional SE of the degree-(p + 1) fit. That holds for
    HC0 (omega_i = residual^2 of the order-q fit at b, which IS the degree-(p + 1) fit at h) and for
    the neighbour variance (sigma_i^2 does not depend on any fit)."""
    frame, cutoff = make_data(name)
    design = _design(frame, cutoff, treated)
    for variance in ("hc0", "neighbors"):
        bc = design.fit(bandwidth=bandwidth, pilot_bandwidth=bandwidth, kernel=kernel, degree=degree,
                        variance=variance)
        nxt = design.fit(bandwidth=bandwidth, kernel=kernel, degree=degree + 1, variance=variance)
        what = f"bc=next-degree {name}/{kernel}/p={degree}/{variance}"
        assert bc.bias_degree == degree + 1
        assert_close(bc.bias_corrected_estimate, nxt.estimate, scale=nxt.std_error, what=f"{what} estimate")
        assert_close(bc.robust_std_error, nxt.std_error, what=f"{what} robust_std_error")
    # and against the outside reference: statsmodels WLS of degree p + 1
    ref = wls_reference(frame["score"].to_numpy(), frame["y"].to_numpy(), cutoff, bandwidth,
                        kernel=kernel, degree=degree + 1, treated=treated, cov_type="hc0")
    bc = design.fit(bandwidth=bandwidth, pilot_bandwidth=bandwidth, kernel=kernel, degree=degree,
                    variance="hc0")
    assert_close(bc.bias_corrected_estimate, ref.estimate, scale=ref.std_error,
                 what=f"bc vs statsmodels p+1 {name}/{kernel}/p={degree}")
    assert_close(bc.robust_std_error, ref.std_error, what=f"bc SE vs statsmodels p+1 HC0 {name}/{kernel}/p={degree}")


class TestBiasCorrectionReferenceItself:
    """The two-step reference reproduces the b = h identity (CCT 2014) with statsmodels only, and is
    exact on degree-(p+1) curves at b != h (first principles)."""

    @pytest.mark.parametrize("kernel", KERNELS)
    @pytest.mark.parametrize("degree", [0, 1, 2])
    def test_identity(self, kernel, degree):
        frame, cutoff = make_data("smooth")
        s, y = frame["score"].to_numpy(), frame["y"].to_numpy()
        bc = bias_corrected_reference(s, y, cutoff, 0.5, 0.5, kernel=kernel, degree=degree)
        nxt = wls_reference(s, y, cutoff, 0.5, kernel=kernel, degree=degree + 1)
        assert bc == pytest.approx(nxt.estimate, rel=1e-10)

    @pytest.mark.parametrize("kernel", KERNELS)
    @pytest.mark.parametrize("h,b", [(0.3, 0.75), (0.8, 0.45)])
    @pytest.mark.parametrize("degree", [0, 1, 2])
    def test_exact_for_a_degree_p_plus_one_curve_at_b_not_h(self, degree, h, b, kernel):
        """First principles at b != h: on a curve that is exactly a polynomial of degree p + 1 on each
        side, the order-q fit at any b recovers the x^(p+1) coefficient, so the two-step estimate is
        the true jump (and the conventional one is not)."""
        frame, cutoff = make_data("smooth")
        s = frame["score"].to_numpy()
        x = s - cutoff
        above = np.polynomial.polynomial.polyval(x, [1.0, 0.5, -2.0, 1.5][: degree + 2])
        below = np.polynomial.polynomial.polyval(x, [0.2, -0.3, 3.0, -1.0][: degree + 2])
        curve = np.where(x >= 0, above, below)
        bc = bias_corrected_reference(s, curve, cutoff, h, b, kernel=kernel, degree=degree)
        assert bc == pytest.approx(0.8, abs=1e-9)
        conventional = wls_reference(s, curve, cutoff, h, kernel=kernel, degree=degree).estimate
        assert abs(conventional - 0.8) > 1e-4

    def test_identity_derivative(self):
        frame, cutoff = make_data("smooth")
        s, y = frame["score"].to_numpy(), frame["y"].to_numpy()
        bc = bias_corrected_reference(s, y, cutoff, 0.6, 0.6, degree=2, derivative=1)
        nxt = wls_reference(s, y, cutoff, 0.6, degree=3, derivative=1)
        assert bc == pytest.approx(nxt.estimate, rel=1e-10)


@pytest.mark.parametrize("kernel", KERNELS)
@pytest.mark.parametrize(
    "name,degree,derivative,bandwidth,pilot,treated",
    [
        ("smooth", 1, 0, 0.35, 0.7, "above"),
        ("smooth", 0, 0, 0.3, 0.5, "above"),
        ("skewed", 1, 0, (3.0, 5.0), (6.0, 9.0), "below"),
        ("skewed", 2, 1, (4.0, 6.0), (7.0, 10.0), "above"),
    ],
)
def test_bias_corrected_estimate_two_step(name, degree, derivative, bandwidth, pilot, treated, kernel):
    """tau_bc for b != h equals the two-step construction of CCT 2014 (section 2), statsmodels WLS."""
    frame, cutoff = make_data(name)
    fit = _design(frame, cutoff, treated).fit(bandwidth=bandwidth, pilot_bandwidth=pilot, kernel=kernel,
                                              degree=degree, derivative=derivative, variance="hc0")
    ref = bias_corrected_reference(frame["score"].to_numpy(), frame["y"].to_numpy(), cutoff, bandwidth,
                                   pilot, kernel=kernel, degree=degree, treated=treated,
                                   derivative=derivative)
    assert_close(fit.bias_corrected_estimate, ref, scale=fit.robust_std_error,
                 what=f"two-step bc {name}/{kernel}/p={degree}/nu={derivative}")
    assert tuple(fit.pilot_bandwidth) == pytest.approx(np.broadcast_to(pilot, (2,)), rel=1e-15)
