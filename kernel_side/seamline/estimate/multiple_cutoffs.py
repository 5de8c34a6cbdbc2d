"""Designs with several cutoffs: a cutoff that differs by unit (a column), or cumulative cutoffs on one score.

Column of cutoffs (Cattaneo, Keele, Titiunik & Vazquez-Bare 2016): unit i is treated when its score
reaches its own cutoff C_i. The design itself is the pooled design on the normalised score
``score - cutoff`` with cutoff 0, built here as an ordinary single-cutoff frame, so ``fit`` and every
diagnostic run unchanged on it. Each cutoff-specific effect is the default fit of the units with that
cutoff. Cumulative cutoffs c_1 < ... < c_K on one score: the effect at c_k is the default fit on the
observations strictly between c_{k-1} and c_{k+1}, so that no other cutoff's jump enters its windows.
"""
from __future__ import annotations

from dataclasses import dataclass
from numbers import Real

import numpy as np
import pandas as pd

from ..core.kernels import kernel_weights
from ..data import numeric_column
from ..time_score import is_time_column, is_time_value, looks_like_date
from ..errors import CutoffChoiceError, CutoffOrderError, InvalidOptionError, SingleCutoffError, TooFewUnitsError, shown
from ..results.designs import CutoffEffects, Decomposition, EffectRow
from .effect_rows import (MIN_UNITS_PER_SIDE, SHARED_CLUSTERS_ACCOUNTED, clustered_covariance, equality_test,
                          fit_row, row_warnings, shared_clusters)
from .stacked_covariance import adjacent_covariance

INDEPENDENT = ("The cutoff groups are disjoint samples, so their estimates are treated as independent.")


@dataclass(frozen=True, eq=False)
class CutoffPlan:
    """How a Design's ``cutoff`` argument was read.

    ``layout`` is "single", "column" or "cumulative"; ``cutoffs`` the distinct cutoffs in increasing
    order; ``score`` and ``cutoff`` what the design's own fits use (the normalised score and 0 for a
    column; None for cumulative cutoffs, which have no single design); ``frame`` the data those fits
    read; ``per_row`` each row's cutoff (column layout only).
    """
    layout: str
    cutoffs: tuple[float, ...]
    column: str | None
    score: str
    cutoff: float | None
    frame: pd.DataFrame | None
    per_row: np.ndarray | None = None


def plan_cutoffs(frame: pd.DataFrame, score: str, cutoff, columns: tuple[str, ...],
                 score_unit: str | None = None) -> CutoffPlan:
    """Read ``cutoff``: a number, a date (date scores), the name of a column of per-unit cutoffs, or
    increasing numbers."""
    time_score = (score in frame.columns and not isinstance(frame[score], pd.DataFrame)
                  and is_time_column(frame[score]))
    is_column = isinstance(cutoff, str) and cutoff in frame.columns
    if not is_column and (time_score or is_time_value(cutoff) or looks_like_date(cutoff)):
        # One cutoff date, or a date/number mismatch that the data layer names (seamline.time_score).
        return CutoffPlan("single", (0.0,), None, score, cutoff, frame)
    if score_unit is not None and time_score:
        raise InvalidOptionError(f"`score_unit` applies to date or time scores with one cutoff date only; got "
                                 f"{shown(score_unit)} for score {shown(score)}. Leave it out.")
    if score_unit is not None:
        raise InvalidOptionError(f"`score_unit` applies to date or time scores only; got {shown(score_unit)} for the "
                                 f"numeric score {shown(score)}. Remove it, or declare a date or datetime column "
                                 "as the score.")
    if isinstance(cutoff, str):
        return _column_plan(frame, score, cutoff, columns)
    if isinstance(cutoff, (list, tuple, np.ndarray, pd.Series)) and np.ndim(cutoff) > 0:
        values = list(np.ravel(np.asarray(cutoff, dtype=object)))
        if len(values) != 1:
            return _cumulative_plan(frame, score, values)
        cutoff = values[0]
    try:
        value = float(cutoff)
    except (TypeError, ValueError):
        raise InvalidOptionError(f"`cutoff` must be a number, a column name or a list of increasing numbers; got "
                                 f"{shown(cutoff)}. Pass e.g. cutoff=40, cutoff=\"threshold\" or cutoff=[30, 60].") from None
    return CutoffPlan("single", (value,), None, score, value, frame)


def _column_plan(frame: pd.DataFrame, score: str, column: str, columns: tuple[str, ...]) -> CutoffPlan:
    per_row = numeric_column(frame, column, "cutoff")
    distinct = np.unique(per_row[~np.isnan(per_row)])
    if len(distinct) < 2:
        raise SingleCutoffError(f"`cutoff` column {shown(column)} must hold at least two distinct cutoffs; got only "
                                f"{distinct[0]:g}. Pass cutoff={distinct[0]:g} for a single-cutoff design.")
    x = numeric_column(frame, score, "score")
    label = f"{score} - {column}"
    while label in columns or label == column:
        label += " (normalised)"
    parts = {label: x - per_row}
    for name in dict.fromkeys(columns):         # a new frame: the user's data is never modified
        parts[name] = frame[name].to_numpy()
    normalised = pd.DataFrame(parts, index=frame.index)
    return CutoffPlan("column", tuple(float(c) for c in distinct), column, label, 0.0, normalised, per_row)


def _cumulative_plan(frame: pd.DataFrame, score: str, values: list) -> CutoffPlan:
    if len(values) == 0 or not all(isinstance(v, Real) and not isinstance(v, bool) and np.isfinite(v)
                                   for v in values):
        raise CutoffOrderError(f"`cutoff` must be a list of finite numbers; got {shown(values)}. Pass e.g. cutoff=[30, 60].")
    cutoffs = [float(v) for v in values]
    if any(b <= a for a, b in zip(cutoffs, cutoffs[1:])):
        raise CutoffOrderError(f"`cutoff` must be strictly increasing cumulative cutoffs; got {shown(values)}. "
                               f"Sort them and drop repeats: cutoff={shown(sorted(set(cutoffs)))}.")
    x = numeric_column(frame, score, "score")
    x = x[~np.isnan(x)]
    lo, hi = float(x.min()), float(x.max())
    outside = [c for c in cutoffs if not lo < c <= hi]
    if outside:
        raise InvalidOptionError(f"`cutoff` values must lie inside the range of score {shown(score)} ({lo:g}, {hi:g}]; "
                                 f"got {shown(outside)}. Check the cutoffs and their units.")
    edges = [-np.inf, *cutoffs, np.inf]
    for a, b in zip(edges, edges[1:]):
        n = int(np.sum((x > a) & (x < b)))
        if n < MIN_UNITS_PER_SIDE:
            where = (f"below {b:g}" if a == -np.inf else f"above {a:g}" if b == np.inf
                     else f"strictly between {a:g} and {b:g}")
            raise TooFewUnitsError(f"`cutoff` must leave at least {MIN_UNITS_PER_SIDE} observations between "
                                   f"neighbouring cutoffs; got {n} with {shown(score)} {where}. Drop or move one of "
                                   "the cutoffs (or collect more data there).")
    return CutoffPlan("cumulative", tuple(cutoffs), None, score, None, None)


class CutoffNotChosen:
    """Stands in for the data of a design with cumulative cutoffs: any single-cutoff use names the fix."""

    def __init__(self, cutoffs: tuple[float, ...]):
        self._cutoffs = cutoffs

    def __getattr__(self, name):
        if name.startswith("__") or name == "_cutoffs":   # copy and pickle probe hooks before state exists
            raise AttributeError(name)
        c = self._cutoffs
        raise CutoffChoiceError(f"`cutoff` must be chosen first on a design with cumulative cutoffs "
                                f"{[float(v) for v in c]}; got a call that needs one cutoff. Use "
                                f"design.at({c[0]:g}).fit() (each cutoff is a design of its own) or design.by_cutoff().")


# ---------------------------------------------------------------------------------------------
def rows_of(design, cutoff: float) -> np.ndarray:
    """Boolean mask of the user's rows that make up the design at one of several cutoffs."""
    plan = design._plan
    if plan.layout == "column":
        return plan.per_row == cutoff
    x = numeric_column(design._frame, design._declared["score"], "score")
    k = plan.cutoffs.index(cutoff)
    below = plan.cutoffs[k - 1] if k > 0 else -np.inf
    above = plan.cutoffs[k + 1] if k + 1 < len(plan.cutoffs) else np.inf
    return (x > below) & (x < above)


def by_cutoff(design, **fit_options) -> CutoffEffects:
    """Cutoff-specific effects; for a cutoff column also the pooled fit and its decomposition."""
    plan = design._plan
    if plan.layout == "single":
        raise SingleCutoffError(f"`cutoff` must be a column name or a list of cutoffs for by_cutoff(); got the single "
                                f"cutoff {plan.cutoff:g}. Declare Design(..., cutoff=\"<column>\") or cutoff=[30, 60].")
    rows = tuple(fit_row(c, lambda c=c: design.at(c), fit_options) for c in plan.cutoffs)
    warnings = row_warnings(rows, "cutoff")
    outcome = rows[0].fit.outcome if any(r.fitted for r in rows) else design._outcome(fit_options.get("outcome"))
    level = fit_options.get("level", 0.95)
    pooled = decomposition = covariance = None
    if plan.layout == "column":
        assumption = INDEPENDENT
        if design.cluster is not None and shared_clusters(design, plan.per_row):
            covariance = clustered_covariance(rows, [design.at(c) if r.fitted else None
                                                     for c, r in zip(plan.cutoffs, rows)], fit_options)
            if covariance is None:
                assumption = ("Some clusters hold units with different cutoffs; the test ignores the resulting "
                              "correlation (conservative when it is positive).")
                warnings.append(assumption)
            else:
                assumption = SHARED_CLUSTERS_ACCOUNTED
        pooled = design.fit(**fit_options)
        outcome = pooled.outcome
        decomposition = decompose(design, pooled, rows)
        warnings += decomposition.warnings
    else:
        covariance = cumulative_covariance(design, rows, fit_options)
        if covariance is not None:
            assumption = ("Adjacent cumulative cutoffs share the observations between them; the test uses the "
                          "estimated covariance of adjacent estimates (stacked sandwich).")
        else:
            assumption = ("Adjacent cumulative cutoffs share the observations between them; the test treats the "
                          "estimates as independent.")
            warnings += overlap_warnings(rows, plan.cutoffs)
    equality = equality_test(rows, assumption, covariance)
    return CutoffEffects(rows=rows, equality=equality, outcome=outcome, level=level, warnings=tuple(warnings),
                         layout=plan.layout, score=design._declared["score"], cutoff_column=plan.column,
                         covariance=covariance, pooled=pooled, decomposition=decomposition)


def cumulative_covariance(design, rows: tuple[EffectRow, ...], fit_options: dict) -> np.ndarray | None:
    """Covariance of the rows' robust estimates (read-only); None where it is not computed (see
    seamline.estimate.stacked_covariance). Rows that were not fitted have NaN entries."""
    k = len(rows)
    cov = np.full((k, k), np.nan)
    for i, r in enumerate(rows):
        if r.fitted:
            cov[i, :] = np.where([o.fitted for o in rows], 0.0, np.nan)
            cov[i, i] = r.robust_std_error ** 2
    for i in range(k - 1):
        if rows[i].fitted and rows[i + 1].fitted:
            c = adjacent_covariance(design.at(rows[i].label), design.at(rows[i + 1].label), fit_options)
            if c is None:
                return None
            cov[i, i + 1] = cov[i + 1, i] = c
    cov.setflags(write=False)
    return cov


def overlap_warnings(rows: tuple[EffectRow, ...], cutoffs: tuple[float, ...]) -> list[str]:
    out = []
    for left, right, gap in zip(rows, rows[1:], np.diff(cutoffs)):
        if left.fitted and right.fitted:
            reach = left.fit.pilot_bandwidth[1] + right.fit.pilot_bandwidth[0]
            if reach > gap:
                out.append(f"The robust windows of cutoffs {left.label:g} and {right.label:g} overlap "
                           f"(reach {reach:.4g} > gap {gap:.4g}): the two estimates share observations "
                           "and are correlated; the test of equal effects ignores that correlation.")
    return out


def decompose(design, pooled, rows: tuple[EffectRow, ...]) -> Decomposition:
    """Weights w_k: each cutoff group's share of the pooled fit's kernel weight near the normalised cutoff."""
    data, plan = design._data, design._plan
    x = data.arrays[design.score]
    ok = ~np.isnan(x) & ~np.isnan(data.arrays[pooled.outcome]) & (np.abs(x) >= pooled.donut)
    if design.takeup and pooled.kind == "fuzzy":
        ok &= ~np.isnan(data.arrays[design.takeup])
    h_below, h_above = pooled.bandwidth
    u = np.where(ok, np.where(x < 0, -x / h_below, x / h_above), 2.0)   # 2: outside every window
    k = kernel_weights(pooled.kernel, u)
    if data.weights is not None:
        k = k * np.where(np.isnan(data.weights), 0.0, data.weights)
    shares = np.array([k[plan.per_row == c].sum() for c in plan.cutoffs]) / k.sum()
    fitted = np.array([r.fitted for r in rows])
    warnings = []
    if not fitted.all():
        warnings.append(f"The weighted average leaves out cutoffs that were not fitted (share "
                        f"{shares[~fitted].sum():.1%} of the pooled kernel weight); weights are renormalised.")
    w = np.where(fitted, shares, 0.0)
    w = w / w.sum() if w.sum() > 0 else w
    est = np.array([r.estimate for r in rows])
    rob = np.array([r.robust_estimate for r in rows])
    rse = np.array([r.robust_std_error for r in rows])
    use = fitted & (w > 0)
    return Decomposition(cutoffs=plan.cutoffs, weights=tuple(float(v) for v in w),
                         estimates=tuple(map(float, est)), robust_estimates=tuple(map(float, rob)),
                         robust_std_errors=tuple(map(float, rse)),
                         weighted_estimate=float(np.sum(w[use] * est[use])),
                         weighted_robust_estimate=float(np.sum(w[use] * rob[use])),
                         weighted_robust_std_error=float(np.sqrt(np.sum((w[use] * rse[use]) ** 2))),
                         pooled=pooled, outcome=pooled.outcome, warnings=tuple(warnings))
