"""The result of one cutoff-design fit: a frozen record of numbers and the options actually used."""
from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd
from scipy import stats

from .base import CAUTION, Reported  # noqa: F401 - CAUTION re-exported for the methods paragraph


def critical_value(level: float, dof: float | None = None) -> float:
    """Two-sided critical value: normal, or Student t with ``dof`` degrees of freedom."""
    if dof is None:
        return float(stats.norm.ppf(0.5 + level / 2.0))
    return float(stats.t.ppf(0.5 + level / 2.0, dof))


def normal_interval(estimate: float, se: float, level: float, dof: float | None = None) -> tuple[float, float]:
    z = critical_value(level, dof)
    return (estimate - z * se, estimate + z * se)


def normal_p_value(estimate: float, se: float, dof: float | None = None) -> float:
    if not se > 0:
        return float("nan")
    if dof is None:
        return float(2.0 * stats.norm.sf(abs(estimate / se)))
    return float(2.0 * stats.t.sf(abs(estimate / se), dof))


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
    time_scale: object = None      # a date score's TimeScale: cutoff date and unit (None: numeric score)
    # Clustered fits: "bias-reduced" or "classic", and the t degrees of freedom of the conventional and
    # robust intervals (None: normal critical values).
    cluster_variance: str | None = None
    dof: tuple[float | None, float | None] = (None, None)
    # How b was chosen: "nearer-half" or "two-step" (selected), "main bandwidth" (b = h, clustered
    # default) or "manual" (given by the user).
    pilot_rule: str | None = None

    # ---- how the score reads -----------------------------------------------------------------
    @property
    def cutoff_label(self) -> str:
        """The cutoff as a reader writes it: ``40``, or ``2024-07-01`` for a date score."""
        return f"{self.cutoff:g}" if self.time_scale is None else self.time_scale.label()

    def length(self, value: float) -> str:
        """A bandwidth or radius as a reader writes it: ``2.5``, or ``41.5 days`` for a date score."""
        return f"{value:.4g}" if self.time_scale is None else self.time_scale.length(value)
    robust_jumps: tuple[float, float] | None = None
    """Fuzzy fits: bias-corrected jumps in (outcome, take-up), for weak-instrument-robust sets."""
    robust_jump_covariance: tuple[float, float, float] | None = None
    """Fuzzy fits: robust (variance of outcome jump, covariance, variance of take-up jump)."""

    # ---- inference --------------------------------------------------------------------------
    @property
    def conf_int(self) -> tuple[float, float]:
        """Conventional confidence interval at ``level`` (valid only under undersmoothing)."""
        return normal_interval(self.estimate, self.std_error, self.level, self.dof[0])

    @property
    def p_value(self) -> float:
        return normal_p_value(self.estimate, self.std_error, self.dof[0])

    @property
    def robust_conf_int(self) -> tuple[float, float]:
        """Robust bias-corrected confidence interval at ``level`` (Calonico-Cattaneo-Titiunik 2014)."""
        return normal_interval(self.bias_corrected_estimate, self.robust_std_error, self.level, self.dof[1])

    @property
    def robust_p_value(self) -> float:
        return normal_p_value(self.bias_corrected_estimate, self.robust_std_error, self.dof[1])

    def confidence_interval(self, level: float | None = None, robust: bool = True) -> tuple[float, float]:
        """Confidence interval at another level without refitting."""
        level = self.level if level is None else level
        if robust:
            return normal_interval(self.bias_corrected_estimate, self.robust_std_error, level, self.dof[1])
        return normal_interval(self.estimate, self.std_error, level, self.dof[0])

    def weak_iv_conf_set(self, level: float | None = None):
        """Weak-instrument-robust confidence set of a fuzzy fit (Feir, Lemieux & Marmer 2016).

        The values tau0 at which the sharp robust bias-corrected test of no jump in
        outcome - tau0 x take-up does not reject, with this fit's bandwidths, kernel, degree, pilot
        and variance. It may be one interval, two rays or the whole line.

        Returns
        -------
        WeakIVSet
            With ``intervals`` ((low, high) pairs, +-inf allowed), ``bounded``, ``level`` and ``shape``.

        Raises
        ------
        NotFuzzyError
            When the fit is sharp (there is no first stage to be weak).
        """
        from ..estimate.weak_iv import weak_iv_conf_set
        return weak_iv_conf_set(self, self.level if level is None else level)

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
        unit = "" if self.time_scale is None else f" ({self.time_scale.unit})"
        items = [
            (f"bandwidth{unit}", *self.bandwidth),
            (f"pilot (bias) bandwidth{unit}", *self.pilot_bandwidth),
            ("observations used", *self.n_used),
            ("observations on the side", *self.n_total),
        ]
        return pd.DataFrame(items, columns=["item", "below", "above"])

    def title(self) -> str:
        what = "jump in slope" if self.derivative == 1 else "jump"
        kind = {"fuzzy": "Fuzzy cutoff design", "first stage": "First stage"}.get(self.kind, "Sharp cutoff design")
        return f"{kind}: {what} in {self.outcome} at {self.score} = {self.cutoff_label} (treated {self.treated})"

    def notes(self) -> list[str]:
        rule = self.bandwidth_rule
        h = self.bandwidth
        bw = self.length(h[0]) if h[0] == h[1] else f"{self.length(h[0])} below, {self.length(h[1])} above"
        notes = [
            f"Local polynomial of degree {self.degree}, {self.kernel} kernel, bandwidth {bw} ({rule}); "
            f"bias correction with degree {self.bias_degree}; variance: {self.variance}"
            + (f" ({self.n_clusters} clusters{self._cluster_note()})" if self.n_clusters else "")
            + (f" (t critical values with {self.dof[1]:.1f} degrees of freedom, Bell and McCaffrey 2002)"
               if self.variance == "bias-reduced" and self.dof[1] is not None else "") + ".",
            f"Observations used: {self.n_used[0]} below, {self.n_used[1]} above; "
            f"{self.n_dropped} rows dropped for missing values"
            + (f"; {self.n_donut} inside the donut of radius {self.length(self.donut)}" if self.donut > 0 else "")
            + ".",
        ]
        if self.first_stage_f is not None:
            notes.append(f"First-stage F statistic: {self.first_stage_f:.1f}.")
        return notes

    def _cluster_note(self) -> str:
        if self.cluster_variance == "bias-reduced" and self.dof[1] is not None:
            return (f"; bias-reduced CR2 variance, t critical values with {self.dof[1]:.1f} degrees of freedom "
                    "(Bell and McCaffrey 2002)")
        return "; classic CR1 variance, normal critical values" if self.cluster_variance == "classic" else ""

    def __repr__(self) -> str:
        lo, hi = self.robust_conf_int
        return (f"<Fit {self.kind} {self.outcome}: estimate {self.estimate:.4g} (se {self.std_error:.3g}); "
                f"robust {self.level:.0%} CI [{lo:.4g}, {hi:.4g}], p = {self.robust_p_value:.3g}; "
                f"h = ({self.bandwidth[0]:.4g}, {self.bandwidth[1]:.4g})>")
