"""The default path -- robust bias-corrected estimate and standard error -- against first principles.

Reference: the in-test computation of ``_first_principles`` (raw polynomial basis of x = score -
cutoff; the bias correction of Calonico, Cattaneo & Titiunik 2014, section 2, as the x^(p+1)
coefficient of the degree-q fit at the pilot b times the projection of x^(p+1) on the degree-p
basis at h; variances as sums of squared linear weights times the residuals named there, and
brute-force nearest-neighbour variances). Every case uses a pilot bandwidth b different from h, on
both sides of h, so a wrong (h/b) scaling cannot cancel. Tolerance: 1e-9 relative (the engine and
the reference differ only by floating-point round-off on these well-conditioned windows).

Input data are invented by the seeded generator below (test input only; every expected value is
computed in the test).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import seamline
from _first_principles import adjusted, jump, neighbor_residuals, problem, robust_variance
from _references import assert_close

RTOL_EXACT = 1e-9
VARIANCES = ("neighbors", "hc0", "hc1", "hc2", "hc3")


def make_data(seed: int, n: int = 420, discrete: bool = False) -> tuple[pd.DataFrame, float]:
    """Invented data: curved outcome, heteroskedastic errors, covariates, take-up, weights, clusters.

    ``discrete`` rounds the score to multiples of 1/64 (exact in binary, so tied distances are exactly
    equal): many rows share a value, and the mass points exercise the neighbour ties."""
    rng = np.random.default_rng(seed)
    cutoff = 0.5
    score = cutoff + rng.uniform(-1.0, 1.0, n)
    if discrete:
        score = cutoff + np.round((score - cutoff) * 64) / 64
    x = score - cutoff
    z1 = 0.4 * x + rng.normal(size=n)
    z2 = rng.binomial(1, 0.5, n).astype(float)
    d = (rng.uniform(size=n) < np.clip(0.25 + 0.5 * (x >= 0) + 0.2 * x, 0, 1)).astype(float)
    y = (0.3 + 1.1 * x - 1.6 * x ** 2 + 0.9 * x ** 3 + 0.7 * d + 0.5 * z1 - 0.3 * z2
         + rng.normal(0.0, 0.3 + 0.2 * np.abs(x), n))
    return pd.DataFrame({"score": score, "y": y, "d": d, "z1": z1, "z2": z2,
                         "w": rng.uniform(0.5, 2.0, n), "g": rng.integers(0, 25, n)}), cutoff


# (seed, discrete, kernel, degree, derivative, bandwidth h, pilot b, treated, weights)
CASES = {
    "linear-b>h": (1, False, "triangular", 1, 0, 0.45, 0.8, "above", False),
    "linear-b<h": (2, False, "triangular", 1, 0, 0.7, 0.5, "above", False),
    "pairs-below-weighted": (3, False, "epanechnikov", 1, 0, (0.5, 0.65), (0.9, 0.75), "below", True),
    "uniform-mass-points": (4, True, "uniform", 1, 0, 0.4, 0.62, "above", False),
    "constant": (5, False, "triangular", 0, 0, 0.3, 0.55, "above", True),
    "quadratic": (6, False, "epanechnikov", 2, 0, 0.8, 0.95, "below", False),
    "slope-jump": (7, True, "triangular", 2, 1, 0.75, 0.9, "above", False),
}


def _case(name):
    seed, discrete, kern, p, nu, h, b, treated, weighted = CASES[name]
    frame, cutoff = make_data(seed, discrete=discrete)
    pr = problem(frame.score.to_numpy(), cutoff, h, b, p=p, nu=nu, kern=kern,
                 weights=frame.w.to_numpy() if weighted else None, treated=treated)
    options = dict(bandwidth=h, pilot_bandwidth=b, kernel=kern, degree=p, derivative=nu)
    return frame, cutoff, pr, options, treated, weighted


def _design(frame, cutoff, treated, weighted, **extra):
    return seamline.Design(frame, score="score", cutoff=cutoff, outcome="y", treated=treated,
                           weights="w" if weighted else None, **extra)


@pytest.mark.parametrize("variance", VARIANCES)
@pytest.mark.parametrize("name", list(CASES))
def test_sharp_robust_estimate_and_se(name, variance):
    frame, cutoff, pr, options, treated, weighted = _case(name)
    fit = _design(frame, cutoff, treated, weighted).fit(variance=variance, **options)
    y = frame.y.to_numpy()
    want_est = float(jump(pr, y)[0])
    want_se = np.sqrt(robust_variance(pr, y, np.ones(1), variance))
    # Reference: in-test raw-basis construction (CCT 2014 section 2; variances as named in _first_principles)
    assert_close(fit.bias_corrected_estimate, want_est, rtol=RTOL_EXACT, scale=want_se,
                 what=f"{name}/{variance} bias-corrected estimate")
    assert_close(fit.robust_std_error, want_se, rtol=RTOL_EXACT, what=f"{name}/{variance} robust SE")
    assert tuple(fit.pilot_bandwidth) == tuple(float(v) for v in np.broadcast_to(options["pilot_bandwidth"], (2,)))


@pytest.mark.parametrize("name", list(CASES))
def test_sharp_conventional_neighbor_se(name):
    """The conventional estimate's default (neighbour) SE: sum a_i^2 sigma_i^2, brute-force neighbours."""
    frame, cutoff, pr, options, treated, weighted = _case(name)
    fit = _design(frame, cutoff, treated, weighted).fit(variance="neighbors", **options)
    y = frame.y.to_numpy()
    var = sum(np.sum(s.weights_conv ** 2 * neighbor_residuals(s.x, y[r])[:, 0] ** 2)
              for s, r in zip(pr.sides, pr.rows))
    # Reference: in-test computation (Abadie & Imbens 2006 neighbour variance, J = 3)
    assert_close(fit.estimate, float(jump(pr, y, robust=False)[0]), rtol=RTOL_EXACT, scale=np.sqrt(var),
                 what=f"{name} conventional estimate")
    assert_close(fit.std_error, np.sqrt(var), rtol=RTOL_EXACT, what=f"{name} conventional neighbour SE")


@pytest.mark.parametrize("name", ["linear-b>h", "linear-b<h", "pairs-below-weighted", "quadratic"])
def test_sharp_robust_cluster_se(name):
    frame, cutoff, pr, options, treated, weighted = _case(name)
    # The in-test reference is the classic CR1 sum (the bias-reduced CR2 default is checked against a
    # dense first-principles computation in test_cluster_small_sample.py).
    fit = _design(frame, cutoff, treated, weighted, cluster="g").fit(cluster_variance="classic", **options)
    y = frame.y.to_numpy()
    want = np.sqrt(robust_variance(pr, y, np.ones(1), "cluster", cluster=frame.g.to_numpy()))
    # Reference: in-test CR1 sum over clusters of l_i e_i (Cameron & Miller 2015)
    assert fit.variance == "cluster"
    assert_close(fit.robust_std_error, want, rtol=RTOL_EXACT, what=f"{name} robust cluster SE")
    assert_close(fit.bias_corrected_estimate, float(jump(pr, y)[0]), rtol=RTOL_EXACT, scale=want,
                 what=f"{name} bias-corrected estimate (clustered design)")


@pytest.mark.parametrize("variance", VARIANCES + ("cluster",))
@pytest.mark.parametrize("name", ["linear-b>h", "linear-b<h", "pairs-below-weighted"])
def test_fuzzy_robust_estimate_and_se(name, variance):
    """Ratio of the two bias-corrected jumps; its SE from the linearisation (Y - tau_bc D) / jump_bc(D)."""
    frame, cutoff, pr, options, treated, weighted = _case(name)
    extra = {"cluster": "g"} if variance == "cluster" else {}
    fit = _design(frame, cutoff, treated, weighted, takeup="d", **extra).fit(
        **({"cluster_variance": "classic"} if variance == "cluster" else {"variance": variance}), **options)
    values = frame[["y", "d"]].to_numpy()
    jy, jd = jump(pr, values)
    tau = jy / jd
    lam = np.array([1.0, -tau]) / jd
    want = np.sqrt(robust_variance(pr, values, lam, variance, cluster=frame.g.to_numpy()))
    # Reference: in-test computation (delta method of the ratio of jumps, common practice)
    assert fit.kind == "fuzzy"
    assert_close(fit.bias_corrected_estimate, tau, rtol=RTOL_EXACT, scale=want, what=f"{name}/{variance} fuzzy bc")
    assert_close(fit.robust_std_error, want, rtol=RTOL_EXACT, what=f"{name}/{variance} fuzzy robust SE")
    assert_close(fit.first_stage.bias_corrected_estimate, jd, rtol=RTOL_EXACT,
                 what=f"{name}/{variance} first-stage bc jump")


@pytest.mark.parametrize("variance", VARIANCES + ("cluster",))
@pytest.mark.parametrize("name", ["linear-b>h", "linear-b<h", "pairs-below-weighted", "quadratic"])
def test_covariate_adjusted_robust_estimate_se_and_coefficients(name, variance):
    """Additive covariates (CCFT 2019): gamma from the stacked kernel-weighted regression at h; the
    robust SE uses the estimator's exact linear weights on Y (including gamma's own dependence on Y)."""
    frame, cutoff, pr, options, treated, weighted = _case(name)
    extra = {"cluster": "g"} if variance == "cluster" else {}
    fit = _design(frame, cutoff, treated, weighted, covariates=["z1", "z2"], **extra).fit(
        adjust=True, **({"cluster_variance": "classic"} if variance == "cluster" else {"variance": variance}), **options)
    y, z = frame.y.to_numpy(), frame[["z1", "z2"]].to_numpy()
    adj = adjusted(pr, y, z)
    values = np.column_stack([y, z])
    lam = np.concatenate([[1.0], -adj.gamma])
    want = np.sqrt(robust_variance(pr, values, lam, variance, cluster=frame.g.to_numpy(),
                                   linear_weights=adj.linear_weights, n_covariates=2))
    # Reference: numpy least squares for gamma; in-test linear weights and residuals for the SE
    for got, exp in zip(fit.covariate_coefficients, adj.gamma):
        assert_close(got, exp, rtol=RTOL_EXACT, what=f"{name} covariate coefficient")
    assert len(fit.covariate_coefficients) == 2
    assert_close(fit.bias_corrected_estimate, adj.estimate, rtol=RTOL_EXACT, scale=want,
                 what=f"{name}/{variance} adjusted bc estimate")
    assert_close(fit.robust_std_error, want, rtol=RTOL_EXACT, what=f"{name}/{variance} adjusted robust SE")


def test_adjusted_linear_weights_reproduce_the_estimate():
    """Check of the reference itself: the adjusted estimate is exactly sum_i weight_i Y_i."""
    frame, cutoff, pr, *_ = _case("linear-b<h")
    y, z = frame.y.to_numpy(), frame[["z1", "z2"]].to_numpy()
    adj = adjusted(pr, y, z)
    linear = sum(lw @ y[r] for lw, r in zip(adj.linear_weights, pr.rows))
    assert linear == pytest.approx(adj.estimate, rel=1e-11)


def test_bias_correction_is_exact_for_a_degree_p_plus_one_curve():
    """First principles, at b != h: if Y is exactly a polynomial of degree p + 1 on each side, the
    degree-q fit at any pilot b recovers its x^(p+1) coefficient, so the bias-corrected estimate
    equals the true jump exactly while the conventional one does not. A wrong power of h/b fails."""
    frame, cutoff = make_data(8)
    x = frame.score.to_numpy() - cutoff
    curve = np.where(x >= 0, 1.0 + 0.5 * x - 2.0 * x ** 2, 0.2 - 0.3 * x + 3.0 * x ** 2)
    design = seamline.Design(frame.assign(y=curve), score="score", cutoff=cutoff, outcome="y")
    for h, b in ((0.3, 0.8), (0.7, 0.35)):
        fit = design.fit(bandwidth=h, pilot_bandwidth=b, degree=1)
        assert fit.bias_corrected_estimate == pytest.approx(0.8, abs=1e-10)   # true jump 1.0 - 0.2
        assert abs(fit.estimate - 0.8) > 1e-3
