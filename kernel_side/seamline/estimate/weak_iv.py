"""Weak-instrument-robust confidence sets for fuzzy designs (Feir, Lemieux & Marmer 2016).

The fit already holds the bias-corrected jumps in outcome and take-up and their robust covariance
(computed with the fit's own bandwidths, kernel, degree, pilot and variance); the set is the closed-
form inversion in ``seamline.core.weak_iv``.
"""
from __future__ import annotations

from scipy import stats

from ..core.weak_iv import robust_set
from ..errors import NotFuzzyError, shown
from ..options import check_level
from ..results.inference import WeakIVSet, set_shape

WEAK_F = 10.0   # common practice (Staiger & Stock 1997)


def weak_iv_conf_set(fit, level: float) -> WeakIVSet:
    """The set of tau0 not rejected by the sharp robust test on outcome - tau0 x take-up."""
    level = check_level(level)
    if fit.kind != "fuzzy" or fit.robust_jumps is None:
        raise NotFuzzyError(
            f"`fit` must be a fuzzy fit (a design with a take-up column that jumps at the cutoff) for a "
            f"weak-instrument-robust set; got a {fit.kind} fit of {shown(fit.outcome)}. Declare takeup=... in "
            "Design(...), or use the robust interval of the sharp fit.")
    j_y, j_d = fit.robust_jumps
    v_y, c, v_d = fit.robust_jump_covariance
    # A clustered fit with the bias-reduced variance uses t critical values; the set takes the degrees
    # of freedom of the fit's robust interval for every tau0 (they vary a little with tau0, so the
    # sharp test's own p-value at the set's ends is close to, not exactly, 1 - level there).
    dof = fit.dof[1]
    z = float(stats.norm.ppf(0.5 + level / 2.0) if dof is None else stats.t.ppf(0.5 + level / 2.0, dof))
    intervals = robust_set(j_y, j_d, v_y, c, v_d, z)
    f_stat = j_d * j_d / v_d if v_d > 0 else float("inf")
    warnings = []
    shape = set_shape(intervals)
    if f_stat < WEAK_F:
        warnings.append(f"Robust first-stage F = {f_stat:.1f} < {WEAK_F:g} (common practice): read this set, "
                        "not the Wald interval.")
    return WeakIVSet(outcome=fit.outcome, level=level, intervals=intervals,
                     bounded=shape == "interval", shape=shape, estimate=fit.bias_corrected_estimate,
                     wald_conf_int=fit.confidence_interval(level), first_stage_jump=j_d,
                     first_stage_f=float(f_stat), bandwidth=fit.bandwidth, pilot_bandwidth=fit.pilot_bandwidth,
                     kernel=fit.kernel, degree=fit.degree, variance=fit.variance, score=fit.score,
                     cutoff=fit.cutoff, treated=fit.treated, warnings=tuple(warnings))
