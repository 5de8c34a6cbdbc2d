"""Resolving fit options once, at the boundary, into a hashable specification."""
from __future__ import annotations

from dataclasses import dataclass
from numbers import Real

import numpy as np

from ..errors import InvalidBandwidthError, InvalidOptionError, shown
from ..options import (BANDWIDTH_RULES, CLUSTER_VARIANCES, KERNELS, PILOT_RULES, VARIANCES, check_level,
                       check_option)


@dataclass(frozen=True)
class FitSpec:
    outcome: str
    bandwidth: str | tuple[float, float]      # a rule name or a manual (below, above) pair
    kernel: str
    degree: int
    bias_degree: int
    pilot_bandwidth: str | tuple[float, float] | None   # a pilot rule name, a manual pair, or None (default)
    variance: str
    level: float
    donut: float
    derivative: int
    adjust: bool
    cluster_variance: str = "bias-reduced"


def _positive_pair(argument: str, value) -> tuple[float, float]:
    if isinstance(value, Real) and not isinstance(value, bool):
        pair = (float(value), float(value))
    elif isinstance(value, (tuple, list, np.ndarray)) and len(value) == 2 and all(
            isinstance(v, Real) and not isinstance(v, bool) for v in value):
        pair = (float(value[0]), float(value[1]))
    else:
        raise InvalidBandwidthError(f"`{argument}` must be a positive number or a pair (below, above); got "
                                    f"{shown(value)}. Pass e.g. {argument}=2.5 or {argument}=(2.0, 3.0).")
    if not all(np.isfinite(v) and v > 0 for v in pair):
        raise InvalidBandwidthError(f"`{argument}` must be positive and finite; got {shown(value)}. "
                                    "Pass a positive number in the units of the score.")
    return pair


def _int_in(argument: str, value, lo: int, hi: int) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or not lo <= value <= hi:
        raise InvalidOptionError(f"`{argument}` must be an integer from {lo} to {hi}; got {shown(value)}. "
                                 f"Pick a value in that range.")
    return int(value)


def resolve(outcome: str, *, bandwidth, kernel, degree, bias_degree, pilot_bandwidth, variance, level,
            donut, derivative, adjust, has_covariates: bool, cluster_variance="bias-reduced") -> FitSpec:
    kernel = check_option("kernel", kernel, KERNELS)
    cluster_variance = check_option("cluster_variance", cluster_variance, CLUSTER_VARIANCES)
    variance = check_option("variance", variance, VARIANCES)
    degree = _int_in("degree", degree, 0, 3)
    derivative = _int_in("derivative", derivative, 0, 1)
    if derivative > degree:
        raise InvalidOptionError(f"`degree` must be at least `derivative`; got degree={degree}, "
                                 f"derivative={derivative}. Use degree={derivative + 1} for a kink design.")
    bias_degree = degree + 1 if bias_degree is None else _int_in("bias_degree", bias_degree, degree + 1,
                                                                 degree + 3)
    if isinstance(bandwidth, str):
        bandwidth = check_option("bandwidth", bandwidth, BANDWIDTH_RULES)
        if bandwidth == "ik" and (degree != 1 or derivative != 0):
            raise InvalidOptionError("`bandwidth` \"ik\" must be used with degree=1 and derivative=0 (the "
                                     f"Imbens-Kalyanaraman rule is for the local linear jump); got degree={degree}, "
                                     f"derivative={derivative}. Use bandwidth=\"mse\".")
    else:
        bandwidth = _positive_pair("bandwidth", bandwidth)
    if pilot_bandwidth is None:
        pilot = None
    elif isinstance(pilot_bandwidth, str):
        try:
            pilot = check_option("pilot_bandwidth", pilot_bandwidth, PILOT_RULES)
        except InvalidOptionError:
            rules = ", ".join(f'"{a}"' for a in PILOT_RULES)
            raise InvalidOptionError(f"`pilot_bandwidth` must be one of {rules}, a positive number or a pair "
                                     f"(below, above); got {shown(pilot_bandwidth)}. Pass e.g. "
                                     "pilot_bandwidth=\"two-step\" or pilot_bandwidth=2.5.") from None
    else:
        pilot = _positive_pair("pilot_bandwidth", pilot_bandwidth)
    level = check_level(level)
    if not (isinstance(donut, Real) and np.isfinite(donut) and donut >= 0):
        raise InvalidOptionError(f"`donut` must be a non-negative radius in score units; got {shown(donut)}. "
                                 "Use donut=0 for no exclusion.")
    if adjust and not has_covariates:
        raise InvalidOptionError("`adjust` must be False when the design has no covariates; got adjust=True. "
                                 "Declare covariates=[...] in Design(...) first.")
    return FitSpec(outcome, bandwidth, kernel, degree, bias_degree, pilot, variance, float(level),
                   float(donut), derivative, bool(adjust), cluster_variance)
