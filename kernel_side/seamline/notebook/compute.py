"""The compute graph of a board: intermediate results, what each reads, and how panels are made.

A board's panels are built from a few *intermediate results*, each computed once per set of
inputs and shared by every panel and by the design checks. Each node below is cached under the
values of the sources it reads (``DependencyGraph.key``), so a change recomputes exactly the nodes
downstream of it; everything is computed at the reference level 0.95 and re-reported at the
board's level (``levels.at_level``), so ``level`` is the source of no node at all.

Sources: ``column:<name>`` (content fingerprint of a used column), ``data`` (which object the data
is), the design keys (``score``, ``cutoff``, ``treated``, ``outcomes`` -- every declared outcome --,
``outcome`` -- the selected one --, ``takeup``, ``covariates``, ``cluster``, ``weights``), the fit
options (``bandwidth``, ``kernel``, ``degree``, ``bias_degree``, ``pilot_bandwidth``,
``variance``, ``donut``, ``derivative``, ``adjust``) and ``balance_rule`` (the bandwidth rule when
``bandwidth`` names one, else "mse"). Below, *rows* = the score, take-up, cluster and weights
columns and names with the cutoff and the treated side (missing values in any of them drop a
row; ``score_unit`` rescales every distance, so it is in the rows too); *estimator* = kernel,
degree, bias_degree, variance, derivative.

====================  ==============================================  ===============================
node                  reads                                           engine call
====================  ==============================================  ===============================
design                data, every used column, the design keys         ``Design(...)``
sample                rows, the outcome column, outcome, adjust,      (grouping only)
                      donut; with adjust also the covariates
selection             sample, estimator                               (grouping only)
main_fit              selection, bandwidth, pilot_bandwidth           ``Design.fit``
selectors             selection                                       ``Design.bandwidths``
bins                  main_fit                                        ``Design.bins``
takeup_bins           main_fit                                        ``Design.bins`` of take-up
sensitivity           main_fit                                        ``Design.sensitivity``
placebo               rows, the outcome column, outcome, donut,       ``Design.placebo_cutoffs``
                      estimator, bandwidth, pilot_bandwidth (no
                      adjustment: placebo fits never adjust)
donut_ladder          main_fit's sources but donut (the ladder        ``Design.donut``
                      sets its own radii)
density               the score column, score, cutoff, score_unit     ``Design.density_test``
balance               rows, covariates, estimator, donut,             ``Design.balance``
                      balance_rule
checks_balance        as balance with the rule "mse" and the pilot    ``Design.balance``
                      bandwidth (what Design.checks reads; shares
                      balance's entry when both coincide)
score_profile         the score column, score, cutoff, score_unit,    ``Design.score_profile``
                      main_fit
checks                main_fit, density, checks_balance,              none: the nodes' results, rows
                      score_profile                                   by ``estimate.check_rows``
====================  ==============================================  ===============================

Boards with several cutoffs, ``groups`` or an ``effect`` add the nodes of ``designs_graph``
(cutoff_effects, group_effects, power; its docstring has their table) where they apply. On such
boards *rows* also hold the cutoff column and ``headline_cutoff``, and every node above reads the
headline design (``designs_graph.headline_design``).

Inside the engine calls, the parts that read no fit option are kept on the Design (so they outlive
the node keys above): ``Design.bins`` keeps its binned means per outcome and bin options (a new
bandwidth redraws the fitted curves only); ``Design.score_profile`` keeps the score's census
(overall counts, resolution, heaping; a new bandwidth counts inside the new window only);
``Design.placebo_cutoffs`` keeps the ladder of placebo cutoffs and each cutoff's design with its
prepared sides, moment tables, neighbour residuals and selections (a new bandwidth costs the
placebo fits only); a donut side takes its neighbour residuals from the full side's beyond its
first J groups of ties. ``tests/notebook/test_live_graph.py`` (``PART_CHANGES``) counts them per
change.
The inference nodes ``bias_aware``, ``weak_iv`` and ``local_randomization`` (the only ones that
read ``level``) have their table in ``compute_inference.py``.

Panels (``PANEL_NODES``) read one node each and only re-report it: ``fit`` and ``first_stage``
read ``main_fit``; ``first_stage_bins`` reads ``takeup_bins``; ``bandwidths`` reads
``selectors``; ``donut`` reads ``donut_ladder`` (a node name is never a source's name); the others read the node of their own name. Consequences: a level change
computes nothing; a bandwidth change leaves the density test, balance (at its own rule), the
selectors and the score column's profile outside the window untouched; editing a covariate
column touches only balance and the checks (unless ``adjust``).

Nothing here imports IPython, widgets or charts.
"""
from __future__ import annotations

import threading
from collections import OrderedDict
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass
from typing import Any

from ..errors import SeamlineError, shown
from ..estimate.check_rows import check_rows
from ..estimate.design import Design
from ..results.diagnostics import Checks
from . import designs_graph
from .levels import REFERENCE_LEVEL, at_level
from .reactive import DependencyGraph, PANELS, column_node
from .spec import FIT_DEFAULTS, Failure, NotApplicable
from . import compute_inference as inference   # the inference nodes (issue 9): their own module

__all__ = ["NODES", "PANEL_NODES", "Computation", "NodeCache", "assemble_checks", "compute_graph",
           "failure", "node_key", "panel_key", "panel_order"]

#: Intermediate results that call the engine (``design``, ``sample`` and ``selection`` group sources).
NODES: tuple[str, ...] = ("main_fit", "selectors", "bins", "takeup_bins", "sensitivity", "placebo", "donut_ladder",
                          "density", "balance", "checks_balance", "score_profile", "checks", *designs_graph.NODES,
                          *inference.INFERENCE_NODES)

#: The node behind each panel.
PANEL_NODES: Mapping[str, str] = {
    "fit": "main_fit", "first_stage": "main_fit", "bins": "bins", "first_stage_bins": "takeup_bins",
    "bandwidths": "selectors", "density": "density", "balance": "balance", "sensitivity": "sensitivity",
    "placebo": "placebo", "donut": "donut_ladder", "score_profile": "score_profile", "checks": "checks",
    **designs_graph.PANEL_NODES,
    **inference.INFERENCE_PANEL_NODES,
}

_DESIGN_KEYS = ("score", "cutoff", "treated", "outcomes", "takeup", "covariates", "cluster", "weights", "score_unit")
_ESTIMATOR = ("kernel", "degree", "bias_degree", "variance", "derivative")


def compute_graph(*, score: str, outcomes: Iterable[str], outcome: str, takeup: str | None = None,
                  covariates: Iterable[str] = (), cluster: str | None = None, weights: str | None = None,
                  adjust: bool = False, cutoff_layout: str = "single", cutoff_column: str | None = None,
                  groups: str | None = None) -> DependencyGraph:
    """The dependency graph of a board's intermediate results for its current declaration
    (the table in this module's docstring).

    Returns
    -------
    DependencyGraph
    """
    covariates = tuple(covariates)
    col = column_node
    used = [score, *outcomes, *(c for c in (takeup, cluster, weights, cutoff_column) if c), *covariates]
    rows = [col(score), *(col(c) for c in (takeup, cluster, weights, cutoff_column) if c),
            "score", "cutoff", "score_unit", "treated", "takeup", "cluster", "weights", "headline_cutoff"]
    covs = [*(col(c) for c in covariates), "covariates"]
    without_donut = [*rows, col(outcome), "outcome", "adjust", *(covs if adjust else [])]
    parents = {
        "design": ["data", *(col(c) for c in used), *_DESIGN_KEYS],
        "sample": [*without_donut, "donut"],
        "selection": ["sample", *_ESTIMATOR],
        "main_fit": ["selection", "bandwidth", "pilot_bandwidth"],
        "selectors": ["selection"],
        "bins": ["main_fit"],
        "takeup_bins": ["main_fit"],
        "sensitivity": ["main_fit"],
        # Placebo fits use one side's rows without take-up or covariate adjustment.
        "placebo": [*rows, col(outcome), "outcome", "donut", *_ESTIMATOR, "bandwidth", "pilot_bandwidth"],
        "donut_ladder": [*without_donut, *_ESTIMATOR, "bandwidth", "pilot_bandwidth"],
        "density": [col(score), "score", "cutoff", "score_unit", "headline_cutoff",
                    *(col(c) for c in (cutoff_column,) if c)],
        "balance": [*rows, *covs, *_ESTIMATOR, "donut", "balance_rule"],
        "checks_balance": [*rows, *covs, *_ESTIMATOR, "donut", "pilot_bandwidth"],
        "score_profile": [col(score), "score", "cutoff", "score_unit", "headline_cutoff",
                          *(col(c) for c in (cutoff_column,) if c), "main_fit"],
        "checks": ["main_fit", "density", "checks_balance", "score_profile"],
        **inference.inference_parents(rows=rows, outcome_column=col(outcome), covariates=covs),
    }
    parents.update(designs_graph.parents(
        layout=cutoff_layout, groups=groups, rows=rows,
        outcome_inputs=[col(outcome), "outcome", "adjust", *(covs if adjust else [])], estimator=_ESTIMATOR))
    return DependencyGraph(parents)


def node_key(graph: DependencyGraph, values: Mapping[str, Any], node: str) -> tuple:
    """The cache key of a node: the values of the sources it reads."""
    if node not in graph.nodes:
        return (node, "does not apply")     # a designs_graph node this board does not have
    if node == "checks_balance":
        # The checks read balance at the rule "mse" (with the pilot bandwidth, as Design.checks
        # does): without a pilot that is the balance panel's own entry under that rule.
        key = graph.key("balance", {**values, "balance_rule": "mse"})
        pilot = values.get("pilot_bandwidth")
        return key if pilot is None else ("checks_balance", *key[1:], ("pilot_bandwidth", pilot))
    return graph.key(node, values)


def panel_key(graph: DependencyGraph, values: Mapping[str, Any], panel: str, level: float) -> tuple:
    """What a panel's result is for: its node's key and the level it is reported at (inference
    panels: and the options their caveats read, ``compute_inference.CAVEAT_SOURCES``)."""
    key = (node_key(graph, values, PANEL_NODES[panel]), level)
    if panel in inference.CAVEAT_SOURCES:
        key += tuple((name, values.get(name)) for name in inference.CAVEAT_SOURCES[panel])
    return key


def balance_rule(bandwidth: Any) -> str:
    """The rule balance uses: the board's bandwidth rule, or "mse" under a manual bandwidth."""
    return bandwidth if isinstance(bandwidth, str) else "mse"


def failure(exc: BaseException, message: str) -> Failure:
    return Failure(message, detail=str(exc), ours=isinstance(exc, SeamlineError))


class NodeCache:
    """Node values by key, least recently used dropped beyond ``size`` (thread-safe)."""

    def __init__(self, size: int = 256):
        self.size = size
        self._values: OrderedDict[tuple, Any] = OrderedDict()
        self._lock = threading.Lock()

    def get(self, key: tuple, default: Any = None) -> Any:
        with self._lock:
            if key not in self._values:
                return default
            self._values.move_to_end(key)
            return self._values[key]

    def __contains__(self, key: tuple) -> bool:
        with self._lock:
            return key in self._values

    def put(self, key: tuple, value: Any) -> None:
        with self._lock:
            self._values[key] = value
            self._values.move_to_end(key)
            while len(self._values) > self.size:
                self._values.popitem(last=False)

    def clear(self) -> None:
        with self._lock:
            self._values.clear()


_MISSING = object()


@dataclass(frozen=True)
class Computation:
    """Computes the nodes and panels of one set of inputs, sharing ``cache`` with earlier sets.

    Parameters
    ----------
    design : the Design of these inputs
    graph : their ``compute_graph``
    values : the source values (keys of ``graph.sources``)
    spec, options, selected : the declaration, the fit options and the selected outcome
    cache : node values by key
    describe : exception -> the message a panel shows
    store : whether computed nodes go into ``cache`` (False for inputs already superseded by a
        data change, whose results are discarded)
    """

    design: Design
    graph: DependencyGraph
    values: Mapping[str, Any]
    spec: Mapping[str, Any]
    options: Mapping[str, Any]
    selected: str
    cache: NodeCache
    describe: Callable[[BaseException], str]
    store: Callable[[], bool] = lambda: True

    def node_key(self, node: str) -> tuple:
        return node_key(self.graph, self.values, node)

    def is_cached(self, panel: str) -> bool:
        return self.node_key(PANEL_NODES[panel]) in self.cache

    def node(self, node: str) -> Any:
        """A node's value (a result, ``NotApplicable`` or ``Failure``), computed once per key."""
        key = self.node_key(node)
        value = self.cache.get(key, _MISSING)
        if value is _MISSING:
            try:
                value = self._compute(node)
            except Exception as exc:   # shown in the panel; never raised into the kernel
                value = failure(exc, self.describe(exc))
            if self.store():
                self.cache.put(key, value)
        return value

    def panel(self, panel: str) -> Any:
        """A panel's result at the board's level (or ``NotApplicable`` / ``Failure``); the same
        object each time for the same inputs, so views can tell a change by identity."""
        key = ("panel", panel, panel_key(self.graph, self.values, panel, self.options["level"]))
        value = self.cache.get(key, _MISSING)
        if value is _MISSING:
            value = self._panel(panel)
            if self.store():
                self.cache.put(key, value)
        return value

    def _panel(self, panel: str) -> Any:
        level = self.options["level"]
        if panel in inference.INFERENCE_PANEL_NODES:
            return inference.inference_panel(self, panel)
        if panel in ("fit", "first_stage"):
            main = self.node("main_fit")
            if isinstance(main, Failure):
                return main if panel == "fit" else Failure(f"needs the main fit, which failed: {main.message}")
            fit = main.with_level(level)
            if panel == "fit":
                return fit
            if fit.first_stage is None:
                return NotApplicable(sharp_reason(self.spec["takeup"]))
            return fit.first_stage
        value = self.node(PANEL_NODES[panel])
        if panel in designs_graph.PANEL_NODES:
            return designs_graph.at_level(self, panel, value, level)
        return value if isinstance(value, (Failure, NotApplicable)) else at_level(value, level)

    # ---- the engine calls ----------------------------------------------------------------------
    def _kwargs(self, *drop: str) -> dict[str, Any]:
        fit_options = {k: v for k, v in self.options.items() if k in FIT_DEFAULTS}
        kwargs = {"outcome": self.selected, **fit_options, "level": REFERENCE_LEVEL}
        for name in drop:
            kwargs.pop(name, None)
        return kwargs

    def _main(self):
        main = self.node("main_fit")
        if isinstance(main, Failure):
            raise _Upstream(main)
        return main

    def headline_design(self) -> Design:
        """The design the single-cutoff nodes read (``designs_graph.headline_design``)."""
        return designs_graph.headline_design(self.design, self.spec)

    def _compute(self, node: str) -> Any:
        if node in designs_graph.NODES:
            if node not in self.graph.nodes:
                return designs_graph.not_applicable(node)
            return designs_graph.compute(self, node)
        design, opts = self.headline_design(), self.options
        try:
            if node in inference.INFERENCE_NODES:
                return inference.compute_inference(self, node)
            if node == "main_fit":
                return design.fit(**self._kwargs())
            if node == "selectors":
                return design.bandwidths(self.selected, **{k: opts[k] for k in (*_ESTIMATOR, "donut", "adjust")})
            if node == "bins":
                self._main()
                return design.bins(**self._kwargs())
            if node == "takeup_bins":
                fit = self._main()
                if fit.first_stage is None:
                    return NotApplicable(sharp_reason(self.spec["takeup"]))
                # The take-up jump drawn at the main fit's bandwidths: the first stage the estimate uses.
                kwargs = self._kwargs("outcome", "adjust")
                kwargs.update(bandwidth=fit.bandwidth, pilot_bandwidth=fit.pilot_bandwidth)
                return design.bins(self.spec["takeup"], **kwargs)
            if node == "sensitivity":
                self._main()
                return design.sensitivity(**self._kwargs())
            if node == "placebo":
                self._main()
                return design.placebo_cutoffs(**self._kwargs())
            if node == "donut_ladder":
                return design.donut(**self._kwargs("donut"))
            if node == "density":
                return design.density_test()
            if node in ("balance", "checks_balance"):
                if not self.spec["covariates"]:
                    return NotApplicable("No covariates are declared, so there is nothing to check for balance. "
                                         "Declare pre-treatment columns with `covariates: age, prior_score`.")
                if node == "checks_balance":
                    pilot = () if opts["pilot_bandwidth"] is not None else ("pilot_bandwidth",)
                    return design.balance(rule="mse", **self._kwargs("outcome", "bandwidth", "adjust", *pilot))
                return design.balance(rule=balance_rule(opts["bandwidth"]),
                                      **self._kwargs("outcome", "bandwidth", "pilot_bandwidth", "adjust"))
            if node == "score_profile":
                return design.score_profile(**self._kwargs())
            if node == "checks":
                return assemble_checks(self.node("main_fit"), self.node("density"), self.node("checks_balance"),
                                       self.node("score_profile"), adjust=bool(opts["adjust"]))
        except _Upstream as up:
            return Failure(f"needs the main fit, which failed: {up.failure.message}", detail=up.failure.detail,
                           ours=up.failure.ours)
        raise AssertionError(f"unknown node {shown(node)}")   # NODES and this dispatch must agree


class _Upstream(Exception):
    def __init__(self, failure: Failure):
        super().__init__(failure.message)
        self.failure = failure


def sharp_reason(takeup: str | None) -> str:
    if takeup:
        return (f"Take-up column {takeup!r} equals assignment on every usable row, so the design is sharp and "
                "there is no first stage to report.")
    return ("Sharp design: treatment follows the side of the cutoff exactly, so there is no first stage. "
            "Declare `takeup: <column>` for a fuzzy design.")


def _raise_if_foreign(value: Any) -> None:
    # Design.checks lets anything but a seamline input error propagate: so does the assembly.
    if isinstance(value, Failure) and not value.ours:
        raise RuntimeError(value.message)


def assemble_checks(fit: Any, density: Any, balance: Any, profile: Any, *, adjust: bool) -> Checks:
    """The design checks summary from results already computed: the rows ``Design.checks`` gives
    for the same options (both build them with ``estimate.check_rows``), without running the fit,
    the density test, balance or the score profile again.

    Parameters
    ----------
    fit : the main Fit (or a Failure); density : DensityTest; balance : Balance at the rule "mse",
        ``NotApplicable`` without covariates; profile : ScoreProfile (each may be a Failure)
    adjust : whether the fit adjusts for the covariates (noted beside a balance flag)

    Returns
    -------
    Checks
    """
    for value in (fit, density, balance, profile):
        _raise_if_foreign(value)

    def given(value: Any) -> Any:      # a Failure becomes the error text Design.checks shows
        return (value.detail or value.message) if isinstance(value, Failure) else value

    return check_rows(given(fit), given(density), None if isinstance(balance, NotApplicable) else given(balance),
                      given(profile), adjust=adjust)


def panel_order(wanted: Iterable[str], panels: Iterable[str]) -> list[str]:
    """The order a board computes its panels in: the headline first, then the wanted panels, then
    the rest in ``PANELS`` order."""
    panels = [p for p in PANELS if p in set(panels)]
    wanted = set(wanted)
    head = [p for p in ("fit", "first_stage") if p in panels]
    return head + [p for p in panels if p in wanted and p not in head] + \
        [p for p in panels if p not in wanted and p not in head]
