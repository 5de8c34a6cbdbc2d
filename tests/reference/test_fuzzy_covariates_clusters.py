"""Fuzzy designs with covariate adjustment and with clusters, against linearmodels IV2SLS.

Reference: linearmodels IV2SLS of the local fuzzy design (dependent Y, endogenous take-up D, excluded
instrument T = 1{treated side}, exogenous = [1, 1{below} u..u^p, 1{above} u..u^p, Z], weights =
user weight * K(u), rows with positive weight). With additive covariates the 2SLS coefficient on D
is the ratio of the covariate-adjusted jumps (both partial out the same exogenous columns), and its
HC0 sandwich is the engine's linearised variance with the covariate-adjusted smoother weights.
Cluster-robust: linearmodels' clustered covariance with debiased=True scales by
G (N-1) / ((G-1) (N-k)), the usual CR1 factor (Cameron & Miller 2015), with k the number of
exogenous and endogenous regressors.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from _references import RTOL, assert_close, build_window

import seamline
import linearmodels.iv as linearmodels_iv


def make_data(seed: int, n: int = 1800) -> tuple[pd.DataFrame, float]:
    """Invented test input (the reference values come from linearmodels, not from this generator)."""
    rng = np.random.default_rng(seed)
    cutoff = 1.0
    score = cutoff + rng.uniform(-1.2, 1.2, n)
    x = score - cutoff
    z1 = rng.normal(size=n) + 0.3 * x
    z2 = rng.binomial(1, 0.4, n).astype(float)
    d = (rng.uniform(size=n) < np.clip(0.2 + 0.5 * (x >= 0) + 0.1 * z1, 0, 1)).astype(float)
    y = 1 + 0.6 * x - 0.3 * x ** 2 + 1.5 * d + 0.8 * z1 - 0.5 * z2 + rng.normal(0, 0.6, n)
    cluster = rng.integers(0, 60, n)
    w = rng.uniform(0.5, 2.0, n)
    return pd.DataFrame({"score": score, "y": y, "d": d, "z1": z1, "z2": z2, "g": cluster, "w": w}), cutoff


def iv_fit(frame, cutoff, bandwidth, degree, *, covariates=False, weights=False, cluster=False):
    z = frame[["z1", "z2"]].to_numpy() if covariates else None
    win = build_window(frame.score.to_numpy(), cutoff, bandwidth, "triangular", degree,
                       frame.w.to_numpy() if weights else None, z)
    p = degree
    cols = [np.ones(len(win.u)), win.design[:, 1:p + 1], win.design[:, p + 2:2 * p + 2]]
    if covariates:
        cols.append(win.design[:, 2 * p + 2:])
    exog = np.column_stack(cols)
    model = linearmodels_iv.IV2SLS(dependent=frame.y.to_numpy()[win.keep], exog=exog,
                                   endog=frame.d.to_numpy()[win.keep],
                                   instruments=win.above.astype(float), weights=win.weight)
    if cluster:
        res = model.fit(cov_type="clustered", clusters=frame.g.to_numpy()[win.keep], debiased=True)
        return float(res.params.iloc[-1]), float(res.std_errors.iloc[-1])
    res = model.fit(cov_type="robust", debiased=False)
    return float(res.params.iloc[-1]), float(res.std_errors.iloc[-1])


@pytest.mark.parametrize("degree", [1, 2])
@pytest.mark.parametrize("weights", [False, True])
@pytest.mark.parametrize("seed", [1, 2])
def test_fuzzy_with_covariates_matches_iv2sls(degree, weights, seed):
    frame, cutoff = make_data(seed)
    design = seamline.Design(frame, score="score", cutoff=cutoff, outcome="y", takeup="d",
                             covariates=["z1", "z2"], weights="w" if weights else None)
    fit = design.fit(bandwidth=0.7, degree=degree, variance="hc0", adjust=True)
    est, se = iv_fit(frame, cutoff, 0.7, degree, covariates=True, weights=weights)
    assert fit.kind == "fuzzy" and fit.adjusted
    assert_close(fit.estimate, est, what="adjusted fuzzy estimate")
    assert_close(fit.std_error, se, what="adjusted fuzzy HC0 SE")


@pytest.mark.parametrize("degree", [1, 2])
@pytest.mark.parametrize("covariates", [False, True])
@pytest.mark.parametrize("bandwidth", [0.8, (0.6, 0.9)])
def test_fuzzy_with_clusters_matches_iv2sls(degree, covariates, bandwidth):
    frame, cutoff = make_data(3)
    design = seamline.Design(frame, score="score", cutoff=cutoff, outcome="y", takeup="d",
                             covariates=["z1", "z2"], cluster="g")
    # linearmodels' clustered covariance with debiased=True is CR1: the "classic" correction.
    fit = design.fit(bandwidth=bandwidth, degree=degree, adjust=covariates, cluster_variance="classic")
    est, se = iv_fit(frame, cutoff, bandwidth, degree, covariates=covariates, cluster=True)
    assert fit.variance == "cluster"
    assert_close(fit.estimate, est, what="clustered fuzzy estimate")
    assert_close(fit.std_error, se, what="clustered fuzzy SE")
