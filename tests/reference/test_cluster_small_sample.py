"""Bias-reduced cluster-robust variance (CR2) and Bell-McCaffrey degrees of freedom.

References (computed inside the test, with dense matrices and no seamline code):
- CR2: Bell and McCaffrey (2002, Survey Methodology 28(2)): V = sum_g (c_g' B_g^(-1/2) e_g)^2 with
  B_g = [(I - H)(I - H)']_gg, for the weighted regression of the fully interacted window design
  (Pustejovsky and Tipton 2018, JBES 36(4), for the weighted form with working model Phi = I).
- Degrees of freedom: Bell and McCaffrey (2002) / Imbens and Kolesar (2016, REStat 98(4)):
  df = (sum lambda)^2 / sum lambda^2, lambda the eigenvalues of G'G with
  G_g = (I - H)'_{., g} B_g^(-1/2) c_g.
- The robust (bias-corrected) interval at pilot b = h with bias degree p + 1 is the degree-(p+1)
  fit at h (Calonico, Cattaneo and Titiunik 2014, common practice), so its CR2 variance is the
  dense CR2 of that fit.
- t critical values: scipy.stats.t.ppf.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import seamline

from _references import build_window, contrast, wls_reference

RTOL = 1e-9


def clustered_data(n=900, groups=25, seed=5, big=False):
    """Test data generated here: cluster shocks shared across the cutoff, some one-sided clusters."""
    rng = np.random.default_rng(seed)
    x = rng.uniform(-1, 1, n)
    g = rng.integers(0, groups, n)
    if big:       # two large clusters (dozens of rows inside the window: the low-rank path)
        g[: n // 3] = groups
        g[n // 3: n // 2] = groups + 1
    g[x > 0.8] = groups + 2                          # a cluster only above the cutoff
    shock = rng.normal(0, 0.6, groups + 3)[g]
    y = 0.4 * (x >= 0) + 0.7 * x - 0.3 * x ** 2 + shock + rng.normal(0, 0.6, n)
    w = rng.uniform(0.5, 2.0, n)
    return pd.DataFrame({"x": x, "y": y, "g": g, "w": w})


def dense_cr2(frame, bandwidth, kernel, degree, weights):
    """CR2 variance of the jump and its Bell-McCaffrey degrees of freedom, by dense linear algebra."""
    win = build_window(frame["x"].to_numpy(), 0.0, bandwidth, kernel, degree,
                       frame["w"].to_numpy() if weights else None)
    x_mat, w = win.design, win.weight
    y = frame["y"].to_numpy()[win.keep]
    cl = frame["g"].to_numpy()[win.keep]
    xtwx_inv = np.linalg.inv((x_mat * w[:, None]).T @ x_mat)
    c = contrast(win, 0, "above")[2] @ xtwx_inv @ (x_mat * w[:, None]).T      # estimator weights
    hat = x_mat @ xtwx_inv @ (x_mat * w[:, None]).T
    resid_maker = np.eye(len(y)) - hat
    e = resid_maker @ y
    omega = resid_maker @ resid_maker.T
    variance, columns = 0.0, []
    for g in np.unique(cl):
        idx = np.flatnonzero(cl == g)
        lam, vec = np.linalg.eigh(omega[np.ix_(idx, idx)])
        inv_sqrt = vec @ np.diag(np.where(lam > 1e-10, 1 / np.sqrt(np.maximum(lam, 1e-10)), 0.0)) @ vec.T
        v = inv_sqrt @ c[idx]
        variance += float(v @ e[idx]) ** 2
        columns.append(resid_maker[idx, :].T @ v)
    gram = np.array(columns) @ np.array(columns).T
    dof = np.trace(gram) ** 2 / np.sum(gram * gram)
    return variance, dof


@pytest.mark.parametrize("big", [False, True], ids=["small-clusters", "large-clusters"])
@pytest.mark.parametrize("kernel,degree,bandwidth,weights", [
    ("triangular", 1, 0.5, False),
    ("uniform", 0, 0.3, True),
    ("epanechnikov", 2, (0.45, 0.7), True),
])
def test_conventional_cr2_and_degrees_of_freedom(kernel, degree, bandwidth, weights, big):
    frame = clustered_data(big=big)
    design = seamline.Design(frame, score="x", cutoff=0.0, outcome="y", cluster="g",
                             weights="w" if weights else None)
    fit = design.fit(bandwidth=bandwidth, kernel=kernel, degree=degree)
    variance, dof = dense_cr2(frame, bandwidth, kernel, degree, weights)
    assert fit.std_error == pytest.approx(np.sqrt(variance), rel=RTOL)
    assert fit.dof[0] == pytest.approx(dof, rel=RTOL)
    assert fit.cluster_variance == "bias-reduced"
    # Reference: scipy.stats.t.ppf for the interval, scipy.stats.t.sf for the p-value
    t = stats.t.ppf(0.975, dof)
    assert fit.conf_int == pytest.approx((fit.estimate - t * fit.std_error, fit.estimate + t * fit.std_error),
                                         rel=1e-12)
    assert fit.p_value == pytest.approx(2 * stats.t.sf(abs(fit.estimate / fit.std_error), dof), rel=1e-10)


@pytest.mark.parametrize("kernel", ["triangular", "uniform"])
def test_robust_cr2_at_equal_pilot_is_the_cr2_of_the_higher_degree_fit(kernel):
    frame = clustered_data(seed=9)
    design = seamline.Design(frame, score="x", cutoff=0.0, outcome="y", cluster="g")
    fit = design.fit(bandwidth=0.6, pilot_bandwidth=0.6, kernel=kernel, degree=1)
    variance, dof = dense_cr2(frame, 0.6, kernel, 2, False)
    assert fit.robust_std_error == pytest.approx(np.sqrt(variance), rel=RTOL)
    assert fit.dof[1] == pytest.approx(dof, rel=RTOL)
    t = stats.t.ppf(0.975, dof)
    lo, hi = fit.robust_conf_int
    assert (hi - lo) / 2 == pytest.approx(t * fit.robust_std_error, rel=1e-12)


@pytest.mark.parametrize("kernel,degree,bandwidth,weights", [
    ("triangular", 1, 0.5, False),
    ("epanechnikov", 2, (0.45, 0.7), True),
])
def test_one_row_per_cluster_takes_the_vectorised_path_and_matches_dense_cr2(kernel, degree, bandwidth, weights):
    """One cluster per observation (the HC2 analogue with Bell-McCaffrey degrees of freedom that
    Imbens and Kolesar 2016 recommend without clusters): same dense reference as above."""
    frame = clustered_data(n=400, seed=11)
    frame["g"] = np.arange(len(frame))
    design = seamline.Design(frame, score="x", cutoff=0.0, outcome="y", cluster="g",
                             weights="w" if weights else None)
    fit = design.fit(bandwidth=bandwidth, kernel=kernel, degree=degree)
    variance, dof = dense_cr2(frame, bandwidth, kernel, degree, weights)
    assert fit.std_error == pytest.approx(np.sqrt(variance), rel=RTOL)
    assert fit.dof[0] == pytest.approx(dof, rel=RTOL)


def test_one_row_per_cluster_with_a_uniform_kernel_is_hc2_of_statsmodels():
    # Reference: statsmodels (`wls_reference`, unit weights) with cov_type="HC2" on the window's
    # interacted regression (uniform kernel, no weights: the CR2 of singleton clusters is exactly
    # HC2, Bell and McCaffrey 2002).
    frame = clustered_data(n=400, seed=12)
    frame["g"] = np.arange(len(frame))
    fit = seamline.Design(frame, score="x", cutoff=0.0, outcome="y", cluster="g").fit(
        bandwidth=0.5, kernel="uniform")
    ref = wls_reference(frame.x, frame.y, 0.0, 0.5, kernel="uniform", cov_type="hc2")
    assert fit.estimate == pytest.approx(ref.estimate, rel=1e-10)
    assert fit.std_error == pytest.approx(ref.std_error, rel=1e-9)


@pytest.mark.parametrize("kernel,degree,bandwidth,weights", [
    ("triangular", 1, 0.5, False),
    ("epanechnikov", 2, (0.45, 0.7), True),
    ("uniform", 0, (0.35, 0.6), True),
])
def test_unclustered_bias_reduced_variance_is_cr2_of_single_rows_with_t_critical_values(kernel, degree, bandwidth,
                                                                                        weights):
    """variance="bias-reduced" without clusters: the dense CR2 of one-row clusters (Bell and McCaffrey
    2002; Imbens and Kolesar 2016) and scipy.stats.t critical values on its degrees of freedom."""
    frame = clustered_data(n=400, seed=13)
    singles = frame.assign(g=np.arange(len(frame)))
    fit = seamline.Design(frame, score="x", cutoff=0.0, outcome="y", weights="w" if weights else None).fit(
        bandwidth=bandwidth, kernel=kernel, degree=degree, variance="bias-reduced")
    variance, dof = dense_cr2(singles, bandwidth, kernel, degree, weights)
    assert fit.std_error == pytest.approx(np.sqrt(variance), rel=RTOL)
    assert fit.dof[0] == pytest.approx(dof, rel=RTOL)
    t = stats.t.ppf(0.975, dof)
    assert fit.conf_int == pytest.approx((fit.estimate - t * fit.std_error, fit.estimate + t * fit.std_error),
                                         rel=1e-12)
    robust_variance, robust_dof = dense_cr2(singles, bandwidth, kernel, degree + 1, weights)
    at_equal_pilot = seamline.Design(frame, score="x", cutoff=0.0, outcome="y",
                                     weights="w" if weights else None).fit(
        bandwidth=bandwidth, pilot_bandwidth=bandwidth, kernel=kernel, degree=degree, variance="bias-reduced")
    assert at_equal_pilot.robust_std_error == pytest.approx(np.sqrt(robust_variance), rel=RTOL)
    assert at_equal_pilot.dof[1] == pytest.approx(robust_dof, rel=RTOL)


def test_unclustered_bias_reduced_selects_the_default_bandwidths():
    frame = clustered_data(n=600, seed=14)
    design = seamline.Design(frame, score="x", cutoff=0.0, outcome="y")
    default, reduced = design.fit(), design.fit(variance="bias-reduced")
    assert reduced.bandwidth == default.bandwidth and reduced.pilot_bandwidth == default.pilot_bandwidth
    assert reduced.estimate == default.estimate and reduced.variance == "bias-reduced"
    assert "degrees of freedom" in " ".join(reduced.notes())


def test_degrees_of_freedom_lie_below_the_number_of_clusters_and_grow_with_it():
    # Bell-McCaffrey degrees of freedom never exceed G - 1 for a contrast (Imbens and Kolesar 2016).
    dofs = []
    for groups in (8, 30, 120):
        frame = clustered_data(n=1500, groups=groups, seed=3)
        fit = seamline.Design(frame, score="x", cutoff=0.0, outcome="y", cluster="g").fit(bandwidth=0.5)
        assert 1.0 < fit.dof[1] <= fit.n_clusters - 1
        dofs.append(fit.dof[1])
    assert dofs[0] < dofs[1] < dofs[2]


def test_classic_keeps_cr1_with_normal_critical_values():
    frame = clustered_data()
    design = seamline.Design(frame, score="x", cutoff=0.0, outcome="y", cluster="g")
    fit = design.fit(bandwidth=0.5, cluster_variance="classic")
    assert fit.dof == (None, None)
    z = stats.norm.ppf(0.975)
    lo, hi = fit.robust_conf_int
    assert (hi - lo) / 2 == pytest.approx(z * fit.robust_std_error, rel=1e-12)
    assert "classic CR1" in fit.notes()[0]


def test_a_fuzzy_design_uses_cr2_for_the_ratio_and_the_first_stage():
    frame = clustered_data(seed=12)
    rng = np.random.default_rng(1)
    frame["d"] = (rng.uniform(size=len(frame)) < np.where(frame["x"] >= 0, 0.8, 0.2)).astype(float)
    design = seamline.Design(frame, score="x", cutoff=0.0, outcome="y", takeup="d", cluster="g")
    fit = design.fit(bandwidth=0.5)
    assert fit.dof[0] is not None and fit.dof[1] is not None
    assert fit.first_stage.dof[0] is not None
    # The first stage is the sharp jump in take-up: the same CR2 as a sharp design on "d".
    sharp = seamline.Design(frame, score="x", cutoff=0.0, outcome="d", cluster="g").fit(bandwidth=0.5)
    assert fit.first_stage.std_error == pytest.approx(sharp.std_error, rel=1e-10)
    assert fit.first_stage.dof[0] == pytest.approx(sharp.dof[0], rel=1e-10)


def test_unclustered_fits_have_no_cluster_variance_and_normal_critical_values_off_the_default():
    frame = clustered_data()
    design = seamline.Design(frame, score="x", cutoff=0.0, outcome="y")
    for variance in ("neighbors", "hc0", "hc1", "hc2", "hc3"):
        fit = design.fit(bandwidth=0.5, variance=variance)
        assert fit.dof == (None, None) and fit.cluster_variance is None
    default = design.fit(bandwidth=0.5)     # the default: bias-reduced, t critical values
    assert default.variance == "bias-reduced" and default.cluster_variance is None
    assert all(d is not None and d > 1 for d in default.dof)


def test_unknown_cluster_variance_is_refused():
    design = seamline.Design(clustered_data(), score="x", cutoff=0.0, outcome="y", cluster="g")
    with pytest.raises(seamline.errors.InvalidOptionError, match='`cluster_variance` must be one of "bias-reduced"'):
        design.fit(cluster_variance="cr3")
