"""The result of one cutoff-design fit: a frozen record of numbers and the options actually used."""
from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd
from scipy import stats

from .base import CAUTION, Reported  # noqa: F401 - CAUTION re-exported for the methods paragraph


def normal_interval(estimate: float, se: float, level: float) -> tuple[float, float]:
    z = stats.norm.ppf(0.5 + level / 2.0)
    return (estimate - z * se, estimate + z * se)


def normal_p_value(estimate: float, se: float) -> float:
    if not se > 0:
        return float("nan")
    return float(2.0 * stats.norm.sf(abs(estimate / se)))


@dataclass(frozen=True, eq=False)
class Fit(Reported):
    """Local polynomial estimate of the jump at the cutoff, with conventional and robust inference.

    ``kind`` is "sharp", "fuzzy", or "first stage" (the take-up jump held by a fuzzy fit).
    ``estimate`` is the conventional local polynomial estimate (limit on the treated side minus the
    limit on the untreated side; derivatives when ``derivative`` is 1). ``robust_conf_int`` and
    ``robust_p_value`` are the Calonico-Cattaneo-Titiunik (2014) robust bias-corrected inference, the
    recommended interval. Fuzzy designs report the ratio of jumps and hold the take-up jump in
    ``first_stage``.
    """
    outcome: str
    kind: str
    estimate: float
    std_error: float
    bias_corrected_estimate: float
    robust_std_error: float
    level: float
    bandwidth: tuple[float, float]
    pilot_bandwidth: tuple[float, float]
    bandwidth_rule: str
    n_used: tuple[int, int]
    n_effective_robust: tuple[int, int]
    n_total: tuple[int, int]
    n_dropped: int
    n_donut: int
    kernel: str
    degree: int
    bias_degree: int
    derivative: int
    variance: str
    n_clusters: int | None
    donut: float
    treated: str
    cutoff: float
    score: str
    adjusted: bool
    covariates: tuple[str, ...]
    limits: tuple[float, float]
    warnings: tuple[str, ...] = ()
    first_stage: "Fit | None" = None
    first_stage_f: float | None = None
    covariate_coefficients: tuple[float, ...] = ()

    # ---- inference --------------------------------------------------------------------------
    @property
    def conf_int(self) -> tuple[float, float]:
        """Conventional confidence interval at ``level`` (valid only under undersmoothing)."""
        return normal_interval(self.estimate, self.std_error, self.level)

    @property
    def p_value(self) -> float:
        return normal_p_value(self.estimate, self.std_error)

    @property
    def robust_conf_int(self) -> tuple[float, float]:
        """Robust bias-corrected confidence interval at ``level`` (Calonico-Cattaneo-Titiunik 2014)."""
        return normal_interval(self.bias_corrected_estimate, self.robust_std_error, self.level)

    @property
    def robust_p_value(self) -> float:
        return normal_p_value(self.bias_corrected_estimate, self.robust_std_error)

    def confidence_interval(self, level: float | None = None, robust: bool = True) -> tuple[float, float]:
        """Confidence interval at another level without refitting."""
        level = self.level if level is None else level
        if robust:
            return normal_interval(self.bias_corrected_estimate, self.robust_std_error, level)
        return normal_interval(self.estimate, self.std_error, level)

    def with_level(self, level: float) -> "Fit":
        """The same fit reported at another confidence level."""
        fs = None if self.first_stage is None else self.first_stage.with_level(level)
        return replace(self, level=level, first_stage=fs)

    # ---- presentation (delegated to seamline.export) -----------------------------------------
    def table(self) -> pd.DataFrame:
        """Tidy table: one row per estimator (and the first stage for fuzzy designs)."""
        rows = [
            ("conventional", self.estimate, self.std_error, *self.conf_int, self.p_value),
            ("robust bias-corrected", self.bias_corrected_estimate, self.robust_std_error,
             *self.robust_conf_int, self.robust_p_value),
        ]
        if self.first_stage is not None:
            fs = self.first_stage
            rows.append(("first stage (take-up jump)", fs.estimate, fs.std_error, *fs.robust_conf_int,
                         fs.robust_p_value))
        return pd.DataFrame(rows, columns=["estimator", "estimate", "std_error", "ci_low", "ci_high",
                                           "p_value"])

    def specification(self) -> pd.DataFrame:
        """The options and counts behind the numbers, one row per item (below, above)."""
        items = [
            ("bandwidth", *self.bandwidth),
            ("pilot (bias) bandwidth", *self.pilot_bandwidth),
            ("observations used", *self.n_used),
            ("observations on the side", *self.n_total),
        ]
        return pd.DataFrame(items, columns=["item", "below", "above"])

    def title(self) -> str:
        what = "jump in slope" if self.derivative == 1 else "jump"
        kind = {"fuzzy": "Fuzzy cutoff design", "first stage": "First stage"}.get(self.kind, "Sharp cutoff design")
        return f"{kind}: {what} in {self.outcome} at {self.score} = {self.cutoff:g} (treated {self.treated})"

    def notes(self) -> list[str]:
        rule = self.bandwidth_rule
        h = self.bandwidth
        bw = f"{h[0]:.4g}" if h[0] == h[1] else f"{h[0]:.4g} below, {h[1]:.4g} above"
        notes = [
            f"Local polynomial of degree {self.degree}, {self.kernel} kernel, bandwidth {bw} ({rule}); "
            f"bias correction with degree {self.bias_degree}; variance: {self.variance}"
            + (f" ({self.n_clusters} clusters)" if self.n_clusters else "") + ".",
            f"Observations used: {self.n_used[0]} below, {self.n_used[1]} above; "
            f"{self.n_dropped} rows dropped for missing values"
            + (f"; {self.n_donut} inside the donut of radius {self.donut:g}" if self.donut > 0 else "") + ".",
        ]
        if self.first_stage_f is not None:
            notes.append(f"First-stage F statistic: {self.first_stage_f:.1f}.")
        return notes

    def __repr__(self) -> str:
        lo, hi = self.robust_conf_int
        return (f"<Fit {self.kind} {self.outcome}: estimate {self.estimate:.4g} (se {self.std_error:.3g}); "
                f"robust {self.level:.0%} CI [{lo:.4g}, {hi:.4g}], p = {self.robust_p_value:.3g}; "
                f"h = ({self.bandwidth[0]:.4g}, {self.bandwidth[1]:.4g})>")
