"""Binned means for cutoff plots (Calonico, Cattaneo & Titiunik 2015, JASA 110(512)).

Outside references used here, each named beside its check:
* pandas groupby / pd.cut / pd.qcut (bin membership and bin means),
* scipy.stats.sem and statsmodels WLS with HC1 standard errors (bin standard errors),
* scipy.integrate.quad with the Lee design (CCT 2014 Model 1, a published Monte Carlo design;
  coefficients from memory) for the population IMSE constants of CCT 2015.
"""
from __future__ import annotations

import dataclasses
import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import integrate, stats

from seamline.core.binning import (
    bin_constants,
    binned_means,
    imse_bins,
    imse_number,
    mimic_variance_bins,
    select_bin_number,
)
from seamline.errors import InvalidOptionError, InvalidWeightsError, OneSidedDataError

SIGMA = 0.1295   # error sd of the Lee design (CCT 2014 Model 1; from memory)
LEFT = (0.48, 1.27, 7.18, 20.21, 21.54, 7.33)     # Model 1, x < 0 (CCT 2014; from memory)
RIGHT = (0.52, 0.84, -3.00, 7.99, -9.01, 3.56)    # Model 1, x >= 0


def lee_model1(n, rng):
    """Lee design, Model 1 (CCT 2014 / IK 2012; from memory): X = 2 Beta(2, 4) - 1, c = 0."""
    x = 2 * rng.beta(2, 4, n) - 1
    mu = np.where(x < 0, np.polynomial.polynomial.polyval(x, LEFT),
                  np.polynomial.polynomial.polyval(x, RIGHT))
    return x, mu + SIGMA * rng.standard_normal(n)


# ---------------------------------------------------------------------------------------------
# Population constants by numerical integration (scipy.integrate.quad), CCT 2015's formulas
# ---------------------------------------------------------------------------------------------
def test_population_imse_numbers_lee_model1():
    # B_ES = (L^2/12) int mu'(x)^2 f_s(x) dx with f_s the density of X given the side, L = 1;
    # V_ES = sigma^2. Integrals by scipy.integrate.quad; X = 2 Beta(2, 4) - 1 via scipy.stats.beta.
    fx = lambda x: stats.beta.pdf((x + 1) / 2, 2, 4) / 2
    p_below = stats.beta.cdf(0.5, 2, 4)
    assert p_below == pytest.approx(0.8125)
    d_left = np.polynomial.polynomial.polyder(LEFT)
    d_right = np.polynomial.polynomial.polyder(RIGHT)
    b_left = integrate.quad(lambda x: np.polynomial.polynomial.polyval(x, d_left) ** 2 * fx(x) / p_below,
                            -1, 0)[0] / 12
    b_right = integrate.quad(lambda x: np.polynomial.polynomial.polyval(x, d_right) ** 2 * fx(x)
                             / (1 - p_below), 0, 1)[0] / 12
    v = SIGMA ** 2
    assert b_left == pytest.approx(0.03263, abs=1e-5)    # the quad value, recorded to pin the integral
    assert b_right == pytest.approx(0.01841, abs=1e-5)
    n_left, n_right = 500 * p_below, 500 * (1 - p_below)
    assert imse_number(b_left, v, n_left) == pytest.approx(11.650, abs=5e-3)
    assert imse_number(b_right, v, n_right) == pytest.approx(5.904, abs=5e-3)
    assert imse_bins(b_left, v, n_left) == 12      # ceil of 11.650 and 5.904 above: 12 left, 6 right
    assert imse_bins(b_right, v, n_right) == 6


def test_imse_number_minimises_the_imse():
    # J* minimises B/J^2 + J V/n (CCT 2015), checked by a fine grid search.
    b, v, n = 0.05, 0.02, 800
    grid = np.linspace(0.5, 60, 200001)
    imse = b / grid ** 2 + grid * v / n
    assert imse_number(b, v, n) == pytest.approx(grid[np.argmin(imse)], abs=1e-3)
    assert imse_bins(0.0, v, n) == 1


def test_mimic_variance_formula():
    # CCT 2015 mimicking-variance rule: ceil((Vbar / V_bins) n / log(n)^2); equal-count bins: ceil(n / log(n)^2).
    assert mimic_variance_bins(1.0, 1.0, 1000) == math.ceil(1000 / math.log(1000) ** 2)
    assert mimic_variance_bins(2.0, 1.0, 1000) == math.ceil(2000 / math.log(1000) ** 2)
    assert mimic_variance_bins(1.0, 1.0, 2) == 1
    rng = np.random.default_rng(1)
    x, y = lee_model1(3000, rng)
    sel = select_bin_number(x, y, 0.0, method="equal-count", rule="mimic-variance")
    n_b, n_a = int(np.sum(x < 0)), int(np.sum(x >= 0))
    assert sel.number == (math.ceil(n_b / math.log(n_b) ** 2), math.ceil(n_a / math.log(n_a) ** 2))


# ---------------------------------------------------------------------------------------------
# Spacings estimators against known constants
# ---------------------------------------------------------------------------------------------
def test_spacings_constants_uniform_design():
    # Hand computation: X ~ U[-1, 1], mu(x) = x. On each side f_s = 1 on a unit interval, so
    # B_QS = B_ES = 1/12 and V_QS = V_ES = sigma^2. Large n, so +-8 %.
    rng = np.random.default_rng(21)
    n, sigma = 100_000, 0.3
    x = rng.uniform(-1, 1, n)
    y = x + sigma * rng.standard_normal(n)
    for side in ("below", "above"):
        k = bin_constants(x, y, 0.0, side)
        assert k.pilot_degree == 4
        assert k.bias_equal_count == pytest.approx(1 / 12, rel=0.08)
        assert k.bias_equal_width == pytest.approx(1 / 12, rel=0.08)
        assert k.variance_equal_count == pytest.approx(sigma ** 2, rel=0.08)
        assert k.variance_equal_width == pytest.approx(sigma ** 2, rel=0.08)


def test_spacings_constants_lee_model1_left():
    # Sample B_ES below the cutoff approaches the population 0.03263 (quad, test above); the quartic
    # pilot cannot fit the quintic exactly, so +-10 %. V_ES -> sigma^2.
    rng = np.random.default_rng(5)
    x, y = lee_model1(200_000, rng)
    k = bin_constants(x, y, 0.0, "below")
    assert k.bias_equal_width == pytest.approx(0.03263, rel=0.10)
    assert k.variance_equal_width == pytest.approx(SIGMA ** 2, rel=0.05)


@pytest.mark.parametrize("method", ["equal-width", "equal-count"])
def test_imse_number_grows_at_rate_n_one_third(method):
    # CCT (2015): the IMSE-optimal number of bins is of order n^(1/3). Slope of log J on log n over
    # n = 1000 ... 64000 (same design, 3 draws each) must be 1/3 +- 0.07.
    rng = np.random.default_rng(2015)
    sizes = [1000, 4000, 16000, 64000]
    logs = []
    for n in sizes:
        js = []
        for _ in range(3):
            x = rng.uniform(-1, 1, n)
            y = np.sin(2 * x) + x ** 2 + 0.3 * rng.standard_normal(n)
            js.append(select_bin_number(x, y, 0.0, method=method).imse_number)
        logs.append(np.log(np.mean(js, axis=0)))
    slopes = np.polyfit(np.log(sizes), np.array(logs), 1)[0]
    assert np.all(np.abs(slopes - 1 / 3) < 0.07), slopes


# ---------------------------------------------------------------------------------------------
# Bins
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("rounding", [None, 1, 0])
def test_equal_count_bins_hold_equal_numbers(rounding):
    # Equal numbers +- 1 per side, also with heavy ties (scores rounded to 0.1 or to integers).
    rng = np.random.default_rng(3)
    x = rng.normal(0, 3, 2017)
    if rounding is not None:
        x = np.round(x, rounding)
    y = x + rng.standard_normal(x.size)
    res = binned_means(x, y, 0.25, method="equal-count", number=(13, 7))
    for side in ("below", "above"):
        counts = res.count[res.side == side]
        assert counts.max() - counts.min() <= 1
        on_side = (x < 0.25) if side == "below" else (x >= 0.25)
        assert counts.sum() == np.sum(on_side)
    # every observation lies inside its bin's edges; edges are ordered (ties may share an edge)
    row = res.assignment
    assert np.all(x >= res.left[row]) and np.all(x <= res.right[row])
    assert np.all(np.diff(np.concatenate([res.left, res.right[-1:]])) >= 0)


def test_bins_never_straddle_the_cutoff():
    rng = np.random.default_rng(4)
    x, y = lee_model1(3000, rng)
    for method in ("equal-width", "equal-count"):
        res = binned_means(x, y, 0.0, method=method)
        assert np.all(res.right[res.side == "below"] <= 0.0)
        assert np.all(res.left[res.side == "above"] >= 0.0)
        assert res.right[res.side == "below"][-1] == 0.0 and res.left[res.side == "above"][0] == 0.0
        below_rows = np.flatnonzero(res.side == "below")
        assert np.all(np.isin(res.assignment[x < 0], below_rows))
        assert not np.any(np.isin(res.assignment[x >= 0], below_rows))


def test_equal_width_means_match_pandas_groupby():
    # pandas: pd.cut on the reported edges ([left, right), last bin above closed) + groupby mean.
    rng = np.random.default_rng(6)
    x, y = lee_model1(4000, rng)
    res = binned_means(x, y, 0.0, method="equal-width", number=(15, 8))
    widths = res.right - res.left
    np.testing.assert_allclose(widths[res.side == "below"], widths[res.side == "below"][0], rtol=1e-9)
    np.testing.assert_allclose(widths[res.side == "above"], widths[res.side == "above"][0], rtol=1e-9)
    edges = np.append(res.left, res.right[-1])
    codes = pd.cut(x, edges, right=False, labels=False)
    codes = np.where(x == edges[-1], len(edges) - 2, codes)   # the top edge is closed
    frame = pd.DataFrame({"bin": codes, "y": y, "x": x})
    grouped = frame.groupby("bin").agg(mean=("y", "mean"), xm=("x", "mean"), n=("y", "size"),
                                       sem=("y", "sem"))
    rows = grouped.index.to_numpy().astype(int)
    np.testing.assert_array_equal(res.count[rows], grouped["n"])
    np.testing.assert_allclose(res.mean[rows], grouped["mean"], rtol=1e-12)
    np.testing.assert_allclose(res.score_mean[rows], grouped["xm"], rtol=1e-12)
    np.testing.assert_allclose(res.std_error[rows], grouped["sem"], rtol=1e-10)
    assert np.all(res.count[np.setdiff1d(np.arange(res.count.size), rows)] == 0)


def test_equal_count_matches_pandas_qcut():
    # Without ties and with side counts divisible by the number of bins, the rank rule gives the
    # same bins as pandas.qcut; means then equal pandas groupby means, standard errors scipy.stats.sem.
    rng = np.random.default_rng(7)
    x = np.concatenate([-rng.uniform(0.01, 2, 600), rng.uniform(0, 1, 400)])
    y = np.sin(x) + rng.standard_normal(x.size)
    res = binned_means(x, y, 0.0, method="equal-count", number=(12, 8), level=0.9)
    z = stats.norm.ppf(0.95)
    for side, mask, j, offset in (("below", x < 0, 12, 0), ("above", x >= 0, 8, 12)):
        codes = pd.qcut(x[mask], j, labels=False)
        np.testing.assert_array_equal(res.assignment[mask] - offset, codes)
        grouped = pd.Series(y[mask]).groupby(codes)
        np.testing.assert_allclose(res.mean[offset:offset + j], grouped.mean(), rtol=1e-12)
        sem = [stats.sem(y[mask][codes == k]) for k in range(j)]
        np.testing.assert_allclose(res.std_error[offset:offset + j], sem, rtol=1e-10)
    np.testing.assert_allclose(res.ci_high - res.mean, z * res.std_error, rtol=1e-12)


def test_weighted_means_and_standard_errors():
    # Weighted bin mean = pandas weighted groupby; its standard error equals statsmodels WLS on a
    # constant with HC1 (sandwich sum w^2 e^2 / (sum w)^2 times m/(m-1)).
    rng = np.random.default_rng(8)
    x, y = lee_model1(2500, rng)
    w = rng.uniform(0.2, 3.0, x.size)
    res = binned_means(x, y, 0.0, method="equal-width", number=10, weights=w)
    frame = pd.DataFrame({"bin": res.assignment, "wy": w * y, "w": w})
    sums = frame.groupby("bin")[["wy", "w"]].sum()
    rows = sums.index.to_numpy()
    np.testing.assert_allclose(res.mean[rows], sums["wy"] / sums["w"], rtol=1e-12)
    for k in rows[:5]:
        sel = res.assignment == k
        fit = sm.WLS(y[sel], np.ones(sel.sum()), weights=w[sel]).fit(cov_type="HC1")
        assert res.std_error[k] == pytest.approx(fit.bse[0], rel=1e-9)
    # equal weights reproduce the unweighted results exactly
    plain = binned_means(x, y, 0.0, number=10)
    same = binned_means(x, y, 0.0, number=10, weights=np.full(x.size, 2.5))
    np.testing.assert_allclose(same.mean, plain.mean, rtol=1e-12)
    np.testing.assert_allclose(same.std_error, plain.std_error, rtol=1e-10)


def test_single_observation_bins_have_nan_standard_error():
    x = np.array([-3.0, -2.0, -1.0, 0.5, 1.0, 1.5, 2.0])
    y = np.array([1.0, 2.0, 3.0, 4.0, 5.0, 7.0, 9.0])
    res = binned_means(x, y, 0.0, method="equal-count", number=(3, 2))
    assert np.all(res.count == [1, 1, 1, 2, 2])
    assert np.all(np.isnan(res.std_error[:3])) and np.all(np.isnan(res.ci_low[:3]))
    np.testing.assert_allclose(res.mean, [1, 2, 3, 4.5, 8])
    assert res.std_error[3] == pytest.approx(stats.sem([4.0, 5.0]))


def test_selection_is_per_side_and_scale_and_user_numbers():
    rng = np.random.default_rng(9)
    x, y = lee_model1(5000, rng)
    auto = select_bin_number(x, y, 0.0)
    assert auto.rule == "imse" and auto.number == auto.imse_number
    assert auto.number[0] != auto.number[1]           # chosen separately (n_below is ~4x n_above)
    doubled = select_bin_number(x, y, 0.0, scale=2.0)
    assert all(2 * a - 1 <= d <= 2 * a for a, d in zip(auto.number, doubled.number))
    res = binned_means(x, y, 0.0, number=(9, 4))
    assert res.number == (9, 4) and res.rule == "user" and res.count.size == 13
    mv = binned_means(x, y, 0.0, rule="mimic-variance")
    assert mv.number == mv.selection.mimic_variance_number
    assert mv.number[0] > auto.number[0]              # MV gives many more bins (CCT 2015)


def test_row_order_does_not_matter():
    rng = np.random.default_rng(10)
    x, y = lee_model1(1500, rng)
    perm = rng.permutation(x.size)
    for method in ("equal-width", "equal-count"):
        a = binned_means(x, y, 0.0, method=method)
        b = binned_means(x[perm], y[perm], 0.0, method=method)
        np.testing.assert_allclose(a.mean, b.mean, rtol=1e-12)
        np.testing.assert_array_equal(a.assignment[perm], b.assignment)


def test_result_is_frozen_and_read_only():
    rng = np.random.default_rng(11)
    x, y = lee_model1(800, rng)
    res = binned_means(x, y, 0.0)
    assert int(res.count.sum()) == len(x)  # every observation lands in exactly one bin
    with pytest.raises(dataclasses.FrozenInstanceError):
        res.number = (1, 1)
    for arr in (res.mean, res.left, res.count, res.side, res.assignment):
        with pytest.raises(ValueError, match="read-only"):
            arr[0] = arr[1]


def test_few_distinct_values_fall_back_to_lower_pilot():
    x = np.repeat([-2.0, -1.0, 1.0, 2.0, 3.0], 40)
    y = x + np.random.default_rng(0).standard_normal(x.size)
    sel = select_bin_number(x, y, 0.0)
    assert sel.below.pilot_degree == 1 and sel.above.pilot_degree == 2
    assert 1 <= sel.number[0] <= 80 and 1 <= sel.number[1] <= 120


# ---------------------------------------------------------------------------------------------
# Bad input
# ---------------------------------------------------------------------------------------------
def test_bad_input_messages():
    rng = np.random.default_rng(12)
    x, y = lee_model1(300, rng)
    n_above = int(np.sum(x >= 0))
    with pytest.raises(InvalidOptionError, match=r"`number` must be at least 1 bin per side; got 0 below"):
        binned_means(x, y, 0.0, number=0)
    with pytest.raises(InvalidOptionError,
                       match=rf"`number` must not exceed the {n_above} observations above the cutoff; "
                             rf"got 500\. Pass at most {n_above} bins"):
        binned_means(x, y, 0.0, number=(5, 500))
    with pytest.raises(InvalidOptionError, match=r"`number` must be a whole number of bins; got 2.5"):
        binned_means(x, y, 0.0, number=2.5)
    with pytest.raises(InvalidOptionError, match=r"`number` must be one whole number or a pair"):
        binned_means(x, y, 0.0, number=(1, 2, 3))
    with pytest.raises(InvalidOptionError, match=r"`method` must be one of .*got 'quantile'"):
        binned_means(x, y, 0.0, method="quantile")
    with pytest.raises(InvalidOptionError, match=r"`rule` must be one of"):
        binned_means(x, y, 0.0, rule="optimal")
    with pytest.raises(InvalidOptionError, match=r"`level` must be a number strictly between 0 and 1"):
        binned_means(x, y, 0.0, level=1.0)
    with pytest.raises(InvalidOptionError, match=r"`scale` must be a positive finite number; got 0"):
        binned_means(x, y, 0.0, scale=0)
    with pytest.raises(InvalidOptionError, match=r"`outcome` must be a one-dimensional array as long as `score`"):
        binned_means(x, y[:-1], 0.0)
    with pytest.raises(InvalidWeightsError, match=r"`weights` must be finite and non-negative; got -1"):
        binned_means(x, y, 0.0, weights=np.where(np.arange(x.size) == 3, -1.0, 1.0))
    with pytest.raises(OneSidedDataError, match=r"none above 5"):
        binned_means(x, y, 5.0)
    with pytest.raises(InvalidOptionError, match=r"`variance_constant` must be a positive finite number"):
        imse_bins(0.1, 0.0, 100)
    with pytest.raises(InvalidOptionError, match=r"`side` must be one of"):
        bin_constants(x, y, 0.0, "left")
