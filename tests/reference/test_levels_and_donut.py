"""Confidence levels other than 95% and donut rows, against statsmodels and scipy.

- Levels 0.90 and 0.99: the conventional interval equals statsmodels' normal-based interval of the
  jump contrast, ``WLS(...).fit(cov_type="HC0").t_test(c).conf_int(alpha=...)`` (use_t is False
  with a robust cov_type, so the normal quantile is used); the robust interval is the bias-corrected
  estimate +- scipy.stats.norm.ppf(1 - alpha/2) times the robust SE, whose value is itself checked
  against the first-principles reference (``_first_principles``).
- Donut rows: statsmodels WLS of the interacted local polynomial on the rows kept by the donut
  (|x| >= radius: a row exactly at the radius is kept), with the radius on a mass point of a
  discrete score.
Tolerance: RTOL = 1e-8 (declared in _references).

Input data are invented by the seeded generators below (test input only).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import seamline
from _first_principles import jump, problem, robust_variance
from _references import assert_close, wls_reference


def make_data(seed: int = 21, n: int = 1200) -> tuple[pd.DataFrame, float]:
    rng = np.random.default_rng(seed)
    cutoff = 10.0
    score = cutoff + rng.uniform(-4.0, 4.0, n)
    x = score - cutoff
    y = 1.0 + 0.4 * x - 0.05 * x ** 2 + 0.6 * (x >= 0) + rng.normal(0, 0.5, n)
    return pd.DataFrame({"score": score, "y": y}), cutoff


@pytest.mark.parametrize("level", [0.90, 0.99])
@pytest.mark.parametrize("treated", ["above", "below"])
def test_intervals_and_p_values_at_other_levels(level, treated):
    frame, cutoff = make_data()
    h, b = 2.0, 3.0
    design = seamline.Design(frame, score="score", cutoff=cutoff, outcome="y", treated=treated)
    fit = design.fit(bandwidth=h, pilot_bandwidth=b, variance="hc0", level=level)
    s, y = frame.score.to_numpy(), frame.y.to_numpy()
    ref = wls_reference(s, y, cutoff, h, treated=treated, cov_type="hc0")
    c = np.zeros(4)
    c[2], c[0] = (1.0, -1.0) if treated == "above" else (-1.0, 1.0)
    # Reference: statsmodels t_test of the jump contrast, normal-based interval at alpha = 1 - level
    low, high = np.asarray(ref.result.t_test(c).conf_int(alpha=1 - level))[0]
    assert fit.level == level
    assert_close(fit.conf_int[0], low, scale=ref.std_error, what=f"{level} conventional low")
    assert_close(fit.conf_int[1], high, scale=ref.std_error, what=f"{level} conventional high")
    assert_close(fit.p_value, float(np.asarray(ref.result.t_test(c).pvalue)), scale=1e-300, what="p-value")
    # robust: first-principles estimate and SE, normal quantile from scipy
    pr = problem(s, cutoff, h, b, treated=treated)
    bc, rse = float(jump(pr, y)[0]), np.sqrt(robust_variance(pr, y, np.ones(1), "hc0"))
    z = stats.norm.ppf(1 - (1 - level) / 2)
    assert_close(fit.robust_conf_int[0], bc - z * rse, scale=rse, what=f"{level} robust low")
    assert_close(fit.robust_conf_int[1], bc + z * rse, scale=rse, what=f"{level} robust high")
    assert_close(fit.robust_p_value, 2 * stats.norm.sf(abs(bc / rse)), scale=1e-300, what="robust p-value")
    # the same numbers through confidence_interval() on a fit made at another level
    other = design.fit(bandwidth=h, pilot_bandwidth=b, variance="hc0", level=0.95)
    assert other.confidence_interval(level) == pytest.approx(fit.robust_conf_int, rel=1e-14)
    assert other.confidence_interval(level, robust=False) == pytest.approx(fit.conf_int, rel=1e-14)
    width = fit.robust_conf_int[1] - fit.robust_conf_int[0]
    width_ratio = width / (other.robust_conf_int[1] - other.robust_conf_int[0])
    assert width_ratio == pytest.approx(z / stats.norm.ppf(0.975), rel=1e-12)


@pytest.mark.parametrize("level", [0.90, 0.99])
def test_fuzzy_first_stage_reports_the_level(level):
    rng = np.random.default_rng(2)
    frame, cutoff = make_data()
    frame = frame.assign(d=(rng.uniform(size=len(frame)) < 0.2 + 0.6 * (frame.score >= cutoff)).astype(float))
    fit = seamline.Design(frame, score="score", cutoff=cutoff, outcome="y", takeup="d").fit(
        bandwidth=2.0, pilot_bandwidth=3.0, level=level)
    fs = fit.first_stage
    # the default variance ("bias-reduced") gives t critical values on the fit's own degrees of freedom
    assert fs.dof[1] is not None and fs.dof[1] > 1
    z = stats.t.ppf(1 - (1 - level) / 2, fs.dof[1])  # scipy
    assert fs.level == level
    bc, se = fs.bias_corrected_estimate, fs.robust_std_error
    assert fs.robust_conf_int == pytest.approx((bc - z * se, bc + z * se), rel=1e-14)


def discrete_frame(seed: int = 31, n: int = 3000) -> pd.DataFrame:
    """A score on a grid of 0.5 (mass points at every half unit), cutoff 0."""
    rng = np.random.default_rng(seed)
    x = rng.integers(-20, 21, n) * 0.5
    y = 0.3 + 0.15 * x - 0.01 * x ** 2 + 0.5 * (x >= 0) + rng.normal(0, 0.4, n)
    return pd.DataFrame({"x": x, "y": y})


@pytest.mark.parametrize("kernel", ["triangular", "uniform"])
@pytest.mark.parametrize("variance", ["hc0", "hc1", "hc3"])
def test_donut_rows_against_statsmodels_on_the_kept_rows(variance, kernel):
    frame = discrete_frame()
    radii = [0.0, 1.0, 2.5]          # 1.0 and 2.5 are mass points of the score
    design = seamline.Design(frame, score="x", cutoff=0.0, outcome="y")
    table = design.donut(radii=radii, bandwidth=7.0, kernel=kernel, variance=variance).table()
    x = frame.x.to_numpy()
    for radius, row in zip(radii, table.itertuples()):
        kept = np.abs(x) >= radius   # rows exactly at the radius stay in
        assert row.n_excluded == int((~kept).sum())
        assert (np.abs(x) == radius).sum() > 50 or radius == 0.0  # the radius sits on a mass point
        # Reference: statsmodels WLS(y, interacted basis, weights=K(x/h)).fit(cov_type=...) on the kept rows
        ref = wls_reference(x[kept], frame.y.to_numpy()[kept], 0.0, 7.0, kernel=kernel, cov_type=variance)
        assert_close(row.estimate, ref.estimate, scale=ref.std_error, what=f"donut {radius} estimate")
        assert_close(row.std_error, ref.std_error, what=f"donut {radius} SE")
        assert (row.n_below, row.n_above) == ref.n_used
