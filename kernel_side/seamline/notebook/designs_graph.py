"""Compute-graph nodes of boards with several cutoffs, subgroups and a power calculation.

``compute.compute_graph`` adds these nodes only where they apply, so a single-cutoff board
without ``groups`` never runs them (its by-cutoff and subgroup panels hold a ``NotApplicable``
saying why, at no cost):

====================  ==============================================  ===============================
node                  reads                                           engine call
====================  ==============================================  ===============================
cutoff_effects        rows (with the cutoff column, without the       ``Design.by_cutoff``
                      headline cutoff), the outcome column, outcome,
                      adjust, donut, estimator, bandwidth,
                      pilot_bandwidth -- multi-cutoff boards only
group_effects         rows, the groups column, groups, and the rest   ``Design.by_group`` (of the
                      as cutoff_effects -- boards with ``groups``     headline design)
power                 main_fit, effect                                none: the main fit is the pilot
====================  ==============================================  ===============================

The *headline design* is what every single-cutoff node (main_fit, bins, density, ...) reads: the
design itself, or for cumulative cutoffs ``Design.at(headline cutoff)``; so the source
``headline_cutoff`` enters the rows of those nodes, never cutoff_effects. Results are computed at
the reference level and re-reported at the board's (``at_level`` here), so the level is still the
source of no node. Nothing here imports IPython, widgets or charts.
"""
from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import replace
from typing import Any

from ..errors import shown
from ..estimate.design import Design
from ..results.designs import CutoffEffects, EffectRow, GroupEffects
from .designs_spec import headline_of
from .levels import REFERENCE_LEVEL
from .power_report import PowerReport, power_report
from .reactive import column_node
from .spec import Failure, NotApplicable

__all__ = ["NODES", "PANEL_NODES", "at_level", "compute", "headline_design", "not_applicable", "parents"]

NODES: tuple[str, ...] = ("cutoff_effects", "group_effects", "power")
#: Panel -> node.
PANEL_NODES: Mapping[str, str] = {"by_cutoff": "cutoff_effects", "subgroups": "group_effects", "power": "power"}

SINGLE_REASON = ("This board has one cutoff, so there are no cutoff-specific effects to compare. Declare "
                 "`cutoff: <column>` (a cutoff per unit) or `cutoff: 30, 60` (cumulative cutoffs on one score).")
NO_GROUPS_REASON = ("No subgroups are declared. Add `groups: <column>` (a pre-treatment column such as a "
                    "region) to estimate the effect in each group and test whether the effects differ.")


def parents(*, layout: str, groups: str | None, rows: Iterable[str], outcome_inputs: Iterable[str],
            estimator: Iterable[str]) -> dict[str, list[str]]:
    """The parents of the nodes that apply to a board (the table above)."""
    rows, outcome_inputs, estimator = list(rows), list(outcome_inputs), list(estimator)
    fit_inputs = [*outcome_inputs, "donut", *estimator, "bandwidth", "pilot_bandwidth"]
    out = {"power": ["main_fit", "effect"]}
    if layout != "single":
        out["cutoff_effects"] = [*(r for r in rows if r != "headline_cutoff"), *fit_inputs]
    if groups:
        out["group_effects"] = [*rows, column_node(groups), "groups", *fit_inputs]
    return out


def not_applicable(node: str) -> NotApplicable:
    """The value of a node that is not in a board's graph."""
    return NotApplicable(SINGLE_REASON if node == "cutoff_effects" else NO_GROUPS_REASON)


def headline_design(design: Design, spec: Mapping[str, Any]) -> Design:
    """The design every single-cutoff panel reads: ``design``, or the chosen cumulative cutoff's."""
    cutoff = headline_of(spec)
    return design if cutoff is None else design.at(cutoff)


def compute(comp, node: str) -> Any:
    """One node's value for a ``compute.Computation`` (the engine call in the table above)."""
    if node == "cutoff_effects":
        return comp.design.by_cutoff(**comp._kwargs())
    if node == "group_effects":
        return comp.headline_design().by_group(comp.spec["groups"], **comp._kwargs())
    if node == "power":
        fit = comp.node("main_fit")
        if isinstance(fit, Failure):
            return Failure(f"needs the main fit, which failed: {fit.message}", detail=fit.detail, ours=fit.ours)
        return power_report(fit, comp.spec["effect"], REFERENCE_LEVEL)
    raise AssertionError(f"unknown node {shown(node)}")   # NODES and this dispatch must agree


def _rows_at(rows: tuple[EffectRow, ...], level: float) -> tuple[EffectRow, ...]:
    return tuple(EffectRow.from_fit(r.label, r.fit.with_level(level)) if r.fitted else r for r in rows)


def at_level(comp, panel: str, value: Any, level: float) -> Any:
    """A node's value as its panel reports it at ``level`` (no engine call: fits are re-reported,
    power is recomputed from the main fit's standard error)."""
    if isinstance(value, (Failure, NotApplicable)) or level == REFERENCE_LEVEL:
        return value
    if isinstance(value, CutoffEffects):
        pooled = None if value.pooled is None else value.pooled.with_level(level)
        return replace(value, rows=_rows_at(value.rows, level), level=level, pooled=pooled)
    if isinstance(value, GroupEffects):
        return replace(value, rows=_rows_at(value.rows, level), level=level)
    if isinstance(value, PowerReport):
        return power_report(comp.node("main_fit"), comp.spec["effect"], level)
    return value
