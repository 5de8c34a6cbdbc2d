"""What the Power panel shows: the power curve of the robust test, the effect detectable with 80%
power, and -- for the board's ``effect`` -- the power at the pilot's size and the sample size.

Every number comes from ``seamline.estimate.power`` with the board's main fit as pilot (the same
functions ``Design.power_curve`` and ``Design.sample_size`` call), so a board computes no fit of
its own for this panel and a level change re-reports without any engine call. Nothing here imports
IPython, widgets or charts.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import pandas as pd
from scipy import optimize

from ..core.power import power_of_test
from ..errors import SeamlineError
from ..estimate import power as power_module
from ..results.base import Reported
from ..results.fit import Fit
from ..results.power import Power, PowerCurve, SampleSize

__all__ = ["TARGET_POWER", "PowerReport", "power_report"]

#: The power the panel plans for (common practice: 80%).
TARGET_POWER = 0.8


@dataclass(frozen=True, eq=False)
class PowerReport(Reported):
    """The Power panel's numbers.

    Attributes
    ----------
    curve : PowerCurve at the pilot's size (default grid of effects)
    detectable : the effect against which the test has ``TARGET_POWER`` at the pilot's size
    effect : the board's effect (None when not declared)
    power : Power against ``effect`` at the pilot's size (None without an effect)
    sample : SampleSize for ``TARGET_POWER`` against ``effect`` (None without an effect or when it
        cannot be computed; ``sample_error`` then says why)
    """
    curve: PowerCurve
    detectable: float
    effect: float | None
    power: Power | None
    sample: SampleSize | None
    sample_error: str = ""
    warnings: tuple[str, ...] = field(default=())

    @property
    def level(self) -> float:
        return self.curve.level

    @property
    def outcome(self) -> str:
        return self.curve.outcome

    def table(self) -> pd.DataFrame:
        """The power curve: effect, power (at the pilot's size)."""
        return self.curve.table()

    def summary(self) -> pd.DataFrame:
        """The plan in one row per quantity (item, value)."""
        c = self.curve
        rows = [("test size", round(1 - c.level, 12)), ("pilot observations", c.n_pilot),
                ("pilot robust standard error", c.pilot_std_error),
                (f"effect detectable with {TARGET_POWER:.0%} power", self.detectable)]
        if self.effect is not None:
            rows.append(("effect planned for", self.effect))
            if self.power is not None:
                rows.append(("power against it at the pilot's size", self.power.power))
            if self.sample is not None:
                s = self.sample
                rows += [(f"observations for {TARGET_POWER:.0%} power", s.n_total),
                         ("of which below the cutoff", s.n_sides[0]), ("of which above the cutoff", s.n_sides[1]),
                         ("expected inside the bandwidth, below", s.n_window[0]),
                         ("expected inside the bandwidth, above", s.n_window[1]),
                         ("power at that size", s.achieved_power)]
        return pd.DataFrame(rows, columns=["item", "value"], dtype=object)   # counts stay whole numbers

    def sentence(self) -> str:
        """The plan in words, with the scaling rule and the bandwidth convention."""
        c = self.curve
        text = (f"With the pilot's {c.n_pilot} observations the robust test at size {1 - c.level:.3g} has "
                f"{TARGET_POWER:.0%} power against an effect of about {self.detectable:.3g} on {c.outcome}.")
        if self.effect is not None and self.power is not None:
            text += f" Against an effect of {self.effect:g} its power is {self.power.power:.0%}"
            if self.sample is not None:
                text += (f"; {TARGET_POWER:.0%} power needs about {self.sample.n_total} observations "
                         f"({self.sample.n_window[0]} below and {self.sample.n_window[1]} above the cutoff "
                         "inside the bandwidth)")
            text += "."
        return text + " Scaling: " + c.scaling_rule()

    def title(self) -> str:
        return f"Power of the robust test for {self.outcome} (size {1 - self.level:.3g})"

    def notes(self) -> list[str]:
        # the cautions sentence is stated once per board and in the methods paragraph
        return [self.sentence(), *self.curve.notes()[:1], *self.curve.notes()[2:3]]


def _detectable(curve: PowerCurve) -> float:
    se, level = curve.std_error, curve.level
    top = 10 * se
    while float(power_of_test(top, se, level)) < TARGET_POWER:   # pragma: no cover - 10 se gives ~1
        top *= 2
    return float(optimize.brentq(lambda e: float(power_of_test(e, se, level)) - TARGET_POWER, 0.0, top,
                                 xtol=1e-12 * max(se, 1e-300)))


def power_report(fit: Fit, effect: float | None, level: float) -> PowerReport:
    """The Power panel for a board whose main fit is ``fit`` (the pilot).

    Raises
    ------
    SeamlineError
        When the pilot cannot serve (e.g. a zero standard error); a bad ``effect`` (0 for a sample
        size) is reported in ``sample_error`` instead, with the curve still shown.
    """
    curve = power_module.power_curve(fit, level=level)
    power = sample = None
    error = ""
    if effect is not None:
        power = power_module.power(fit, effect, level=level)
        try:
            sample = power_module.sample_size(fit, effect, power=TARGET_POWER, level=level)
        except SeamlineError as exc:
            error = str(exc)
    warnings = tuple(dict.fromkeys([*curve.warnings, *(sample.warnings if sample is not None else ()),
                                    *([error] if error else [])]))
    return PowerReport(curve=curve, detectable=_detectable(curve), effect=effect, power=power, sample=sample,
                       sample_error=error, warnings=warnings)
