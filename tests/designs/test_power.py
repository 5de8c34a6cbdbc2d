"""Power and sample size of the robust test, with the design as pilot data.

References: the power formula recomputed with scipy.stats.norm from the pilot's robust standard
error (Cattaneo, Titiunik & Vazquez-Bare 2019, from memory); the sample size against a root found
here with scipy.optimize.brentq and against the closed-form approximation; the scaling rules
se ~ n^(-1/2) at a fixed bandwidth and se ~ n^(-(p+1)/(2p+3)) when an MSE-optimal bandwidth
h ~ n^(-1/(2p+3)) is re-selected (common practice); and a Monte Carlo from a known data-generating
process (marked slow).
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import optimize, stats

import seamline
from seamline.errors import InvalidEffectError, InvalidOptionError

H, B = 0.4, 0.6      # fixed bandwidths for the simulation (score units)


def draw(n: int, rng: np.random.Generator, effect: float) -> pd.DataFrame:
    """Quadratic means on each side, so the bias-corrected local linear estimate is unbiased given x."""
    x = rng.uniform(-1.0, 1.0, n)
    y = 0.5 + 0.8 * x - 0.6 * x ** 2 + effect * (x >= 0) + rng.normal(0.0, 0.5, n)
    return pd.DataFrame({"x": x, "y": y})


@pytest.fixture(scope="module")
def design():
    return seamline.Design(draw(3000, np.random.default_rng(21), 0.2), score="x", cutoff=0.0, outcome="y")


def formula(effect, se, level):
    # Reference: power of the two-sided normal test, 1 - Phi(z - tau/se) + Phi(-z - tau/se) (common practice)
    z = stats.norm.ppf(1 - (1 - level) / 2)
    return stats.norm.sf(z - effect / se) + stats.norm.cdf(-z - effect / se)


@pytest.mark.parametrize("level", [0.9, 0.95, 0.99])
@pytest.mark.parametrize("scaling", ["reselected-bandwidth", "fixed-bandwidth"])
def test_power_against_no_effect_is_the_size(design, level, scaling):
    for n in (None, 500, 20000):
        assert design.power(0.0, level=level, n=n, scaling=scaling).power == pytest.approx(1 - level, abs=1e-15)


def test_power_is_the_normal_formula_at_the_pilot_standard_error(design):
    pilot = design.fit()
    got = design.power(0.25, level=0.9)
    assert got.n_total == sum(pilot.n_total) and got.std_error == pilot.robust_std_error
    assert got.power == pytest.approx(formula(0.25, pilot.robust_std_error, 0.9), rel=1e-12)
    assert design.power(-0.25, level=0.9).power == pytest.approx(got.power, rel=1e-12)


def test_power_rises_with_the_effect_and_with_the_sample_size(design):
    curve = design.power_curve()
    table = curve.table()
    assert table.effect.iloc[0] == 0 and table.power.iloc[0] == pytest.approx(0.05, abs=1e-15)
    assert np.all(np.diff(table.power) > 0) and 0.985 < table.power.iloc[-1] < 0.995
    sizes = [design.power(0.1, n=n).power for n in (1000, 2000, 4000, 8000)]
    assert np.all(np.diff(sizes) > 0)
    own = design.power_curve([0.0, 0.1, 0.3]).table()
    np.testing.assert_allclose(own.power, formula(np.array([0.0, 0.1, 0.3]), curve.std_error, 0.95), rtol=1e-12)


def test_standard_error_scaling_rules(design):
    pilot = design.fit()
    n0, se0 = sum(pilot.n_total), pilot.robust_std_error
    # fixed bandwidth: the window's sample grows like n, so se ~ n^(-1/2) (common practice)
    fixed = design.power(0.2, n=4 * n0, scaling="fixed-bandwidth")
    assert fixed.std_error == pytest.approx(se0 / 2, rel=1e-12) and fixed.exponent == 0.5
    assert fixed.n_window == tuple(4 * w for w in pilot.n_used)
    # re-selected MSE bandwidth, local linear: h ~ n^(-1/5), se ~ (n h)^(-1/2) ~ n^(-2/5) (common practice)
    again = design.power(0.2, n=32 * n0)
    assert again.std_error == pytest.approx(se0 / 4, rel=1e-12) and again.exponent == pytest.approx(0.4)
    assert again.n_window == tuple(math.ceil(w * 32 ** 0.8 - 1e-9) for w in pilot.n_used)
    quadratic = design.power(0.2, n=32 * n0, degree=2)
    assert quadratic.exponent == pytest.approx(3 / 7)       # (p + 1) / (2p + 3) at p = 2
    assert "n^(-0.4)" in again.to_markdown() and "local to the cutoff" in again.to_markdown()


@pytest.mark.parametrize("scaling", ["reselected-bandwidth", "fixed-bandwidth"])
def test_sample_size_is_the_smallest_n_reaching_the_power(design, scaling):
    result = design.sample_size(0.12, power=0.8, scaling=scaling)
    pilot = design.fit()
    n0, se0, gamma = sum(pilot.n_total), pilot.robust_std_error, result.exponent
    # Reference: the root of power(n) = 0.8 found here with scipy.optimize.brentq on the formula
    root = optimize.brentq(lambda n: formula(0.12, se0 * (n0 / n) ** gamma, 0.95) - 0.8, 10, 1e8, xtol=1e-9)
    assert result.n_total == math.ceil(root)
    # closed form ignoring the far tail: n = n0 (se0 (z + z_power) / effect)^(1/gamma) (common practice)
    approx = n0 * (se0 * (stats.norm.ppf(0.975) + stats.norm.ppf(0.8)) / 0.12) ** (1 / gamma)
    assert root == pytest.approx(approx, rel=1e-4)
    assert result.achieved_power >= 0.8 > design.power(0.12, n=result.n_total - 1, scaling=scaling).power
    assert sum(result.n_sides) == result.n_total
    assert result.n_window == design.power(0.12, n=result.n_total, scaling=scaling).n_window
    assert "n_window_below" in result.table().columns and "Scaling" in result.to_markdown()


def test_bad_power_input(design):
    with pytest.raises(InvalidEffectError, match=r"`effect` must be non-zero for a sample size; got 0\. .*pass the "
                                                 r"smallest effect worth detecting"):
        design.sample_size(0.0)
    with pytest.raises(InvalidEffectError, match=r"`effect` must be a finite number in the outcome's units; got nan"):
        design.power(float("nan"))
    with pytest.raises(InvalidOptionError, match=r"`power` must lie strictly between 1 - level = 0.05 and 1; got 0.03"):
        design.sample_size(0.2, power=0.03)
    with pytest.raises(InvalidOptionError, match=r"`n` must be a whole number of observations \(at least 10\); got 2.5"):
        design.power(0.2, n=2.5)
    with pytest.raises(InvalidOptionError, match=r"`scaling` must be one of \"reselected-bandwidth\", \"fixed-bandwidth\""):
        design.power(0.2, scaling="fixed")


@pytest.mark.slow
def test_simulated_rejection_rate_at_the_returned_sample_size():
    """Pilot: 20000 draws; then R = 1000 samples at the returned n, fixed h = 0.4 and pilot b = 0.6.

    The band is 0.8 +- 3 binomial standard errors, 3 sqrt(0.8 * 0.2 / 1000) = 0.038 (common practice). About
    10 s on one core.
    """
    effect = 0.15
    rng = np.random.default_rng(2026)
    pilot = seamline.Design(draw(20000, rng, effect), score="x", cutoff=0.0, outcome="y")
    plan = pilot.sample_size(effect, power=0.8, scaling="fixed-bandwidth", bandwidth=H, pilot_bandwidth=B)
    reps = 1000
    rejected, ses = 0, []
    for _ in range(reps):
        fit = seamline.Design(draw(plan.n_total, rng, effect), score="x", cutoff=0.0,
                              outcome="y").fit(bandwidth=H, pilot_bandwidth=B)
        rejected += fit.robust_p_value < 0.05
        ses.append(fit.robust_std_error)
    band = 3 * math.sqrt(0.8 * 0.2 / reps)
    assert abs(rejected / reps - 0.8) < band, (rejected / reps, plan.n_total)
    # the fixed-bandwidth scaling: the mean robust se at n matches the scaled pilot se
    assert np.mean(ses) == pytest.approx(plan.std_error, rel=0.03)
