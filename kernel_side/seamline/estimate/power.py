"""Power and sample size of the robust bias-corrected test, with the design as pilot data.

The pilot is the design's fit with the given options (default: the default fit); each function
also accepts that Fit itself in place of the design (a board passes the main fit it already has). Its robust
standard error se_0 at n_0 usable observations is scaled to another total size n by
se(n) = se_0 (n_0 / n)^gamma (seamline.core.power): "fixed-bandwidth" keeps the pilot's bandwidths
(gamma = 1/2); "reselected-bandwidth" (default) assumes the bandwidths are re-selected at the new n
at the rate of the pilot's rule (gamma = 2/5 for the local linear MSE-optimal rule). The numbers of
observations inside the window grow like n (fixed) or n^(1 - r) with h ~ n^(-r) (re-selected),
assuming the density near the cutoff stays as in the pilot.
"""
from __future__ import annotations

import math
from numbers import Real

import numpy as np
from scipy import stats

from ..core.power import (bandwidth_rate, power_of_test, required_n, scaled_std_error, se_exponent,
                          window_growth)
from ..errors import InvalidEffectError, InvalidOptionError, shown
from ..options import POWER_SCALINGS, check_level, check_option
from ..results.fit import Fit
from ..results.power import Power, PowerCurve, SampleSize

CURVE_POINTS = 25
CURVE_TOP_POWER = 0.99      # the default curve runs from no effect to about this power
FEW_IN_WINDOW = 20          # common practice: the normal approximation is poor with fewer per side


def _plan(pilot, level, scaling, fit_options) -> dict:
    """The pilot's numbers; ``pilot`` is a Design (fitted with ``fit_options``) or its Fit already made."""
    level = check_level(level)
    scaling = check_option("scaling", scaling, POWER_SCALINGS)
    fit = pilot if isinstance(pilot, Fit) else pilot.fit(**fit_options)
    se0 = fit.robust_std_error
    if not (np.isfinite(se0) and se0 > 0):
        raise InvalidOptionError(f"the pilot fit's robust standard error must be positive; got {shown(se0)}. Check "
                                 "the outcome varies near the cutoff and try another bandwidth.")
    warnings = [f"Pilot fit: {w}" for w in fit.warnings]
    if scaling == "reselected-bandwidth" and fit.bandwidth_rule == "manual":
        warnings.append("The pilot's bandwidth was set by hand; \"reselected-bandwidth\" assumes it is re-selected "
                        "at the MSE-optimal rate at the new sample size. Use scaling=\"fixed-bandwidth\" to keep it.")
    if fit.kind == "fuzzy":
        warnings.append("Fuzzy design: the effect is on the scale of the ratio (the local average effect of the "
                        "treatment received); with a weak first stage the normal approximation behind power fails.")
    rule, degree = fit.bandwidth_rule, fit.degree
    return dict(level=level, n_pilot=int(sum(fit.n_total)), pilot_sides=tuple(int(v) for v in fit.n_total),
                pilot_std_error=float(se0),
                pilot_window=tuple(int(v) for v in fit.n_used), pilot_bandwidth=tuple(fit.bandwidth),
                scaling=scaling, exponent=se_exponent(scaling, rule, degree, fit.derivative),
                bandwidth_rate=0.0 if scaling == "fixed-bandwidth" else bandwidth_rate(rule, degree),
                outcome=fit.outcome, warnings=warnings, _growth=window_growth(scaling, rule, degree))


def _total(n, n_pilot: int) -> int:
    if n is None:
        return n_pilot
    if isinstance(n, Real) and not isinstance(n, bool) and np.isfinite(n) and n >= 10 and float(n) == int(n):
        return int(n)
    raise InvalidOptionError(f"`n` must be a whole number of observations (at least 10); got {shown(n)}. Pass the "
                             "planned total sample size, e.g. n=2000, or None for the pilot's size.")


def _effect(effect, argument: str = "effect") -> float:
    if isinstance(effect, Real) and not isinstance(effect, bool) and np.isfinite(effect):
        return float(effect)
    raise InvalidEffectError(f"`{argument}` must be a finite number in the outcome's units; got {shown(effect)}. "
                             "Pass the effect you want to detect, e.g. effect=0.2.")


def _window(plan: dict, n: float) -> tuple[int, int]:
    grow = (n / plan["n_pilot"]) ** plan["_growth"]
    return tuple(int(math.ceil(w * grow - 1e-9)) for w in plan["pilot_window"])


def _few_window(window: tuple[int, int]) -> list[str]:
    if min(window) < FEW_IN_WINDOW:
        return [f"Only about {min(window)} observations would lie inside the bandwidth on one side: the normal "
                "approximation behind the power formula is poor there."]
    return []


def power(design, effect, *, level=0.95, n=None, scaling="reselected-bandwidth", **fit_options) -> Power:
    """Power of the robust test against ``effect`` at total sample size ``n`` (default: the pilot's)."""
    effect = _effect(effect)
    plan = _plan(design, level, scaling, fit_options)
    n_total = _total(n, plan["n_pilot"])
    se = scaled_std_error(plan["pilot_std_error"], plan["n_pilot"], n_total, plan["exponent"])
    window = _window(plan, n_total)
    plan["warnings"] = tuple(plan["warnings"] + _few_window(window))
    plan.pop("_growth")
    return Power(**plan, effect=effect, power=float(power_of_test(effect, se, plan["level"])), n_total=n_total,
                 std_error=se, n_window=window)


def power_curve(design, effects=None, *, level=0.95, n=None, scaling="reselected-bandwidth",
                **fit_options) -> PowerCurve:
    """Power over ``effects`` (default: CURVE_POINTS effects from 0 to about 99% power)."""
    plan = _plan(design, level, scaling, fit_options)
    n_total = _total(n, plan["n_pilot"])
    se = scaled_std_error(plan["pilot_std_error"], plan["n_pilot"], n_total, plan["exponent"])
    if effects is None:
        z = stats.norm.ppf(0.5 + plan["level"] / 2.0)
        grid = np.linspace(0.0, (z + stats.norm.ppf(CURVE_TOP_POWER)) * se, CURVE_POINTS)
    else:
        grid = np.array([_effect(e, "effects") for e in np.atleast_1d(np.asarray(effects, dtype=object))])
    plan["warnings"] = tuple(plan["warnings"] + _few_window(_window(plan, n_total)))
    plan.pop("_growth")
    return PowerCurve(**plan, effects=tuple(float(e) for e in grid),
                      powers=tuple(float(p) for p in power_of_test(grid, se, plan["level"])), n_total=n_total,
                      std_error=se)


def sample_size(design, effect, *, power=0.8, level=0.95, scaling="reselected-bandwidth",
                **fit_options) -> SampleSize:
    """Smallest total sample size at which the robust test reaches ``power`` against ``effect``."""
    effect = _effect(effect)
    if effect == 0:
        raise InvalidEffectError("`effect` must be non-zero for a sample size; got 0. Against no effect the test "
                                 "rejects with probability 1 - level at every n; pass the smallest effect worth "
                                 "detecting, e.g. effect=0.2.")
    level = check_level(level)
    if not (isinstance(power, Real) and not isinstance(power, bool) and 1 - level < power < 1):
        raise InvalidOptionError(f"`power` must lie strictly between 1 - level = {1 - level:.3g} and 1; got "
                                 f"{shown(power)}. Use e.g. power=0.8.")
    plan = _plan(design, level, scaling, fit_options)
    root = required_n(effect, plan["pilot_std_error"], plan["n_pilot"], plan["exponent"], float(power), level)
    n_total = int(math.ceil(root - 1e-9))
    se = scaled_std_error(plan["pilot_std_error"], plan["n_pilot"], n_total, plan["exponent"])
    window = _window(plan, n_total)
    share_below = plan["pilot_sides"][0] / plan["n_pilot"]
    below = int(round(n_total * share_below))
    warnings = plan["warnings"] + _few_window(window)
    if n_total <= plan["n_pilot"]:
        warnings.append(f"The pilot already has {plan['n_pilot']} observations, at least the {n_total} needed.")
    plan["warnings"] = tuple(warnings)
    plan.pop("_growth")
    return SampleSize(**plan, effect=effect, target_power=float(power), n_total=n_total,
                      n_sides=(below, n_total - below), n_window=window, std_error=se,
                      achieved_power=float(power_of_test(effect, se, level)))
