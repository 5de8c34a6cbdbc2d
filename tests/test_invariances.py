"""Invariances of the estimation engine on hypothesis-generated data (no outside reference needed).

Each property is exact in exact arithmetic, so the tolerance only absorbs rounding:
results are compared to RTOL_INV = 1e-8 relative (to the estimate's own SE where the estimate
could be near zero). Data: hypothesis draws the shape parameters and a seed; numpy's seeded
generator turns them into an invented sharp data set.
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import seamline

RTOL_INV = 1e-8
# Few examples, no deadline (a data-driven bandwidth takes milliseconds, not microseconds),
# derandomized so the suite is reproducible, and no example database written into the repo.
SETTINGS = settings(max_examples=20, deadline=None, derandomize=True, database=None)

RULES = ("mse", "mse-split", "coverage", "ik")


@st.composite
def datasets(draw):
    """An invented sharp data set with weights; returns (frame, cutoff)."""
    n = draw(st.integers(150, 600))
    seed = draw(st.integers(0, 2**32 - 1))
    cutoff = draw(st.floats(-50.0, 50.0, allow_nan=False))
    spread = draw(st.floats(0.5, 30.0))
    jump = draw(st.floats(-2.0, 2.0))
    slope = draw(st.floats(-3.0, 3.0))
    curve = draw(st.floats(-3.0, 3.0))
    noise = draw(st.floats(0.1, 2.0))
    share_below = draw(st.floats(0.3, 0.7))
    rng = np.random.default_rng(seed)
    below = rng.uniform(-1.0, 0.0, n)
    above = rng.uniform(0.0, 1.0, n)
    u = np.where(rng.uniform(size=n) < share_below, below, above)
    score = cutoff + spread * u
    t = (score >= cutoff).astype(float)
    y = 1.0 + slope * u + curve * u**2 + jump * t + noise * rng.normal(size=n)
    w = rng.uniform(0.2, 3.0, n)
    return pd.DataFrame({"score": score, "y": y, "w": w}), cutoff


def _design(frame, cutoff, *, treated="above", weights=True, score="score", outcome="y"):
    return seamline.Design(frame, score=score, cutoff=cutoff, outcome=outcome, treated=treated,
                           weights="w" if weights else None)


def _close(a, b, scale, what):
    tol = RTOL_INV * max(abs(b), abs(scale))
    assert abs(a - b) <= tol, f"{what}: {a!r} vs {b!r} (|diff| {abs(a - b):.3e} > {tol:.3e})"


def _same_fit(a, b, what, *, est_factor=1.0, se_factor=1.0, bw_factor=1.0):
    """a's numbers equal b's after the stated transformation."""
    _close(a.estimate, est_factor * b.estimate, se_factor * b.std_error, f"{what} estimate")
    _close(a.std_error, se_factor * b.std_error, 0.0, f"{what} std_error")
    _close(a.bias_corrected_estimate, est_factor * b.bias_corrected_estimate,
           se_factor * b.robust_std_error, f"{what} bias_corrected_estimate")
    _close(a.robust_std_error, se_factor * b.robust_std_error, 0.0, f"{what} robust_std_error")
    for side in (0, 1):
        _close(a.bandwidth[side], bw_factor * b.bandwidth[side], 0.0, f"{what} bandwidth[{side}]")
        _close(a.pilot_bandwidth[side], bw_factor * b.pilot_bandwidth[side], 0.0,
               f"{what} pilot_bandwidth[{side}]")
    assert tuple(a.n_used) == tuple(b.n_used), f"{what} n_used"


@SETTINGS
@given(data=datasets(), order_seed=st.integers(0, 2**32 - 1))
def test_row_order_does_not_matter(data, order_seed):
    frame, cutoff = data
    shuffled = frame.sample(frac=1.0, random_state=np.random.default_rng(order_seed))
    for kwargs in ({}, {"bandwidth": "ik", "kernel": "epanechnikov", "variance": "hc2"}):
        a = _design(shuffled, cutoff).fit(**kwargs)
        b = _design(frame, cutoff).fit(**kwargs)
        _same_fit(a, b, f"shuffled {kwargs}")


@SETTINGS
@given(data=datasets(), factor=st.floats(1e-3, 1e3))
def test_weights_times_a_constant(data, factor):
    frame, cutoff = data
    scaled = frame.assign(w=frame["w"] * factor)
    for kwargs in ({}, {"bandwidth": "coverage", "variance": "hc1"}):
        a = _design(scaled, cutoff).fit(**kwargs)
        b = _design(frame, cutoff).fit(**kwargs)
        _same_fit(a, b, f"weights*{factor:g} {kwargs}")


@pytest.mark.parametrize("rule", RULES + ("manual",))
@settings(max_examples=15, deadline=None, derandomize=True, database=None)
@given(data=datasets(), units=st.floats(1e-3, 1e4).filter(lambda k: abs(math.log2(k) % 1) > 1e-6))
def test_score_units(rule, data, units):
    """score and cutoff times k: same estimate and SEs, every bandwidth times k (powers of two are
    filtered out because they scale floats exactly and would make the check too easy)."""
    frame, cutoff = data
    big = frame.assign(score=frame["score"] * units)
    spread = float(frame["score"].max() - frame["score"].min())
    bw_small = 0.4 * spread if rule == "manual" else rule
    bw_big = 0.4 * spread * units if rule == "manual" else rule
    a = _design(big, cutoff * units).fit(bandwidth=bw_big)
    b = _design(frame, cutoff).fit(bandwidth=bw_small)
    _same_fit(a, b, f"score*{units:g} ({rule})", bw_factor=units)
    # a derivative is in outcome units per score unit: divided by k
    if rule in ("mse", "manual"):
        a1 = _design(big, cutoff * units).fit(bandwidth=bw_big, degree=2, derivative=1)
        b1 = _design(frame, cutoff).fit(bandwidth=bw_small, degree=2, derivative=1)
        _same_fit(a1, b1, f"derivative, score*{units:g} ({rule})", est_factor=1 / units,
                  se_factor=1 / units, bw_factor=units)


@SETTINGS
@given(data=datasets(), shift=st.floats(-100.0, 100.0),
       stretch=st.floats(-5.0, 5.0).filter(lambda b: abs(b) > 0.05))
def test_affine_outcome(data, shift, stretch):
    """a + b*y: estimates times b, SEs times |b|, bandwidths unchanged (the MSE criterion scales
    by b^2 in both bias and variance)."""
    frame, cutoff = data
    moved = frame.assign(y=shift + stretch * frame["y"])
    for kwargs in ({}, {"bandwidth": 0.3 * float(frame["score"].std()), "variance": "hc3"}):
        a = _design(moved, cutoff).fit(**kwargs)
        b = _design(frame, cutoff).fit(**kwargs)
        _same_fit(a, b, f"{shift:g} + {stretch:g} y {kwargs}", est_factor=stretch,
                  se_factor=abs(stretch))
        low, high = a.robust_conf_int
        b_low, b_high = b.robust_conf_int
        if stretch < 0:
            b_low, b_high = b_high, b_low
        _close(low, stretch * b_low, abs(stretch) * b.robust_std_error, "robust_conf_int low")
        _close(high, stretch * b_high, abs(stretch) * b.robust_std_error, "robust_conf_int high")


@SETTINGS
@given(data=datasets())
def test_swapping_treated_side_flips_the_sign(data):
    frame, cutoff = data
    for kwargs in ({}, {"bandwidth": "mse-split", "degree": 2, "variance": "hc1"}):
        a = _design(frame, cutoff, treated="below").fit(**kwargs)
        b = _design(frame, cutoff, treated="above").fit(**kwargs)
        _same_fit(a, b, f"treated below vs above {kwargs}", est_factor=-1.0)
        assert a.treated == "below" and b.treated == "above"
        _close(a.conf_int[0], -b.conf_int[1], b.std_error, "conf_int low")
        _close(a.robust_conf_int[1], -b.robust_conf_int[0], b.robust_std_error, "robust_conf_int high")
        _close(a.p_value, b.p_value, 1e-300, "p_value")
        # the fitted boundary values do not depend on which side is called treated
        _close(a.limits[0], b.limits[0], b.std_error, "limits below")
        _close(a.limits[1], b.limits[1], b.std_error, "limits above")
