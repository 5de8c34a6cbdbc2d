"""Frozen results of the validity diagnostics: density test, balance, sensitivity, placebos, donut,
binned scatter, score profile and the design-level checks summary."""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .base import Reported
from .fit import Fit

ESTIMATE_COLUMNS = ["bandwidth_below", "bandwidth_above", "kernel", "degree", "estimate", "std_error",
                    "robust_estimate", "robust_std_error", "robust_ci_low", "robust_ci_high",
                    "robust_p_value", "n_below", "n_above"]


def fit_row(fit: Fit) -> dict:
    """The columns sensitivity, placebo and donut tables share, from one Fit."""
    lo, hi = fit.robust_conf_int
    return {"bandwidth_below": fit.bandwidth[0], "bandwidth_above": fit.bandwidth[1], "kernel": fit.kernel,
            "degree": fit.degree, "estimate": fit.estimate, "std_error": fit.std_error,
            "robust_estimate": fit.bias_corrected_estimate, "robust_std_error": fit.robust_std_error,
            "robust_ci_low": lo, "robust_ci_high": hi, "robust_p_value": fit.robust_p_value,
            "n_below": fit.n_used[0], "n_above": fit.n_used[1]}


def _frame(rows: list[dict], first: list[str]) -> pd.DataFrame:
    return pd.DataFrame(rows, columns=first + ESTIMATE_COLUMNS)


@dataclass(frozen=True, eq=False)
class DensityTest(Reported):
    """Test of continuity of the score's density at the cutoff (no sorting around it).

    ``method`` "local-cdf": local polynomial density estimator on the empirical distribution function
    (Cattaneo, Jansson & Ma 2020), robust bias-corrected statistic. ``method`` "binned": McCrary (2008)
    log-difference of local linear fits to a fine histogram.
    """
    method: str
    score: str
    cutoff: float
    statistic: float
    p_value: float
    density_below: float
    density_above: float
    ci_below: tuple[float, float]
    ci_above: tuple[float, float]
    bandwidth: tuple[float, float]
    n_used: tuple[int, int]
    n_total: tuple[int, int]
    level: float
    tie_share: float
    estimate: object = field(repr=False)   # the core DensityEstimate with grid and histogram arrays
    warnings: tuple[str, ...] = ()
    time_scale: object = None      # a date score's TimeScale (set by Design; None: numeric score)

    def table(self) -> pd.DataFrame:
        e = self.estimate
        rows = []
        for side, dens, se, ci, h, n in (("below", self.density_below, e.se_below, self.ci_below,
                                          self.bandwidth[0], self.n_used[0]),
                                         ("above", self.density_above, e.se_above, self.ci_above,
                                          self.bandwidth[1], self.n_used[1])):
            rows.append({"side": side, "density": dens, "std_error": se, "ci_low": ci[0], "ci_high": ci[1],
                         "bandwidth": h, "n_used": n})
        return pd.DataFrame(rows)

    def grid(self) -> pd.DataFrame:
        """Fitted densities with confidence bands on a grid of points on each side (for plotting)."""
        g = self.estimate.grid
        return pd.DataFrame({"side": g.side, "x": g.x, "density": g.density, "ci_low": g.ci_low,
                             "ci_high": g.ci_high})

    def histogram(self) -> pd.DataFrame:
        """Histogram of the score with bins that never straddle the cutoff; density = count/(n width)."""
        hst = self.estimate.histogram
        return pd.DataFrame({"side": hst.side, "left": hst.left, "right": hst.right, "count": hst.count,
                             "density": hst.height})

    def title(self) -> str:
        name = "local polynomial (CDF-based)" if self.method == "local-cdf" else "binned (McCrary)"
        return f"Density test at {self.score} = {self.cutoff:g}: {name}"

    def notes(self) -> list[str]:
        return [f"Test statistic {self.statistic:.3f}, p-value {self.p_value:.3f}; bandwidth "
                f"{self.bandwidth[0]:.4g} below, {self.bandwidth[1]:.4g} above.",
                "A small p-value is evidence that units sorted around the cutoff; a large one does not prove "
                "the absence of manipulation."]


@dataclass(frozen=True, eq=False)
class Balance(Reported):
    """Pre-treatment covariates treated as outcomes of the same design (placebo outcomes)."""
    rows: tuple[dict, ...]
    joint_statistic: float
    joint_df: int
    joint_p_value: float
    joint_n: int
    bandwidth_source: str
    level: float
    fits: tuple[Fit, ...] = field(repr=False, default=())
    warnings: tuple[str, ...] = ()

    def table(self) -> pd.DataFrame:
        return pd.DataFrame(list(self.rows), columns=[
            "covariate", "estimate", "std_error", "robust_estimate", "robust_std_error", "ci_low", "ci_high",
            "p_value", "p_value_holm", "bandwidth_below", "bandwidth_above", "mean_below", "mean_above",
            "n_below", "n_above"])

    def title(self) -> str:
        return "Covariate balance at the cutoff (covariates as placebo outcomes)"

    def notes(self) -> list[str]:
        return [f"Robust bias-corrected {self.level:.0%} intervals and p-values; Holm-adjusted p-values across "
                f"covariates; bandwidths: {self.bandwidth_source}.",
                f"Joint Wald test of no jump in any covariate (joint covariance of the estimates): chi2({self.joint_df}) = "
                f"{self.joint_statistic:.2f}, p = {self.joint_p_value:.3f} on {self.joint_n} complete rows."]


@dataclass(frozen=True, eq=False)
class Sensitivity(Reported):
    """The same design re-estimated over a grid of bandwidths, kernels and degrees."""
    rows: tuple[dict, ...]
    outcome: str
    selected: tuple[float, float]
    fits: tuple[Fit, ...] = field(repr=False, default=())
    warnings: tuple[str, ...] = ()
    time_scale: object = None      # a date score's TimeScale (bandwidths are then in its unit)

    def table(self) -> pd.DataFrame:
        return _frame(list(self.rows), ["label"])

    def title(self) -> str:
        unit = "" if self.time_scale is None else f" (bandwidths in {self.time_scale.unit})"
        return f"Bandwidth sensitivity: {self.outcome}{unit}"

    def notes(self) -> list[str]:
        return ["Rows \"0.5 x selected\" ... \"2 x selected\" scale the selected bandwidth; named rows use that "
                "selector. Robust bias-corrected intervals are valid for bandwidths not much larger than the "
                "MSE-optimal one; "
                "choosing the bandwidth after looking at this table invalidates nominal coverage."]


@dataclass(frozen=True, eq=False)
class Placebo(Reported):
    """Estimates at fake cutoffs, each using only the observations on one side of the true cutoff."""
    rows: tuple[dict, ...]
    outcome: str
    skipped: tuple[str, ...] = ()
    fits: tuple[Fit, ...] = field(repr=False, default=())
    warnings: tuple[str, ...] = ()
    cutoff_dates: tuple[str, ...] = ()     # a date score's placebo cutoffs as dates (row order)
    time_scale: object = None

    def table(self) -> pd.DataFrame:
        frame = _frame(list(self.rows), ["cutoff", "side"])
        if self.cutoff_dates:
            frame.insert(1, "cutoff_date", list(self.cutoff_dates))
        return frame

    def title(self) -> str:
        return f"Placebo cutoffs: {self.outcome}"

    def notes(self) -> list[str]:
        notes = ["Each placebo uses only observations on its side of the true cutoff, so the true jump cannot "
                 "leak in; about 5% of placebos should reject at the 5% level by chance."]
        if self.skipped:
            notes.append("Skipped: " + "; ".join(self.skipped))
        return notes


@dataclass(frozen=True, eq=False)
class Donut(Reported):
    """Estimates excluding observations within each radius of the cutoff (bandwidth re-selected)."""
    rows: tuple[dict, ...]
    outcome: str
    fits: tuple[Fit, ...] = field(repr=False, default=())
    warnings: tuple[str, ...] = ()
    time_scale: object = None      # a date score's TimeScale: radii are then durations in its unit

    def table(self) -> pd.DataFrame:
        frame = _frame(list(self.rows), ["radius", "n_excluded"])
        if self.time_scale is not None:
            frame.insert(1, "radius_duration", [self.time_scale.length(r) for r in frame["radius"]])
        return frame

    def title(self) -> str:
        return f"Donut estimates: {self.outcome}"

    def notes(self) -> list[str]:
        return ["Estimates extrapolate to the cutoff from outside the donut, so their bias grows with the radius."]


@dataclass(frozen=True, eq=False)
class Bins(Reported):
    """Binned means for an RD plot, and the fitted local polynomial curves inside the bandwidth."""
    outcome: str
    score: str
    cutoff: float
    method: str
    rule: str
    number: tuple[int, int]
    level: float
    binned: object = field(repr=False)        # core BinnedMeans
    curve_frame: pd.DataFrame = field(repr=False, default=None)
    global_frame: pd.DataFrame | None = field(repr=False, default=None)
    fit: Fit | None = field(repr=False, default=None)
    warnings: tuple[str, ...] = ()
    time_scale: object = None      # a date score's TimeScale (set by Design; None: numeric score)

    def table(self) -> pd.DataFrame:
        b = self.binned
        return pd.DataFrame({"side": b.side, "left": b.left, "right": b.right, "count": b.count,
                             "mean": b.mean, "ci_low": b.ci_low, "ci_high": b.ci_high, "score_mean": b.score_mean,
                             "std_error": b.std_error})

    def curve(self) -> pd.DataFrame:
        """The local polynomial fit on each side inside the bandwidth with its pointwise CI band."""
        return self.curve_frame.copy()

    def global_polynomial(self) -> pd.DataFrame | None:
        """A global polynomial on each side, for display only (not an estimator; Gelman & Imbens 2019)."""
        return None if self.global_frame is None else self.global_frame.copy()

    def title(self) -> str:
        return f"Binned means of {self.outcome} by {self.score}"

    def notes(self) -> list[str]:
        kind = "equal-width" if self.method == "equal-width" else "equal-count"
        return [f"{self.number[0]} {kind} bins below and {self.number[1]} above the cutoff ({self.rule}); "
                f"{self.level:.0%} intervals of the bin means."]


@dataclass(frozen=True, eq=False)
class ScoreProfile(Reported):
    """How discrete the score is: distinct values and mass points per side, overall and in the window."""
    rows: tuple[dict, ...]
    score: str
    bandwidth: tuple[float, float]
    resolution: float
    heaping: tuple[dict, ...]
    warnings: tuple[str, ...] = ()

    def table(self) -> pd.DataFrame:
        return pd.DataFrame(list(self.rows), columns=[
            "side", "scope", "observations", "distinct_values", "mass_points", "share_at_mass_points",
            "largest_mass"])

    def title(self) -> str:
        return f"Score profile: {self.score}"

    def notes(self) -> list[str]:
        notes = [f"Window: bandwidth {self.bandwidth[0]:.4g} below, {self.bandwidth[1]:.4g} above. A mass point is "
                 "a score value held by two or more observations."]
        for h in self.heaping:
            notes.append(f"Share of observations at multiples of {h['step']:g}: {h['share']:.3f} "
                         f"(about {h['expected']:.3f} expected without heaping).")
        return notes


@dataclass(frozen=True, eq=False)
class Checks(Reported):
    """Design-level summary of what a careful analyst would flag."""
    rows: tuple[dict, ...]
    warnings: tuple[str, ...] = ()

    def table(self) -> pd.DataFrame:
        return pd.DataFrame(list(self.rows), columns=["check", "status", "detail"])

    def title(self) -> str:
        return "Design checks"

    @property
    def flagged(self) -> bool:
        return any(r["status"] == "flag" for r in self.rows)


def holm(p_values: np.ndarray) -> np.ndarray:
    """Holm (1979) step-down adjusted p-values."""
    p = np.asarray(p_values, dtype=float)
    m = len(p)
    order = np.argsort(p)
    adjusted = np.empty(m)
    running = 0.0
    for rank, idx in enumerate(order):
        running = max(running, min(1.0, (m - rank) * p[idx]))
        adjusted[idx] = running
    return adjusted
