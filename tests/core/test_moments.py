"""The moment engine (O(log n) per bandwidth) against a direct pass over the window, and METHODS 1.7/2.1."""
import numpy as np
import pytest

from seamline.core.locpoly import fit_side, variance_fast, window_arrays
from seamline.core.moments import SideMoments
from seamline.core.side import Side

RTOL = 1e-8  # issue 2: moment results agree with a direct weighted solve to 1e-8 relative


def test_methods_tiny_example():
    # METHODS 1.7 item 2 and 2.1 (num-checked): right side only, triangular, h = 1
    x = np.array([0.1, 0.2, 0.3, 0.5, 0.8])
    y = np.array([1.0, 1.4, 1.1, 2.0, 2.3])
    side = Side(+1, x, y[:, None].copy())
    fit = fit_side(side, 1.0, 1.0, 1, 2, 0, "triangular")
    assert fit.estimate[0] == pytest.approx(0.8231560892, abs=1e-10)
    assert fit.beta_h[1, 0] == pytest.approx(1.9519725557, abs=1e-10)
    arrays = window_arrays(fit)
    np.testing.assert_allclose(arrays.a, [0.694683, 0.418525, 0.192110, -0.111492, -0.193825], atol=1e-6)
    np.testing.assert_allclose(arrays.lev_h, [0.550600, 0.304174, 0.228130, 0.374500, 0.542596], atol=1e-6)
    e2 = arrays.resid_h[:, 0] ** 2
    assert np.sum(arrays.a ** 2 * e2) == pytest.approx(0.0105411345, abs=1e-10)
    assert np.sum(arrays.a ** 2 * e2 / (1 - arrays.lev_h)) == pytest.approx(0.0150621774, abs=1e-10)
    assert np.sum(arrays.a ** 2 * e2 / (1 - arrays.lev_h) ** 2) == pytest.approx(0.0218574922, abs=1e-10)
    assert variance_fast(fit, np.array([1.0]), "hc0", False) == pytest.approx(0.0105411345, abs=1e-10)


def test_window_sums_equal_numpy():
    rng = np.random.default_rng(1)
    d = np.sort(rng.exponential(size=3001))
    v = rng.normal(size=3001)
    mom = SideMoments(d, block=64)
    for t in (d[0] / 2, d[10], d[63], d[64], np.median(d), d[-1], 2 * d[-1]):
        got = mom.sums("v", lambda r: v[r], t, 6)
        inside = d <= t
        want = np.array([np.sum(v[inside] * (d[inside] / t) ** m) for m in range(7)])
        np.testing.assert_allclose(got, want, rtol=1e-11, atol=1e-11)


@pytest.mark.parametrize("kernel", ["triangular", "uniform", "epanechnikov"])
@pytest.mark.parametrize("p", [0, 1, 2, 3])
@pytest.mark.parametrize("sign", [-1, 1])
def test_fast_equals_direct(kernel, p, sign):
    rng = np.random.default_rng(10 * p + sign + 3)
    n = 2500
    d = np.sort(rng.uniform(0, 3, n))
    d[200:230] = d[200]  # a mass point
    values = np.c_[1e6 + np.sin(2 * d) + rng.normal(0, 0.3, n), (rng.uniform(size=n) < 0.4).astype(float)]
    w = rng.uniform(0.5, 2, n)
    lam = np.array([1.0, -0.7])
    fast_side = Side(sign, d, values.copy(), w)
    direct_side = Side(sign, d, values.copy(), w)
    for h, b in ((0.8, 1.3), (1.4, 0.9), (1.0, 1.0)):
        fast = fit_side(fast_side, h, b, p, p + 1, 0, kernel)
        direct = fit_side(direct_side, h, b, p, p + 1, 0, kernel, direct=True)
        np.testing.assert_allclose(fast.estimate, direct.estimate, rtol=RTOL)
        np.testing.assert_allclose(fast.estimate_bc, direct.estimate_bc, rtol=RTOL)
        arrays = window_arrays(direct)
        nn = direct_side.nn_residuals()[: arrays.rows] @ lam
        for robust, weights, resid in ((False, arrays.a, arrays.resid_h @ lam),
                                       (True, arrays.abc, arrays.resid_b @ lam)):
            assert variance_fast(fast, lam, "neighbors", robust) == pytest.approx(
                np.sum(weights ** 2 * nn ** 2), rel=RTOL)
            if p <= 2:  # the engine sends HC variances with bias degree >= 4 to the direct path
                assert variance_fast(fast, lam, "hc0", robust) == pytest.approx(
                    np.sum(weights ** 2 * resid ** 2), rel=RTOL)
