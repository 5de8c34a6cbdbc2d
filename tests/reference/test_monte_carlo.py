"""Small Monte Carlo checks on a published simulation design (slow; seconds, not minutes).

Design: the Lee (2008) calibrated quintic, "Model 1" of Calonico, Cattaneo & Titiunik (2014,
Econometrica 82(6)), also used by Imbens & Kalyanaraman (2012, Review of Economic Studies 79(3)).
Coefficients, score law and error s.d. as in METHODS.md 14.1 (confirmed there against independent
public replication scripts; that these are exactly CCT's Model 1 is from memory):

    X = 2 Beta(2, 4) - 1,  eps ~ N(0, 0.1295^2),  Y = mu(X) + eps,  cutoff 0,  tau = 0.04
    mu(x) = 0.48 + 1.27x + 7.18x^2 + 20.21x^3 + 21.54x^4 + 7.33x^5    (x < 0)
    mu(x) = 0.52 + 0.84x - 3.00x^2 + 7.99x^3 - 9.01x^4 + 3.56x^5      (x >= 0)

and "Model 2" (calibrated on Ludwig & Miller 2007; CCT 2014 Model 2), same score law and errors:

    mu(x) = 3.71 + 2.30x + 3.28x^2 + 1.45x^3 + 0.23x^4 + 0.03x^5         (x < 0)
    mu(x) = 0.26 + 18.49x - 54.81x^2 + 74.30x^3 - 45.02x^4 + 9.83x^5     (x >= 0),   tau = -3.45

Population MSE-optimal bandwidth for the local linear, triangular, common-h estimator at n = 500:
0.1655 for Model 1 and 0.0825 for Model 2 (METHODS 14.2, derived + num-checked from the IK / CCT
constant 3.4375 with sigma^2 = 0.1295^2, f(0) = 0.625), shrinking like n^(-1/5) (the published rate
for p = 1). Model 1's second derivative changes sign within 0.25 of the cutoff on the left, so any
pilot window of realistic width attenuates its curvature and the finite-sample selection differs
from the asymptotic value by tens of percent at these n; Model 2's curvature is stable near the
cutoff, which makes it the design on which closeness to the population value and the rate are checked.

This is the small in-suite version (a few hundred replications, ~tens of seconds). A larger
version (thousands of replications, Models 1-3, several n) belongs in the benchmark / validation
script, not in `make test`.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import seamline

pytestmark = pytest.mark.slow

TAU = 0.04
SIGMA = 0.1295
H_POPULATION_500 = 0.1655  # METHODS 14.2 (derived + num-checked)
LEFT = np.array([0.48, 1.27, 7.18, 20.21, 21.54, 7.33])
RIGHT = np.array([0.52, 0.84, -3.00, 7.99, -9.01, 3.56])
TAU_2 = -3.45
H_POPULATION_500_MODEL2 = 0.0825  # METHODS 14.2 (derived + num-checked)
LEFT_2 = np.array([3.71, 2.30, 3.28, 1.45, 0.23, 0.03])
RIGHT_2 = np.array([0.26, 18.49, -54.81, 74.30, -45.02, 9.83])

REPS = 500          # coverage: binomial sd at 0.95 is sqrt(0.95*0.05/500) = 0.0097
REPS_RATE = 200     # bandwidth rate: medians of 200 draws at each n


def model1(n: int, rng: np.random.Generator, model: int = 1) -> pd.DataFrame:
    """One draw from the Lee / CCT Model 1 (or Model 2) design (METHODS 14.1)."""
    x = 2.0 * rng.beta(2.0, 4.0, n) - 1.0
    powers = np.vander(x, 6, increasing=True)
    left, right = (LEFT, RIGHT) if model == 1 else (LEFT_2, RIGHT_2)
    mu = np.where(x < 0, powers @ left, powers @ right)
    return pd.DataFrame({"x": x, "y": mu + rng.normal(0.0, SIGMA, n)})


def simulate(n: int, reps: int, seed: int, model: int = 1, **fit_kwargs) -> pd.DataFrame:
    """Fits over replications (default: bandwidth "mse", triangular, local linear, neighbour variance)."""
    rng = np.random.default_rng(seed)
    rows = []
    for _ in range(reps):
        fit = seamline.Design(model1(n, rng, model), score="x", cutoff=0.0, outcome="y").fit(**fit_kwargs)
        rows.append({
            "estimate": fit.estimate,
            "std_error": fit.std_error,
            "low": fit.conf_int[0],
            "high": fit.conf_int[1],
            "bc": fit.bias_corrected_estimate,
            "robust_se": fit.robust_std_error,
            "robust_low": fit.robust_conf_int[0],
            "robust_high": fit.robust_conf_int[1],
            "h": 0.5 * (fit.bandwidth[0] + fit.bandwidth[1]),
        })
    return pd.DataFrame(rows)


def _coverage(sims: pd.DataFrame, low: str, high: str, tau: float = TAU) -> float:
    return float(((sims[low] <= tau) & (tau <= sims[high])).mean())


def test_model1_default_fit_n500():
    sims = simulate(500, REPS, seed=20140601)
    problems = []

    # 1. Robust bias-corrected 95% intervals cover tau close to 95% (CCT 2014 report near-nominal
    #    RBC coverage for this design -- from memory, so only a band is asserted). Band [0.90, 0.98]:
    #    nominal 0.95 minus ~5 binomial sd (0.0097 at 500 draws), leaving room for the small
    #    finite-sample under-coverage seen in METHODS 14.2's own run (0.926 at the oracle h).
    coverage = _coverage(sims, "robust_low", "robust_high")
    if not 0.90 <= coverage <= 0.98:
        problems.append(f"RBC coverage {coverage:.3f} outside [0.90, 0.98]")

    # 2. The estimated MSE-optimal bandwidth is of the size of the population value 0.1655. Band
    #    +-40%: see the module docstring (this design's curvature changes sign near the cutoff).
    median_h = float(sims["h"].median())
    if not 0.60 * H_POPULATION_500 <= median_h <= 1.40 * H_POPULATION_500:
        problems.append(f"median h {median_h:.4f} not within 40% of {H_POPULATION_500}")

    # 3. The RBC estimate is centred on tau: |mean - tau| < 0.015, ~3 Monte Carlo standard errors
    #    of the mean at the spread seen with estimated bandwidths (sd ~0.1 / sqrt(500) = 0.0045).
    if abs(float(sims["bc"].mean()) - TAU) > 0.015:
        problems.append(f"mean bias-corrected estimate {sims['bc'].mean():.4f} not within 0.015 of {TAU}")

    assert not problems, "; ".join(problems)


def test_model1_oracle_bandwidth_reproduces_reference_run():
    """At the fixed population bandwidth h = b = 0.1655 the neighbour SEs track the Monte Carlo SD.

    The SE check is made at a fixed bandwidth on purpose: with a data-driven bandwidth the spread
    of the estimate also contains the bandwidth's own sampling variation, which no fixed-h variance
    formula describes. METHODS 14.2 reports a run of this exact set-up (2000 draws; conventional
    coverage 0.926, RBC coverage 0.926, mean RBC estimate 0.0411) and proposes the tolerance
    targets used here: coverage in [0.90, 0.96], |mean RBC estimate - 0.04| < 0.01.
    """
    sims = simulate(500, REPS, seed=14021, bandwidth=H_POPULATION_500, pilot_bandwidth=H_POPULATION_500)
    problems = []
    # SE / SD within +-15%: the MC SD from 500 draws has relative sd ~1/sqrt(2*500) = 3%, so the
    # band is ~5 of those and still catches a variance formula that is off by a constant factor.
    for est, se, label in (("estimate", "std_error", "conventional"), ("bc", "robust_se", "robust")):
        ratio = float(sims[se].mean() / sims[est].std(ddof=1))
        if not 0.85 <= ratio <= 1.15:
            problems.append(f"{label}: mean SE / MC SD = {ratio:.3f} outside [0.85, 1.15]")
    for low, high, label in (("low", "high", "conventional"), ("robust_low", "robust_high", "robust")):
        coverage = _coverage(sims, low, high)
        if not 0.90 <= coverage <= 0.96:
            problems.append(f"{label} coverage {coverage:.3f} outside [0.90, 0.96]")
    if abs(float(sims["bc"].mean()) - TAU) > 0.01:
        problems.append(f"mean bias-corrected estimate {sims['bc'].mean():.4f} not within 0.01 of {TAU}")
    assert not problems, "; ".join(problems)


def test_model2_bandwidth_close_to_population_and_shrinks_at_n_to_minus_one_fifth():
    """Model 2: median estimated h near the population value at n = 500 and n = 4000 (+-30%), and the
    ratio of medians n = 500 / n = 4000 equal to 8^(1/5) = 1.516 (local linear rate, IK 2012 /
    CCT 2014) within +-20%: each median has ~2-3% Monte Carlo error at 200 draws, and the pilot
    steps converge at their own (slower) rates, so the finite-sample ratio drifts somewhat."""
    sims500 = simulate(500, REPS_RATE, seed=5001, model=2)
    h500 = float(sims500["h"].median())
    h4000 = float(simulate(4000, REPS_RATE, seed=40001, model=2)["h"].median())
    expected = 8.0 ** 0.2
    ratio = h500 / h4000
    problems = []
    if not 0.8 * expected <= ratio <= 1.2 * expected:
        problems.append(f"median h: n=500 {h500:.4f}, n=4000 {h4000:.4f}, ratio {ratio:.3f} "
                        f"vs {expected:.3f} +-20%")
    for n, h, population in ((500, h500, H_POPULATION_500_MODEL2),
                             (4000, h4000, H_POPULATION_500_MODEL2 / expected)):
        if not 0.70 * population <= h <= 1.30 * population:
            problems.append(f"median h at n={n} {h:.4f} not within 30% of {population:.4f}")
    # robust bias-corrected coverage on this design too (same band as Model 1)
    coverage = _coverage(sims500, "robust_low", "robust_high", TAU_2)
    if not 0.90 <= coverage <= 0.98:
        problems.append(f"Model 2 RBC coverage {coverage:.3f} outside [0.90, 0.98]")
    assert not problems, "; ".join(problems)
