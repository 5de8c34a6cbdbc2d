"""Clustered fits put the bias fit at the main bandwidth (b = h).

Calonico, Cattaneo and Farrell (2018, JASA, "On the effect of bias estimation on coverage accuracy
in nonparametric inference") show that rho = h/b = 1 gives the robust bias-corrected interval good
coverage; seamline uses it for every clustered fit unless the user gives a pilot. The coverage and
interval length this buys are measured by tests/benchmarks/validate_clusters.py (`make validate`,
table in DEVELOPERS.md); here the rule itself is pinned, plus the identity it implies: with b = h
and a bias fit of degree p + 1, the bias-corrected estimate is the degree-(p + 1) local polynomial
jump at bandwidth h (Calonico, Cattaneo and Titiunik 2014, from memory), which statsmodels' WLS
computes independently. Test data are generated here (seeded): the clustered design of the benchmark.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

import seamline


def clustered(seed=3, n=1800, groups=40):
    rng = np.random.default_rng(seed)
    g = rng.integers(0, groups, n)
    x = rng.uniform(-1, 1, n)
    y = 0.5 * (x >= 0) + 0.8 * x - 0.5 * x ** 2 + rng.normal(0, 0.7, groups)[g] + rng.normal(0, 0.7, n)
    return pd.DataFrame({"x": x, "y": y, "g": g})


@pytest.fixture(scope="module")
def frame():
    return clustered()


@pytest.mark.parametrize("bandwidth", ["mse", "mse-split", "coverage", "ik", 0.4, (0.3, 0.5)])
def test_clustered_fits_use_the_main_bandwidth_for_the_bias_fit(frame, bandwidth):
    fit = seamline.Design(frame, score="x", cutoff=0.0, outcome="y", cluster="g").fit(bandwidth=bandwidth)
    assert fit.pilot_bandwidth == fit.bandwidth


def test_a_pilot_the_user_gives_is_kept(frame):
    fit = seamline.Design(frame, score="x", cutoff=0.0, outcome="y", cluster="g").fit(pilot_bandwidth=0.6)
    assert fit.pilot_bandwidth == (0.6, 0.6) and fit.bandwidth != (0.6, 0.6)


def test_a_pilot_rule_the_user_names_is_used_with_clusters(frame):
    design = seamline.Design(frame, score="x", cutoff=0.0, outcome="y", cluster="g")
    fit = design.fit(pilot_bandwidth="two-step")
    assert fit.pilot_rule == "two-step" and fit.pilot_bandwidth != fit.bandwidth
    assert design.fit().pilot_rule == "main bandwidth"


def test_unclustered_fits_keep_their_own_pilot_rule(frame):
    plain = seamline.Design(frame, score="x", cutoff=0.0, outcome="y").fit()
    assert plain.pilot_bandwidth[0] > plain.bandwidth[0] * 1.05      # the pilot's own MSE rule, not h


def test_bias_corrected_estimate_is_the_local_quadratic_jump_at_h(frame):
    fit = seamline.Design(frame, score="x", cutoff=0.0, outcome="y", cluster="g").fit()
    h = fit.bandwidth[0]
    intercepts = []
    for side in (frame[frame.x < 0], frame[frame.x >= 0]):
        w = np.clip(1 - np.abs(side.x.to_numpy()) / h, 0, None)      # triangular kernel weights
        keep = w > 0
        x = side.x.to_numpy()[keep]
        design = sm.add_constant(np.column_stack([x, x ** 2]))
        intercepts.append(sm.WLS(side.y.to_numpy()[keep], design, weights=w[keep]).fit().params[0])
    assert fit.bias_corrected_estimate == pytest.approx(intercepts[1] - intercepts[0], rel=1e-10)
