"""The moment engine (O(log n) per bandwidth) against a direct pass over the window and statsmodels."""
import numpy as np
import pytest
import statsmodels.api as sm

from seamline.core.locpoly import fit_side, variance_fast, window_arrays
from seamline.core.moments import SideMoments
from seamline.core.side import Side

RTOL = 1e-8  # moment results agree with a direct weighted solve to 1e-8 (relative to the SE for levels)


@pytest.mark.parametrize("cov_type", ["HC0", "HC2", "HC3"])
def test_tiny_example_against_statsmodels(cov_type):
    """One side, triangular kernel, h = 1, five rows: the boundary value, slope, smoother weights,
    leverages and HC0/HC2/HC3 variances equal those of statsmodels
    WLS(y, [1, x], weights=1 - x).fit(cov_type=...) (the unscaled sandwich: HC0 has no factor); the
    leverages are statsmodels OLS(wendog, wexog).get_influence().hat_matrix_diag on the whitened rows."""
    x = np.array([0.1, 0.2, 0.3, 0.5, 0.8])
    y = np.array([1.0, 1.4, 1.1, 2.0, 2.3])
    ref = sm.WLS(y, np.column_stack([np.ones(5), x]), weights=1.0 - x).fit(cov_type=cov_type)
    side = Side(+1, x, y[:, None].copy())
    fit = fit_side(side, 1.0, 1.0, 1, 2, 0, "triangular")
    assert fit.estimate[0] == pytest.approx(ref.params[0], rel=1e-12)
    assert fit.beta_h[1, 0] == pytest.approx(ref.params[1], rel=1e-12)  # h = 1: u = x
    arrays = window_arrays(fit)
    # smoother weights: row 0 of (X'WX)^-1 X'W; leverages: the weighted hat diagonal (statsmodels)
    np.testing.assert_allclose(arrays.a, np.linalg.pinv(np.sqrt(1 - x)[:, None] * ref.model.exog)[0]
                               * np.sqrt(1 - x), rtol=1e-12)
    whitened = sm.OLS(ref.model.wendog, ref.model.wexog).fit()
    np.testing.assert_allclose(arrays.lev_h, whitened.get_influence().hat_matrix_diag, rtol=1e-10)
    e2 = arrays.resid_h[:, 0] ** 2
    power = {"HC0": 0, "HC2": 1, "HC3": 2}[cov_type]
    got = np.sum(arrays.a ** 2 * e2 / (1 - arrays.lev_h) ** power)
    assert got == pytest.approx(ref.cov_params()[0, 0], rel=1e-10)
    if cov_type == "HC0":
        assert variance_fast(fit, np.array([1.0]), "hc0", False) == pytest.approx(ref.cov_params()[0, 0], rel=1e-10)


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
        arrays = window_arrays(direct)
        nn = direct_side.nn_residuals()[: arrays.rows]
        # Levels carry the 1e6 offset: compare them on the scale of their own standard error (each
        # variable's neighbour SE), not relative to 1e6, which would allow errors of ~0.4 SE.
        se = np.sqrt(np.sum(arrays.a[:, None] ** 2 * nn ** 2, axis=0))
        se_bc = np.sqrt(np.sum(arrays.abc[:, None] ** 2 * nn ** 2, axis=0))
        assert np.all(np.abs(fast.estimate - direct.estimate) <= RTOL * se)
        assert np.all(np.abs(fast.estimate_bc - direct.estimate_bc) <= RTOL * se_bc)
        # the centred coefficients (offset removed) agree relative to their size as well
        np.testing.assert_allclose(fast.beta_h, direct.beta_h, rtol=RTOL, atol=RTOL * se.max())
        nn_lam = nn @ lam
        for robust, weights, resid in ((False, arrays.a, arrays.resid_h @ lam),
                                       (True, arrays.abc, arrays.resid_b @ lam)):
            assert variance_fast(fast, lam, "neighbors", robust) == pytest.approx(
                np.sum(weights ** 2 * nn_lam ** 2), rel=RTOL)
            if p <= 2:  # the engine sends HC variances with bias degree >= 4 to the direct path
                assert variance_fast(fast, lam, "hc0", robust) == pytest.approx(
                    np.sum(weights ** 2 * resid ** 2), rel=RTOL)
