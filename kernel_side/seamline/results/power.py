"""Frozen results of power and sample-size calculations for the robust bias-corrected test."""
from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

from .base import CAUTION, Reported

SCALING_TEXT = {
    "fixed-bandwidth": "the pilot's bandwidths are kept, so the window's effective sample grows like n and the "
                       "standard error shrinks like n^(-1/2)",
    "reselected-bandwidth": "the bandwidths are re-selected at the new sample size at the rate of the pilot's "
                            "rule, so the standard error shrinks like n^(-{gamma:.3g}) and the window holds a "
                            "share of the sample that falls like n^(-{rate:.3g})",
}


@dataclass(frozen=True, eq=False)
class PowerPlan(Reported):
    """Shared description of a power calculation: the pilot fit and how its standard error scales.

    Attributes
    ----------
    level : confidence level of the two-sided robust test (its size is 1 - level).
    n_pilot : usable observations of the pilot design (both sides).
    pilot_sides : usable observations of the pilot below and above the cutoff.
    pilot_std_error : robust standard error of the pilot's default fit.
    pilot_window : observations inside the pilot's bandwidth (below, above).
    pilot_bandwidth : the pilot's bandwidths (below, above).
    scaling : "fixed-bandwidth" or "reselected-bandwidth".
    exponent : gamma in se(n) = pilot_std_error * (n_pilot / n)^gamma.
    bandwidth_rate : r in h ~ n^(-r) for "reselected-bandwidth" (0 when the bandwidth is fixed).
    """
    level: float
    n_pilot: int
    pilot_sides: tuple[int, int]
    pilot_std_error: float
    pilot_window: tuple[int, int]
    pilot_bandwidth: tuple[float, float]
    scaling: str
    exponent: float
    bandwidth_rate: float
    outcome: str
    warnings: tuple[str, ...]

    def scaling_rule(self) -> str:
        """The standard-error scaling and bandwidth convention in words."""
        return (f"se(n) = {self.pilot_std_error:.4g} x ({self.n_pilot} / n)^{self.exponent:.3g}: "
                + SCALING_TEXT[self.scaling].format(gamma=self.exponent, rate=self.bandwidth_rate) + ".")

    def notes(self) -> list[str]:
        return [f"Power of the two-sided robust bias-corrected test of no effect at size {1 - self.level:.3g} "
                f"(Cattaneo, Titiunik & Vazquez-Bare 2019): 1 - Phi(z - effect/se) + Phi(-z - effect/se), "
                f"using this design as pilot data (n = {self.n_pilot}, robust se {self.pilot_std_error:.4g}).",
                "Scaling: " + self.scaling_rule(),
                "Power inherits any bias the test has and assumes the pilot's variance and density near the "
                "cutoff carry over to the new sample.",
                CAUTION]


@dataclass(frozen=True, eq=False, kw_only=True)
class Power(PowerPlan):
    """Power of the robust test against ``effect`` at total sample size ``n_total``.

    ``std_error`` is the scaled robust standard error at ``n_total``; ``n_window`` the expected
    observations inside the bandwidth (below, above) at that size.
    """
    effect: float
    power: float
    n_total: int
    std_error: float
    n_window: tuple[int, int]

    def table(self) -> pd.DataFrame:
        return pd.DataFrame([{"effect": self.effect, "power": self.power, "level": self.level,
                              "n_total": self.n_total, "n_window_below": self.n_window[0],
                              "n_window_above": self.n_window[1], "std_error": self.std_error}])

    def title(self) -> str:
        return f"Power against an effect of {self.effect:g} on {self.outcome} (n = {self.n_total})"

    def __repr__(self) -> str:
        return (f"<Power {self.power:.3f} against {self.effect:g} at n = {self.n_total} (size {1 - self.level:.3g}, "
                f"se {self.std_error:.3g}, {self.scaling})>")


@dataclass(frozen=True, eq=False, kw_only=True)
class PowerCurve(PowerPlan):
    """Power of the robust test over a grid of effects at total sample size ``n_total``."""
    effects: tuple[float, ...]
    powers: tuple[float, ...]
    n_total: int
    std_error: float

    def table(self) -> pd.DataFrame:
        return pd.DataFrame({"effect": self.effects, "power": self.powers})

    def title(self) -> str:
        return f"Power curve for {self.outcome} (n = {self.n_total}, size {1 - self.level:.3g})"

    def __repr__(self) -> str:
        return f"<PowerCurve {len(self.effects)} effects at n = {self.n_total} ({self.scaling})>"


@dataclass(frozen=True, eq=False, kw_only=True)
class SampleSize(PowerPlan):
    """Total sample size at which the robust test reaches ``target_power`` against ``effect``.

    ``n_total`` is the root of power(n) = target_power rounded up; ``n_sides`` splits it in the
    pilot's proportions (below, above); ``n_window`` is the expected number inside the bandwidth on
    each side; ``achieved_power`` and ``std_error`` are evaluated at the rounded ``n_total``.
    """
    effect: float
    target_power: float
    n_total: int
    n_sides: tuple[int, int]
    n_window: tuple[int, int]
    std_error: float
    achieved_power: float

    def table(self) -> pd.DataFrame:
        return pd.DataFrame([{"effect": self.effect, "target_power": self.target_power, "level": self.level,
                              "n_total": self.n_total, "n_below": self.n_sides[0], "n_above": self.n_sides[1],
                              "n_window_below": self.n_window[0], "n_window_above": self.n_window[1],
                              "std_error": self.std_error, "achieved_power": self.achieved_power}])

    def title(self) -> str:
        return (f"Sample size for {self.target_power:.0%} power against an effect of {self.effect:g} "
                f"on {self.outcome}")

    def __repr__(self) -> str:
        return (f"<SampleSize n_total = {self.n_total} (window {self.n_window[0]} below, {self.n_window[1]} above) "
                f"for {self.target_power:.0%} power against {self.effect:g} ({self.scaling})>")
