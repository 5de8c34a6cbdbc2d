"""Fuzzy designs against linearmodels IV2SLS and statsmodels WLS.

References (run live):
- linearmodels ``IV2SLS`` on the kernel-weighted window (Hahn, Todd & Van der Klaauw 2001: the ratio
  of jumps is a local 2SLS with instrument T = 1{treated side}); its ``cov_type="robust",
  debiased=False`` SE is the HC0 sandwich of the weighted 2SLS, which equals the linearised variance
  (checked below with statsmodels).
- statsmodels ``WLS`` for the first stage (the take-up jump), as in test_statsmodels_wls.py.
Tolerance: RTOL = 1e-8 relative (declared in _references).

Input data are invented by the seeded generator below.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from _references import KERNELS, assert_close, iv_reference, wls_reference

import seamline


def make_fuzzy(seed: int = 5, n: int = 1500, treated: str = "above") -> tuple[pd.DataFrame, float]:
    """Invented fuzzy data: take-up probability jumps by ~0.55 on the treated side."""
    rng = np.random.default_rng(seed)
    cutoff = 2.0
    score = cutoff + rng.uniform(-1.5, 1.0, n)
    x = score - cutoff
    t = (x >= 0) if treated == "above" else (x < 0)
    p_take = np.clip(0.15 + 0.55 * t + 0.1 * x, 0.0, 1.0)
    d = (rng.uniform(size=n) < p_take).astype(float)
    y = 0.5 + 0.7 * x - 0.4 * x**2 + 1.25 * d + rng.normal(0.0, 0.5 + 0.2 * d, n)
    w = rng.uniform(0.5, 2.0, n)
    return pd.DataFrame({"score": score, "y": y, "d": d, "w": w}), cutoff


# (bandwidth, treated side)
CASES = {
    "common-above": (0.6, "above"),
    "pair-above": ((0.8, 0.5), "above"),
    "pair-below": ((0.7, 0.55), "below"),
}


def _fit(frame, cutoff, treated, *, weights, **kwargs):
    design = seamline.Design(frame, score="score", cutoff=cutoff, outcome="y", treated=treated,
                             takeup="d", weights="w" if weights else None)
    return design.fit(**kwargs)


class TestReferenceItself:
    """linearmodels and statsmodels agree on the fuzzy identities (ratio of jumps; linearised HC0 variance)."""

    @pytest.mark.parametrize("degree", [0, 1, 2])
    @pytest.mark.parametrize("case", list(CASES))
    def test_ratio_and_linearised_variance(self, case, degree):
        bandwidth, treated = CASES[case]
        frame, cutoff = make_fuzzy(treated=treated)
        s, y, d, w = (frame[c].to_numpy() for c in ("score", "y", "d", "w"))
        iv = iv_reference(s, y, d, cutoff, bandwidth, degree=degree, treated=treated, weights=w)
        jy = wls_reference(s, y, cutoff, bandwidth, degree=degree, treated=treated, weights=w)
        jd = wls_reference(s, d, cutoff, bandwidth, degree=degree, treated=treated, weights=w)
        # 6.1: the 2SLS coefficient is the ratio of the two jumps
        assert iv.estimate == pytest.approx(jy.estimate / jd.estimate, rel=1e-10)
        # 6.2: HC0 variance of the ratio = HC0 variance of the jump of Y - tau*D, over jump(D)^2
        lin = wls_reference(s, y - iv.estimate * d, cutoff, bandwidth, degree=degree,
                            treated=treated, weights=w, cov_type="hc0")
        assert iv.std_error == pytest.approx(lin.std_error / abs(jd.estimate), rel=1e-10)


@pytest.mark.parametrize("weights", [False, True], ids=["unweighted", "weighted"])
@pytest.mark.parametrize("degree", [0, 1, 2])
@pytest.mark.parametrize("kernel", KERNELS)
@pytest.mark.parametrize("case", list(CASES))
def test_fuzzy_matches_iv2sls(case, kernel, degree, weights):
    bandwidth, treated = CASES[case]
    frame, cutoff = make_fuzzy(treated=treated)
    fit = _fit(frame, cutoff, treated, weights=weights, bandwidth=bandwidth, kernel=kernel,
               degree=degree, variance="hc0")
    s, y, d = (frame[c].to_numpy() for c in ("score", "y", "d"))
    w = frame["w"].to_numpy() if weights else None
    what = f"{case}/{kernel}/p={degree}/w={weights}"

    iv = iv_reference(s, y, d, cutoff, bandwidth, kernel=kernel, degree=degree, treated=treated,
                      weights=w)
    assert fit.kind == "fuzzy"
    assert_close(fit.estimate, iv.estimate, scale=iv.std_error, what=f"{what} estimate")
    assert_close(fit.std_error, iv.std_error, what=f"{what} hc0 std_error (IV2SLS robust, unadjusted)")

    # first stage: the take-up jump as a sharp WLS fit of D (statsmodels), same kernel/bandwidth
    fs_ref = wls_reference(s, d, cutoff, bandwidth, kernel=kernel, degree=degree, treated=treated,
                           weights=w, cov_type="hc0")
    assert fit.first_stage is not None
    assert_close(fit.first_stage.estimate, fs_ref.estimate, scale=fs_ref.std_error,
                 what=f"{what} first_stage.estimate")
    assert_close(fit.first_stage.std_error, fs_ref.std_error, what=f"{what} first_stage.std_error")
    # common practice: F = squared t-statistic of the first-stage jump (one instrument)
    assert_close(fit.first_stage_f, (fs_ref.estimate / fs_ref.std_error) ** 2,
                 what=f"{what} first_stage_f")


@pytest.mark.parametrize("treated", ["above", "below"])
@pytest.mark.parametrize("degree", [1, 2])
def test_takeup_equal_to_assignment_is_sharp(treated, degree):
    """A take-up column equal to assignment everywhere gives a sharp fit (issue 2 section 3),
    whose numbers are those of the sharp WLS reference (statsmodels)."""
    frame, cutoff = make_fuzzy(treated=treated)
    x = frame["score"] - cutoff
    assigned = (x >= 0) if treated == "above" else (x < 0)
    frame = frame.assign(d=assigned.astype(float))
    fit = _fit(frame, cutoff, treated, weights=True, bandwidth=0.6, degree=degree, variance="hc1")
    assert fit.kind == "sharp"
    ref = wls_reference(frame["score"].to_numpy(), frame["y"].to_numpy(), cutoff, 0.6, degree=degree,
                        treated=treated, weights=frame["w"].to_numpy(), cov_type="hc1")
    assert_close(fit.estimate, ref.estimate, scale=ref.std_error, what="sharp-by-takeup estimate")
    assert_close(fit.std_error, ref.std_error, what="sharp-by-takeup std_error")


def test_fuzzy_estimate_does_not_depend_on_side_label():
    """Numerator and denominator flip together, so the ratio is the same whichever side is named
    treated (IV2SLS reference gives the same number with either instrument)."""
    frame, cutoff = make_fuzzy()
    above = _fit(frame, cutoff, "above", weights=False, bandwidth=0.6, variance="hc0")
    below = _fit(frame, cutoff, "below", weights=False, bandwidth=0.6, variance="hc0")
    assert_close(below.estimate, above.estimate, scale=above.std_error, what="fuzzy side swap")
    assert_close(below.std_error, above.std_error, what="fuzzy side swap SE")
    assert_close(below.first_stage.estimate, -above.first_stage.estimate,
                 scale=above.first_stage.std_error, what="first stage flips sign")
