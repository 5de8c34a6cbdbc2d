"""Frozen results of designs with several effects: cutoff-specific effects (multiple and cumulative
cutoffs), the pooled estimate's decomposition, and subgroup effects, each with a test of equal effects."""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .base import CAUTION, Reported
from .fit import Fit

ROW_COLUMNS = ["estimate", "std_error", "robust_estimate", "robust_std_error", "robust_ci_low", "robust_ci_high",
               "robust_p_value", "n_below", "n_above", "bandwidth_below", "bandwidth_above", "units_below",
               "units_above", "note"]
NAN = float("nan")


@dataclass(frozen=True, eq=False)
class EffectRow:
    """One cutoff's or one group's estimate: the default fit on its own rows, or a note saying why not.

    Attributes
    ----------
    label : the cutoff value or the group value.
    estimate, std_error : conventional local polynomial estimate and its standard error.
    robust_estimate, robust_std_error : bias-corrected estimate and robust standard error
        (Calonico-Cattaneo-Titiunik 2014), used by the test of equal effects.
    robust_ci_low, robust_ci_high, robust_p_value : robust interval at the result's level and p-value.
    n_below, n_above : observations inside the bandwidth on each side.
    bandwidth_below, bandwidth_above : the bandwidths the fit selected (score units).
    units_below, units_above : usable observations on each side before any bandwidth.
    note : empty when the row was fitted; otherwise why it was not (what to do).
    fit : the Fit behind the row (None when not fitted).
    """
    label: object
    estimate: float
    std_error: float
    robust_estimate: float
    robust_std_error: float
    robust_ci_low: float
    robust_ci_high: float
    robust_p_value: float
    n_below: int
    n_above: int
    bandwidth_below: float
    bandwidth_above: float
    units_below: int
    units_above: int
    note: str = ""
    fit: Fit | None = field(default=None, repr=False)

    @classmethod
    def from_fit(cls, label, fit: Fit) -> "EffectRow":
        lo, hi = fit.robust_conf_int
        return cls(label, fit.estimate, fit.std_error, fit.bias_corrected_estimate, fit.robust_std_error, float(lo),
                   float(hi),
                   fit.robust_p_value, fit.n_used[0], fit.n_used[1], fit.bandwidth[0], fit.bandwidth[1],
                   fit.n_total[0], fit.n_total[1], "", fit)

    @classmethod
    def not_fitted(cls, label, units: tuple[int, int], note: str) -> "EffectRow":
        return cls(label, NAN, NAN, NAN, NAN, NAN, NAN, NAN, 0, 0, NAN, NAN, units[0], units[1], note, None)

    @property
    def fitted(self) -> bool:
        return self.fit is not None


@dataclass(frozen=True, eq=False)
class EqualityTest:
    """Chi-square test that all fitted rows share one effect, with precision weights.

    ``statistic`` = sum_k (t_k - t_w)^2 / V_k over the fitted rows' bias-corrected estimates t_k and
    robust variances V_k, t_w = sum(t_k / V_k) / sum(1 / V_k); ``df`` = (number of rows) - 1. The
    estimates are treated as independent (disjoint samples), except at cumulative cutoffs with an
    estimated covariance, where the statistic is the Wald test with that covariance and the common
    effect its generalised-least-squares mean; ``assumption`` says which. When fewer than two rows
    were fitted, the numbers are NaN and ``reason`` says why.
    """
    statistic: float
    df: int
    p_value: float
    common_estimate: float
    common_std_error: float
    labels: tuple
    assumption: str
    reason: str = ""

    @property
    def applies(self) -> bool:
        return not self.reason

    def sentence(self, what: str) -> str:
        if not self.applies:
            return f"Test of equal effects across {what}: not computed ({self.reason})."
        return (f"Test of equal effects across {what} (robust bias-corrected estimates, precision weights): "
                f"chi-square = {self.statistic:.3f} on {self.df} df, p = {self.p_value:.3g}; precision-weighted "
                f"common effect {self.common_estimate:.4g} (se {self.common_std_error:.3g}). {self.assumption}")


def _rows_frame(rows: tuple[EffectRow, ...], label: str) -> pd.DataFrame:
    return pd.DataFrame([{label: r.label, **{c: getattr(r, c) for c in ROW_COLUMNS}} for r in rows],
                        columns=[label, *ROW_COLUMNS])


@dataclass(frozen=True, eq=False)
class Decomposition(Reported):
    """The pooled (normalised-score) estimate next to a weighted average of the cutoff-specific effects.

    Near the normalised cutoff the pooled regression function is a mixture of the cutoff groups, so
    the pooled jump is sum_k w_k tau_k with w_k the share of the units at (normalised) distance zero
    that have cutoff c_k (Cattaneo, Keele, Titiunik & Vazquez-Bare 2016). ``weights`` estimates w_k by
    each group's share of the pooled fit's kernel weight (kernel at the pooled bandwidth times any
    sampling weights), renormalised over the cutoffs that were fitted. The weighted averages use
    each cutoff's own fit (own bandwidth), so they match the pooled estimate only approximately; the
    robust standard error of the average treats the weights as known.
    """
    cutoffs: tuple[float, ...]
    weights: tuple[float, ...]
    estimates: tuple[float, ...]
    robust_estimates: tuple[float, ...]
    robust_std_errors: tuple[float, ...]
    weighted_estimate: float
    weighted_robust_estimate: float
    weighted_robust_std_error: float
    pooled: Fit = field(repr=False)
    outcome: str
    warnings: tuple[str, ...] = ()

    def table(self) -> pd.DataFrame:
        rows = [{"component": f"cutoff {c:g}", "weight": w, "estimate": e, "robust_estimate": r,
                 "robust_std_error": s}
                for c, w, e, r, s in zip(self.cutoffs, self.weights, self.estimates, self.robust_estimates,
                                         self.robust_std_errors)]
        rows.append({"component": "weighted average", "weight": float(np.nansum(self.weights)),
                     "estimate": self.weighted_estimate, "robust_estimate": self.weighted_robust_estimate,
                     "robust_std_error": self.weighted_robust_std_error})
        rows.append({"component": "pooled fit (normalised score)", "weight": NAN, "estimate": self.pooled.estimate,
                     "robust_estimate": self.pooled.bias_corrected_estimate,
                     "robust_std_error": self.pooled.robust_std_error})
        return pd.DataFrame(rows, columns=["component", "weight", "estimate", "robust_estimate", "robust_std_error"])

    def title(self) -> str:
        return f"Pooled estimate of {self.outcome} as a weighted average of cutoff-specific effects"

    def notes(self) -> list[str]:
        h = self.pooled.bandwidth
        return [f"Weights: each cutoff's share of the pooled fit's {self.pooled.kernel} kernel weight at bandwidth "
                f"{h[0]:.4g} below, {h[1]:.4g} above the normalised cutoff (units near the cutoff, not group sizes).",
                "The weighted average uses each cutoff's own bandwidth, so it matches the pooled fit only "
                "approximately; its robust standard error treats the weights as known.",
                CAUTION]


@dataclass(frozen=True, eq=False)
class EffectsTable(Reported):
    """Shared shape of cutoff-specific and subgroup results: rows, a test of equal effects, warnings.

    ``covariance`` is the estimated covariance matrix of the rows' robust estimates (read-only; NaN
    for rows not fitted) when the estimates are correlated and it was computed (see
    seamline.estimate.stacked_covariance); None when the rows are treated as independent.
    """
    rows: tuple[EffectRow, ...]
    equality: EqualityTest
    outcome: str
    level: float
    warnings: tuple[str, ...]
    covariance: np.ndarray | None = field(default=None, repr=False)

    label_column = "label"

    def table(self) -> pd.DataFrame:
        """One row per cutoff or group; rows that could not be fitted are NaN with a ``note``."""
        return _rows_frame(self.rows, self.label_column)

    @property
    def equality_p_value(self) -> float:
        """p-value of the chi-square test of equal effects (NaN when fewer than two rows were fitted)."""
        return self.equality.p_value

    @property
    def fits(self) -> tuple[Fit | None, ...]:
        return tuple(r.fit for r in self.rows)

    def __repr__(self) -> str:
        fitted = sum(r.fitted for r in self.rows)
        test = (f"equal effects p = {self.equality.p_value:.3g}" if self.equality.applies
                else "equal effects: not computed")
        return (f"<{type(self).__name__} {self.outcome}: {len(self.rows)} rows ({fitted} fitted); {test}; "
                f"{len(self.warnings)} warnings>")


@dataclass(frozen=True, eq=False, kw_only=True, repr=False)
class CutoffEffects(EffectsTable):
    """Cutoff-specific effects of a design with several cutoffs.

    ``layout`` "column": each unit's cutoff is read from ``cutoff_column`` (Cattaneo, Keele, Titiunik &
    Vazquez-Bare 2016); each row is the default fit on the units with that cutoff, ``pooled`` is the
    fit on the normalised score (score - cutoff, cutoff 0) and ``decomposition`` writes it as a
    weighted average of the rows. ``layout`` "cumulative": one score with increasing cutoffs, each
    row the default fit on the observations strictly between the neighbouring cutoffs (``pooled``
    and ``decomposition`` are None: the effects are increments of different treatment doses).
    ``covariance`` holds the estimated covariance matrix of the rows' robust estimates where they
    are correlated (adjacent cumulative cutoffs share observations; cutoff groups can share clusters).
    """
    layout: str
    score: str
    cutoff_column: str | None = None
    pooled: Fit | None = field(default=None, repr=False)
    decomposition: Decomposition | None = field(default=None, repr=False)

    label_column = "cutoff"

    def title(self) -> str:
        how = (f"cutoffs from column {self.cutoff_column}" if self.layout == "column"
               else f"cumulative cutoffs on {self.score}")
        return f"Effects on {self.outcome} at each cutoff ({how})"

    def notes(self) -> list[str]:
        notes = [f"Each row is the default fit on its own rows ({'units with that cutoff' if self.layout == 'column' else 'observations strictly between the neighbouring cutoffs'}); "
                 f"robust bias-corrected {self.level:.0%} intervals."]
        if self.pooled is not None:
            lo, hi = self.pooled.robust_conf_int
            notes.append(f"Pooled estimate on the normalised score ({self.pooled.score} = 0): {self.pooled.estimate:.4g} "
                         f"(robust {self.level:.0%} CI [{lo:.4g}, {hi:.4g}]); it averages the cutoff-specific effects "
                         "with weights set by how many units lie near each cutoff.")
        notes.append(self.equality.sentence("cutoffs"))
        notes.append(CAUTION + " Each cutoff-specific effect is local to its own cutoff.")
        return notes


@dataclass(frozen=True, eq=False, kw_only=True, repr=False)
class GroupEffects(EffectsTable):
    """Subgroup effects: one default fit per value of ``column`` on that group's rows."""
    column: str

    label_column = "group"

    def title(self) -> str:
        return f"Effects on {self.outcome} by {self.column}"

    def notes(self) -> list[str]:
        return [f"Each row is the default fit on the group's rows (own bandwidth); robust bias-corrected "
                f"{self.level:.0%} intervals. Groups must be defined before treatment.",
                self.equality.sentence("groups"),
                "A large p-value is not evidence of equal effects; with many groups, adjust for multiple testing.",
                CAUTION]
