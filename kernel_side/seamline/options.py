"""Option vocabularies and the one helper that checks them.

Every option string a user can pass is listed here as a ``typing.Literal`` alias, so the allowed
values live in one place and error messages can list them.
"""
from __future__ import annotations

from numbers import Real
from typing import Literal, get_args

from .errors import InvalidOptionError, shown

Kernel = Literal["triangular", "uniform", "epanechnikov"]
BandwidthRule = Literal["mse", "mse-split", "coverage", "ik"]
PilotRule = Literal["nearer-half", "two-step"]   # rules for the pilot (bias) bandwidth; see core.bandwidth
Variance = Literal["neighbors", "hc0", "hc1", "hc2", "hc3", "bias-reduced"]
Side = Literal["above", "below"]
DensityMethod = Literal["local-cdf", "binned"]
BinMethod = Literal["equal-width", "equal-count"]
BinRule = Literal["imse", "mimic-variance"]
ScoreUnit = Literal["days", "hours", "weeks", "months", "years"]
ClusterVariance = Literal["bias-reduced", "classic"]
PowerScaling = Literal["reselected-bandwidth", "fixed-bandwidth"]
SmoothnessClass = Literal["taylor", "holder"]   # bias-aware intervals (Armstrong & Kolesar 2018)

KERNELS: tuple[str, ...] = get_args(Kernel)
BANDWIDTH_RULES: tuple[str, ...] = get_args(BandwidthRule)
PILOT_RULES: tuple[str, ...] = get_args(PilotRule)
VARIANCES: tuple[str, ...] = get_args(Variance)
SIDES: tuple[str, ...] = get_args(Side)
DENSITY_METHODS: tuple[str, ...] = get_args(DensityMethod)
BIN_METHODS: tuple[str, ...] = get_args(BinMethod)
BIN_RULES: tuple[str, ...] = get_args(BinRule)
SCORE_UNITS: tuple[str, ...] = get_args(ScoreUnit)
CLUSTER_VARIANCES: tuple[str, ...] = get_args(ClusterVariance)
POWER_SCALINGS: tuple[str, ...] = get_args(PowerScaling)
SMOOTHNESS_CLASSES: tuple[str, ...] = get_args(SmoothnessClass)


def check_option(argument: str, value: object, allowed: tuple[str, ...]) -> str:
    """Return ``value`` if it is one of ``allowed``; otherwise raise InvalidOptionError.

    Matching is case-insensitive and ignores surrounding spaces; the canonical spelling is returned.
    """
    if isinstance(value, str):
        key = value.strip().lower()
        if key in allowed:
            return key
    choices = ", ".join(f'"{a}"' for a in allowed)
    raise InvalidOptionError(
        f"`{argument}` must be one of {choices}; got {shown(value)}. Pick one of the listed values."
    )


def check_level(level: object, argument: str = "level") -> float:
    """Return a confidence level strictly between 0 and 1 as a float; otherwise raise InvalidOptionError."""
    if isinstance(level, Real) and not isinstance(level, bool) and 0.0 < float(level) < 1.0:
        return float(level)
    raise InvalidOptionError(f"`{argument}` must be a number strictly between 0 and 1; got {shown(level)}. "
                             "Use for example 0.95 for 95% intervals.")
