"""Monte Carlo checks on published simulation designs, with bands set from the Monte Carlo error.

Designs: Calonico, Cattaneo & Titiunik (2014, Econometrica 82(6)) Models 1-3, also used by Imbens &
Kalyanaraman (2012, Review of Economic Studies 79(3)); coefficients from memory:

    X = 2 Beta(2, 4) - 1,  eps ~ N(0, 0.1295^2),  Y = mu(X) + eps,  cutoff 0
    Model 1 (Lee 2008 fit), tau = 0.04
      mu(x) = 0.48 + 1.27x + 7.18x^2 + 20.21x^3 + 21.54x^4 + 7.33x^5    (x < 0)
      mu(x) = 0.52 + 0.84x - 3.00x^2 + 7.99x^3 - 9.01x^4 + 3.56x^5      (x >= 0)
    Model 2 (Ludwig & Miller 2007 fit), tau = -3.45
      mu(x) = 3.71 + 2.30x + 3.28x^2 + 1.45x^3 + 0.23x^4 + 0.03x^5       (x < 0)
      mu(x) = 0.26 + 18.49x - 54.81x^2 + 74.30x^3 - 45.02x^4 + 9.83x^5   (x >= 0)
    Model 3: Model 1 with some coefficients rescaled (see tests/benchmarks/validate_monte_carlo.py)

Population MSE-optimal bandwidths (local linear, triangular) at n = 500: 0.1655, 0.0825, 0.2601,
from the Imbens-Kalyanaraman formula with the true constants (recomputed in
tests/core/test_kernels.py), shrinking like n^(-1/5).

How the bands are set (before looking at the outcome): a coverage rate from R draws has Monte Carlo
standard error sqrt(p (1 - p) / R); a mean, sd / sqrt(R); a ratio of SE to SD, about 1 / sqrt(2 R);
for a median, the sample quantiles at 1/2 -+ 3 / (2 sqrt(R)) bound it (distribution-free). A check
against a nominal value allows 3 of these. Where the engine does not reach the nominal value, the
test says so instead of widening the band: the check pins the measured value (from a larger run: `validate_monte_carlo.py measure`)
within 3 combined Monte Carlo standard errors, or is a strict xfail where the shortfall is many
standard errors wide (it fails loudly the day the shortfall disappears). The shortfalls below are
raised in issue 9 ("Inference a referee accepts").

`SEAMLINE_MC_SEED` shifts every seed; `make validate` runs this file over a sweep of seeds.
"""
from __future__ import annotations

import os
from math import sqrt

import numpy as np
import pandas as pd
import pytest

import seamline

pytestmark = pytest.mark.slow

SEED_SHIFT = int(os.environ.get("SEAMLINE_MC_SEED", "0"))
SIGMA = 0.1295
MODELS = {  # (left coefficients, right coefficients, tau, population h at n = 500)
    1: ([0.48, 1.27, 7.18, 20.21, 21.54, 7.33], [0.52, 0.84, -3.00, 7.99, -9.01, 3.56], 0.04, 0.1655),
    2: ([3.71, 2.30, 3.28, 1.45, 0.23, 0.03], [0.26, 18.49, -54.81, 74.30, -45.02, 9.83], -3.45, 0.0825),
    3: ([0.48, 1.27, -0.5 * 7.18, 0.7 * 20.21, 1.1 * 21.54, 1.5 * 7.33],
        [0.52, 0.84, -0.1 * 3.00, -0.3 * 7.99, -0.1 * 9.01, 3.56], 0.04, 0.2601),
}
NOMINAL = 0.95

# Measured by `python tests/benchmarks/validate_monte_carlo.py measure` (draws in brackets): what the
# engine gives today, with its own Monte Carlo standard error.
MEASURED_DEFAULT_ROBUST_COVERAGE = (0.9444, 8000)     # Model 1, n = 500, default fit (bias-reduced variance)
MEASURED_DEFAULT_MEAN_BIAS = (0.0049, 0.0010)         # Model 1, n = 500: mean(bc) - tau and its MC SE
MEASURED_ORACLE_ROBUST_COVERAGE = (0.9245, 4000)      # Model 1, n = 500, h = b = 0.1655, neighbour variance
MEASURED_ORACLE_SE_RATIO = {"conventional": (0.985, 4000), "robust": (0.975, 4000)}   # neighbour variance

REPS_DEFAULT = 1000   # MC SE of a 0.95 rate: 0.0069; of the measured 0.944: 0.0073
REPS_ORACLE = 1000


def draw(model: int, n: int, rng: np.random.Generator) -> pd.DataFrame:
    left, right, _, _ = MODELS[model]
    x = 2.0 * rng.beta(2.0, 4.0, n) - 1.0
    powers = np.vander(x, 6, increasing=True)
    mu = np.where(x < 0, powers @ np.array(left), powers @ np.array(right))
    return pd.DataFrame({"x": x, "y": mu + rng.normal(0.0, SIGMA, n)})


def simulate(model: int, n: int, reps: int, seed: int, **fit_kwargs) -> pd.DataFrame:
    rng = np.random.default_rng(seed + SEED_SHIFT)
    tau = MODELS[model][2]
    rows = []
    for _ in range(reps):
        fit = seamline.Design(draw(model, n, rng), score="x", cutoff=0.0, outcome="y").fit(**fit_kwargs)
        rows.append({
            "estimate": fit.estimate, "std_error": fit.std_error, "bc": fit.bias_corrected_estimate,
            "robust_se": fit.robust_std_error,
            "covered": fit.conf_int[0] <= tau <= fit.conf_int[1],
            "robust_covered": fit.robust_conf_int[0] <= tau <= fit.robust_conf_int[1],
            "h": fit.bandwidth[0],
        })
    return pd.DataFrame(rows)


def rate_se(p: float, reps: int) -> float:
    return sqrt(p * (1.0 - p) / reps)


def assert_within(value: float, center: float, se: float, what: str) -> None:
    assert abs(value - center) <= 3.0 * se, f"{what}: {value:.4f} not within 3 x {se:.4f} of {center:.4f}"


@pytest.fixture(scope="module")
def default_fits():
    return simulate(1, 500, REPS_DEFAULT, seed=20140601)


@pytest.fixture(scope="module")
def oracle_fits():
    h = MODELS[1][3]
    # the neighbour variance (the earlier default) at the population bandwidth: the record of how its
    # standard errors track the spread (METHODS-II 26.1)
    return simulate(1, 500, REPS_ORACLE, seed=14021, bandwidth=h, pilot_bandwidth=h, variance="neighbors")


def test_default_robust_coverage_as_measured(default_fits):
    """The default robust 95% interval (bias-reduced variance, t critical values on Bell-McCaffrey
    degrees of freedom) covers about 0.944 (8000 draws; the neighbour variance with normal critical
    values, the earlier default, gave 0.914, 11.6 MC SE below nominal; issue 9). The band is 3
    combined MC SE around the measured value (+-0.024), so a change that moves coverage by more than
    that fails here and must update the record."""
    measured, draws = MEASURED_DEFAULT_ROBUST_COVERAGE  # 0.95 - 0.9444 = 2.2 MC SE of that run
    coverage = float(default_fits.robust_covered.mean())
    se = sqrt(rate_se(measured, REPS_DEFAULT) ** 2 + rate_se(measured, draws) ** 2)
    assert_within(coverage, measured, se, "robust coverage vs measured")


def test_default_bias_corrected_estimate_centring(default_fits):
    """mean(bc) - tau at the measured small bias (about 5% of the estimate's SD; issue 9)."""
    bias, bias_se = MEASURED_DEFAULT_MEAN_BIAS
    err = default_fits.bc - MODELS[1][2]
    se = sqrt((err.std(ddof=1) / sqrt(REPS_DEFAULT)) ** 2 + bias_se ** 2)
    assert_within(float(err.mean()), bias, se, "mean bias-corrected error")


def test_oracle_bandwidth_standard_errors_track_the_spread(oracle_fits):
    """At the fixed population bandwidth the SEs describe the sampling spread of the estimates (ratio
    mean SE / SD, MC SE about 1/sqrt(2R) from this run and the measured run combined)."""
    for label, est, se in (("conventional", "estimate", "std_error"), ("robust", "bc", "robust_se")):
        ratio = float(oracle_fits[se].mean() / oracle_fits[est].std(ddof=1))
        measured, draws = MEASURED_ORACLE_SE_RATIO[label]
        # the measured values (0.985, 0.975) are within 3 MC SE (0.034) of 1: no systematic SE error
        assert_within(ratio, measured, sqrt(1 / (2 * REPS_ORACLE) + 1 / (2 * draws)), f"{label} SE / SD")


def test_oracle_bandwidth_robust_coverage_as_measured(oracle_fits):
    """Even at the population bandwidth the neighbour-variance robust interval covers about 0.925 at
    n = 500 (issue 9; METHODS-II 26.1: its SE understates the spread at small windows)."""
    measured, draws = MEASURED_ORACLE_ROBUST_COVERAGE
    coverage = float(oracle_fits.robust_covered.mean())
    se = sqrt(rate_se(measured, REPS_ORACLE) ** 2 + rate_se(measured, draws) ** 2)
    assert_within(coverage, measured, se, "oracle robust coverage vs measured")


LARGE_N = 20_000


@pytest.mark.parametrize("model,reps", [
    (2, 100),
    pytest.param(1, 150, marks=pytest.mark.xfail(strict=True, reason=(
        "known limitation (DEVELOPERS.md, Coverage at estimated bandwidths): the curvature pilot "
        "(a polynomial on the nearer half of each side) does not track Model 1's "
        "curvature, which changes sign near the cutoff; median h/population about 1.25 at n = 20000"))),
    pytest.param(3, 100, marks=pytest.mark.xfail(strict=True, reason=(
        "known limitation: the same pilot on Model 3; median h/population about 0.78 at n = 20000"))),
])
def test_median_selected_bandwidth_near_population_value_at_large_n(model, reps):
    """The population median of the default (MSE) bandwidth lies within +-10% of the population value
    at n = 20000: the distribution-free 3-MC-SE interval for the median (the sample quantiles at
    1/2 -+ 3 / (2 sqrt(R)), binomial order statistics) must meet [0.9, 1.1]. Model 2 measures about
    +9% (close to the edge); the selected bandwidths of Model 1 have a long right tail."""
    population = MODELS[model][3] * (500 / LARGE_N) ** 0.2
    ratio = simulate(model, LARGE_N, reps, seed=2020 + model).h / population
    low, high = np.quantile(ratio, [0.5 - 1.5 / sqrt(reps), 0.5 + 1.5 / sqrt(reps)])
    assert low <= 1.10 and high >= 0.90, (
        f"median h / population {ratio.median():.3f}; 3-MC-SE interval [{low:.3f}, {high:.3f}]")
