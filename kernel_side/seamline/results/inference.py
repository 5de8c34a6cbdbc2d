"""Frozen results of the inference a referee may ask for beyond the robust bias-corrected interval:
bias-aware intervals, weak-instrument-robust confidence sets and local randomization inference."""
from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property
from typing import Callable

import numpy as np
import pandas as pd
from scipy import stats

from .base import CAUTION, Reported


def _fmt_set(intervals: tuple[tuple[float, float], ...]) -> str:
    def end(v: float) -> str:
        return "-inf" if v == -np.inf else "+inf" if v == np.inf else f"{v:.4g}"
    return " U ".join(f"[{end(lo)}, {end(hi)}]" for lo, hi in intervals)


def window_text(window, cutoff: float) -> str:
    """A window "[low, high]" with enough decimals to show its half-width to three significant
    digits (38.04 to 41.96, not 38 to 42)."""
    low, high = window
    half = max(abs(high - cutoff), abs(cutoff - low), 1e-300)
    decimals = max(0, min(10, 2 - int(np.floor(np.log10(half)))))
    return f"[{low:.{decimals}f}, {high:.{decimals}f}]"


def set_shape(intervals: tuple[tuple[float, float], ...]) -> str:
    """"interval", "two rays", "half-line", "whole line" or "union of intervals"."""
    if len(intervals) == 1:
        lo, hi = intervals[0]
        if np.isfinite(lo) and np.isfinite(hi):
            return "interval"
        return "whole line" if not np.isfinite(lo) and not np.isfinite(hi) else "half-line"
    if len(intervals) == 2 and intervals[0][0] == -np.inf and intervals[1][1] == np.inf:
        return "two rays"
    return "union of intervals"


SHAPE_WORDS = {
    "interval": "one bounded interval: the first stage is strong enough to bound the effect.",
    "two rays": ("two rays that exclude a band of values: the first stage is weak, so very large effects of "
                 "either sign cannot be ruled out, but values near the excluded band can."),
    "half-line": "a half-line: the data bound the effect on one side only (a borderline first stage).",
    "whole line": ("the whole real line: the data cannot rule out any effect, because the jump in take-up is "
                   "not distinguishable from zero."),
    "union of intervals": "several disjoint pieces; read each one.",
}


@dataclass(frozen=True, eq=False)
class BiasAwareInterval(Reported):
    """Bias-aware (fixed-length) confidence interval (Armstrong & Kolesar 2018, 2020).

    Valid for every regression function whose first-order expansion at the cutoff errs by at most
    ``smoothness`` x^2 / 2 on each side (the Taylor class), or, with ``smoothness_class`` "Hölder",
    whose second derivative is at most ``smoothness`` in absolute value on each side, given that bound. ``estimate`` is the
    conventional local polynomial jump at ``bandwidth``; ``max_bias`` is the worst-case bias of that
    linear estimator over the class; ``critical_value`` is the ``level`` quantile of
    |N(max_bias / std_error, 1)|; ``conf_int`` = estimate +- critical_value x std_error.

    Fuzzy designs: the set of tau0 at which the bias-aware test of no jump in outcome - tau0 x take-up
    does not reject (``intervals``; ``conf_int`` is its hull), with bound ``smoothness`` on the outcome
    and ``takeup_smoothness`` on take-up. There ``estimate`` is the ratio of jumps, ``std_error`` its
    delta-method standard error and ``max_bias`` the worst-case bias of the linearised ratio.
    ``sensitivity`` holds the interval at multiples of the bound (bandwidth re-optimised, and fixed).
    """
    outcome: str
    kind: str
    estimate: float
    std_error: float
    max_bias: float
    smoothness: float
    takeup_smoothness: float | None
    smoothness_rule: str
    smoothness_class: str
    critical_value: float
    intervals: tuple[tuple[float, float], ...]
    level: float
    bandwidth: tuple[float, float]
    bandwidth_rule: str
    n_used: tuple[int, int]
    kernel: str
    degree: int
    variance: str
    score: str
    cutoff: float
    treated: str
    warnings: tuple[str, ...] = ()
    sensitivity_fn: Callable[[], pd.DataFrame] | None = field(default=None, repr=False)

    @cached_property
    def sensitivity(self) -> pd.DataFrame:
        """The interval at multiples 0.5 ... 4 of the bound: with the bandwidth re-optimised for each
        bound (columns without suffix) and with it fixed at this result's bandwidth (``_fixed_bandwidth``).
        Computed on first access."""
        return self.sensitivity_fn() if self.sensitivity_fn is not None else pd.DataFrame()

    @property
    def conf_int(self) -> tuple[float, float]:
        """The interval (fuzzy designs: the hull of the confidence set)."""
        return (self.intervals[0][0], self.intervals[-1][1])

    @property
    def bounded(self) -> bool:
        return bool(np.all(np.isfinite(self.conf_int)))

    @property
    def shape(self) -> str:
        return set_shape(self.intervals)

    def table(self) -> pd.DataFrame:
        lo, hi = self.conf_int
        return pd.DataFrame([{"estimator": "bias-aware", "estimate": self.estimate, "std_error": self.std_error,
                              "max_bias": self.max_bias, "smoothness": self.smoothness,
                              "critical_value": self.critical_value, "ci_low": lo, "ci_high": hi,
                              "bandwidth_below": self.bandwidth[0], "bandwidth_above": self.bandwidth[1],
                              "n_below": self.n_used[0], "n_above": self.n_used[1]}])

    def title(self) -> str:
        return (f"Bias-aware {self.level:.0%} interval: jump in {self.outcome} at {self.score} = "
                f"{self.cutoff:g} ({self.kind}, treated {self.treated})")

    def notes(self) -> list[str]:
        bound = f"M = {self.smoothness:.4g} ({self.smoothness_rule})"
        if self.takeup_smoothness is not None:
            bound += f" on the outcome and {self.takeup_smoothness:.4g} on take-up"
        meaning = ("the first-order expansion at the cutoff errs by at most M x^2 / 2" if self.smoothness_class ==
                   "Taylor" else "the second derivative is at most M in absolute value")
        notes = [f"Armstrong and Kolesar (2018, 2020) fixed-length interval over the {self.smoothness_class} "
                 f"class with {bound}: on each side {meaning}. It is valid for that bound only; the "
                 "sensitivity table shows other bounds.",
                 f"Local polynomial of degree {self.degree}, {self.kernel} kernel, bandwidth "
                 f"{self.bandwidth[0]:.4g} ({self.bandwidth_rule}); variance: {self.variance}."]
        if self.kind == "fuzzy":
            notes.append(f"Confidence set {_fmt_set(self.intervals)}: {SHAPE_WORDS[self.shape]}")
        notes.append(CAUTION)
        return notes

    def __repr__(self) -> str:
        return (f"<BiasAwareInterval {self.kind} {self.outcome}: estimate {self.estimate:.4g}, max bias "
                f"{self.max_bias:.3g}, {self.level:.0%} set {_fmt_set(self.intervals)}, M = {self.smoothness:.4g}, "
                f"h = {self.bandwidth[0]:.4g}>")


@dataclass(frozen=True, eq=False)
class WeakIVSet(Reported):
    """Weak-instrument-robust confidence set for a fuzzy design (Feir, Lemieux & Marmer 2016).

    The values tau0 at which the sharp robust bias-corrected test of "no jump in outcome - tau0 x
    take-up" does not reject at ``level``, with the fit's bandwidths, kernel, degree, pilot and
    variance. Its coverage does not depend on the size of the first-stage jump, unlike the Wald
    interval (``wald_conf_int``, the fit's robust interval of the ratio). ``intervals`` holds the
    pieces as (low, high) pairs with +-inf ends; ``shape`` names the form and ``explanation`` says it
    in words; ``first_stage_f`` is the squared robust t statistic of the take-up jump.
    """
    outcome: str
    level: float
    intervals: tuple[tuple[float, float], ...]
    bounded: bool
    shape: str
    estimate: float
    wald_conf_int: tuple[float, float]
    first_stage_jump: float
    first_stage_f: float
    bandwidth: tuple[float, float]
    pilot_bandwidth: tuple[float, float]
    kernel: str
    degree: int
    variance: str
    score: str
    cutoff: float
    treated: str
    warnings: tuple[str, ...] = ()

    @property
    def explanation(self) -> str:
        """The shape of the set in words."""
        return f"The {self.level:.0%} weak-instrument-robust set is {SHAPE_WORDS[self.shape]}"

    def contains(self, tau0: float) -> bool:
        return any(lo <= tau0 <= hi for lo, hi in self.intervals)

    def table(self) -> pd.DataFrame:
        rows = [{"set": f"weak-IV-robust (piece {i + 1} of {len(self.intervals)})", "ci_low": lo, "ci_high": hi}
                for i, (lo, hi) in enumerate(self.intervals)]
        rows.append({"set": "Wald (robust bias-corrected ratio)", "ci_low": self.wald_conf_int[0],
                     "ci_high": self.wald_conf_int[1]})
        return pd.DataFrame(rows)

    def title(self) -> str:
        return (f"Weak-instrument-robust {self.level:.0%} set: effect on {self.outcome} at {self.score} = "
                f"{self.cutoff:g} (treated {self.treated})")

    def notes(self) -> list[str]:
        return [self.explanation,
                f"Feir, Lemieux and Marmer (2016) inversion of the robust bias-corrected test on outcome - tau0 "
                f"x take-up; robust first-stage F = {self.first_stage_f:.1f}; ratio estimate "
                f"{self.estimate:.4g}.",
                f"Local polynomial of degree {self.degree}, {self.kernel} kernel, bandwidth "
                f"{self.bandwidth[0]:.4g} (pilot {self.pilot_bandwidth[0]:.4g}); variance: {self.variance}.",
                CAUTION]

    def __repr__(self) -> str:
        return (f"<WeakIVSet {self.outcome}: {self.level:.0%} set {_fmt_set(self.intervals)} ({self.shape}), "
                f"F = {self.first_stage_f:.1f}>")


@dataclass(frozen=True, eq=False)
class LocalRandomization(Reported):
    """Local randomization inference in a window around the cutoff (Cattaneo, Frandsen & Titiunik 2015).

    Inside ``window`` (both ends included) the units are analysed as a completely randomized
    experiment. ``p_value`` is the Fisher randomization p-value of the sharp null of no effect for
    ``statistic`` (two-sided through its absolute value): exact over all assignments when ``exact``,
    otherwise Monte Carlo over ``assignments`` random ones with simulation standard error
    ``p_value_std_error``. ``conf_int`` collects the constant additive effects not rejected at
    ``level``. ``estimate`` is the difference in mean outcomes in the window (the window average
    effect, not the continuity-based effect at the cutoff), with Neyman's large-sample
    ``neyman_conf_int`` beside it. ``windows`` is the nested sequence with minimum balance p-values;
    ``sensitivity`` the outcome results over those windows.
    """
    outcome: str
    statistic: str
    window: tuple[float, float]
    window_rule: str
    estimate: float
    statistic_value: float
    p_value: float
    p_value_std_error: float
    exact: bool
    assignments: int
    conf_int: tuple[float, float]
    level: float
    n_below: int
    n_above: int
    neyman_std_error: float
    neyman_conf_int: tuple[float, float]
    balance_threshold: float
    windows: pd.DataFrame = field(repr=False)
    score: str = ""
    cutoff: float = 0.0
    treated: str = "above"
    seed: int | None = None
    warnings: tuple[str, ...] = ()
    sensitivity_fn: Callable[[], pd.DataFrame] | None = field(default=None, repr=False)

    @cached_property
    def sensitivity(self) -> pd.DataFrame:
        """Estimate, p-value and inverted interval for the windows of the sequence up to a few past the
        chosen one (computed on first access)."""
        return self.sensitivity_fn() if self.sensitivity_fn is not None else pd.DataFrame()

    def table(self) -> pd.DataFrame:
        method = "exact" if self.exact else f"Monte Carlo ({self.assignments:,} draws)"
        return pd.DataFrame([
            {"inference": f"randomization, {self.statistic} ({method})", "estimate": self.estimate,
             "p_value": self.p_value, "ci_low": self.conf_int[0], "ci_high": self.conf_int[1],
             "n_below": self.n_below, "n_above": self.n_above},
            {"inference": "Neyman (large sample)", "estimate": self.estimate,
             "p_value": float(2 * stats.norm.sf(abs(self.estimate / self.neyman_std_error)))
             if self.neyman_std_error > 0 else float("nan"),
             "ci_low": self.neyman_conf_int[0], "ci_high": self.neyman_conf_int[1],
             "n_below": self.n_below, "n_above": self.n_above}])

    def title(self) -> str:
        return (f"Local randomization: {self.outcome} in the window {window_text(self.window, self.cutoff)} of "
                f"{self.score} "
                f"around {self.cutoff:g} (treated {self.treated})")

    def notes(self) -> list[str]:
        rule = ("chosen by covariate balance: the largest window such that it and every smaller one have a "
                f"minimum balance p-value of at least {self.balance_threshold:g}" if self.window_rule ==
                "covariate balance" else "given")
        return [f"Cattaneo, Frandsen and Titiunik (2015) randomization inference: units in the window are "
                f"treated as completely randomized; window {rule}.",
                f"The interval inverts randomization tests under a constant additive effect at level "
                f"{self.level:.0%}; the estimate is the window average effect, not the effect at the cutoff.",
                "Local randomization assumes that, inside the window, the score does not affect the outcomes "
                "and assignment is as good as random; it does not replace judgement about the design.",
                CAUTION]

    def __repr__(self) -> str:
        lo, hi = self.window
        return (f"<LocalRandomization {self.outcome}: window [{lo:.4g}, {hi:.4g}] ({self.n_below} below, "
                f"{self.n_above} above), estimate {self.estimate:.4g}, p = {self.p_value:.3g}, "
                f"{self.level:.0%} CI [{self.conf_int[0]:.4g}, {self.conf_int[1]:.4g}]>")
