"""Compute-graph nodes of the inference beyond the robust interval: bias-aware intervals, the
weak-instrument-robust set and local randomization (issue 9).

====================  ==============================================  ===============================
node                  reads                                           engine call
====================  ==============================================  ===============================
bias_aware            rows, the outcome column, outcome, kernel,      ``Design.bias_aware``
                      degree, derivative, smoothness, level
weak_iv               main_fit, level (fuzzy boards only)             ``Fit.weak_iv_conf_set``
local_randomization   rows, the outcome column, outcome, the          ``Design.local_randomization``
                      covariates, window, statistic, permutations,
                      seed, level
====================  ==============================================  ===============================

Unlike the other nodes these read ``level``: a bias-aware critical value (a folded normal
quantile), the set of a quadratic inequality and an inverted randomization test cannot be
re-reported at another level by scaling a half-width, so a level change calls the engine again;
the engine keeps on the design what reads no level (the searched bandwidths' moments, the draws'
balance and window tests), and ``seed: none`` draws one seed per design (``drawn_seed``), so the
call re-reports from those (tens of milliseconds at 1e6 rows). A node that does not apply returns
``NotApplicable`` without calling the engine: the weak-IV set on a sharp board, the bias-aware
interval for a kink (``derivative`` 1), local randomization without a window or covariates to
choose one by.

The bias-aware engine call uses the board's rows, weights and clusters, kernel and degree, but
chooses its own bandwidth and ignores a donut, covariate adjustment and the board's variance
option; local randomization ignores a donut and adjustment (and, in the engine, weights and
clusters). So that the panel says so, never silently, each panel's key also holds the board
options its caveats depend on (``CAVEAT_SOURCES``), and ``inference_panel`` adds the caveats to
the result's warnings. Nothing here imports IPython, widgets or charts.
"""
from __future__ import annotations

import threading
import weakref
from dataclasses import dataclass, field, replace
from typing import Any, Mapping

import numpy as np
import pandas as pd

from ..errors import NoBalancedWindowError, shown
from .spec import Failure, NotApplicable

__all__ = ["CAVEAT_SOURCES", "INFERENCE_NODES", "INFERENCE_PANEL_NODES", "InferenceTable", "caveats",
           "compute_inference", "drawn_seed", "inference_panel", "inference_parents", "sensitivity_table",
           "windows_table"]

INFERENCE_NODES: tuple[str, ...] = ("bias_aware", "weak_iv", "local_randomization")
#: Each inference panel reads the node of its own name.
INFERENCE_PANEL_NODES: Mapping[str, str] = {n: n for n in INFERENCE_NODES}
#: Board options an inference panel's caveats read (part of the panel's key, not the node's).
CAVEAT_SOURCES: Mapping[str, tuple[str, ...]] = {
    "bias_aware": ("donut", "adjust", "variance", "bandwidth", "covariates"),
    "weak_iv": (),
    "local_randomization": ("donut", "adjust"),
}


def inference_parents(*, rows: list[str], outcome_column: str, covariates: list[str]) -> dict[str, list[str]]:
    """The parents of the inference nodes (``rows`` and ``covariates`` as in ``compute_graph``)."""
    return {
        "bias_aware": [*rows, outcome_column, "outcome", "kernel", "degree", "derivative", "smoothness", "level"],
        "weak_iv": ["main_fit", "level"],
        "local_randomization": [*rows, outcome_column, "outcome", *covariates, "window", "statistic",
                                "permutations", "seed", "level"],
    }


# ``seed: none`` draws one seed per Design, kept while the design lives: a level change (or any change
# that keeps the design) then reuses the draws and the balance and window tests kept on the design,
# and its p-values do not move with every change. A new design (new data, cutoff, ...) draws anew.
_DRAWN_SEEDS: "weakref.WeakKeyDictionary[Any, int]" = weakref.WeakKeyDictionary()
_SEEDS_LOCK = threading.Lock()


def drawn_seed(design) -> int:
    """The seed ``seed: none`` uses on this design (drawn on first use, then kept for the design)."""
    with _SEEDS_LOCK:
        seed = _DRAWN_SEEDS.get(design)
        if seed is None:
            seed = _DRAWN_SEEDS[design] = int(np.random.SeedSequence().entropy % (2 ** 63))
        return seed


def compute_inference(comp, node: str) -> Any:
    """The engine call of one inference node for the ``Computation`` ``comp``."""
    design, opts, level = comp.headline_design(), comp.options, comp.options["level"]
    if node == "bias_aware":
        if opts["derivative"] != 0:
            return NotApplicable("The bias-aware interval covers the jump in the outcome's level; this board "
                                 f"estimates derivative {opts['derivative']} (a kink). Set `derivative: 0` "
                                 "to see it.")
        return design.bias_aware(comp.selected, smoothness=opts["smoothness"], kernel=opts["kernel"],
                                 degree=opts["degree"], level=level)
    if node == "weak_iv":
        main = comp.node("main_fit")
        if isinstance(main, Failure):
            return Failure(f"needs the main fit, which failed: {main.message}", detail=main.detail, ours=main.ours)
        if main.first_stage is None:
            return NotApplicable("Sharp design: treatment follows the side of the cutoff exactly, so there is "
                                 "no first stage to be weak and no weak-instrument-robust set to show.")
        return main.weak_iv_conf_set(level)
    if node == "local_randomization":
        if opts["window"] is None and not comp.spec["covariates"]:
            return NotApplicable("The window is chosen by covariate balance, and no covariates are declared. "
                                 "Give the window yourself, e.g. `window: 2.5` (the cutoff plus or minus 2.5) "
                                 "or `window: 37.5, 42.5`, or declare pre-treatment `covariates:`.")
        seed = drawn_seed(design) if opts["seed"] is None else opts["seed"]
        try:
            return design.local_randomization(comp.selected, window=opts["window"], statistic=opts["statistic"],
                                              permutations=opts["permutations"], seed=seed, level=level)
        except NoBalancedWindowError as exc:
            if opts["window"] is not None:
                raise
            # the analyst asked for nothing here: no balanced window is a finding about the data, shown as
            # the tab's note with what to do, not as an error of the board
            return NotApplicable(f"No window passes the covariate-balance rule. {exc}")
    raise AssertionError(f"unknown inference node {shown(node)}")


def caveats(panel: str, spec: Mapping[str, Any], options: Mapping[str, Any]) -> tuple[str, ...]:
    """What the panel's method ignores of the board's settings, in words (empty when nothing)."""
    notes = []
    if panel == "bias_aware":
        if options["donut"]:
            notes.append(f"The bias-aware interval uses every observation: the board's donut "
                         f"(radius {options['donut']:g}) is not applied to it.")
        if options["adjust"] and spec["covariates"]:
            notes.append("The bias-aware interval does not adjust for the covariates; the conventional and "
                         "robust intervals beside it do.")
        if options["variance"] != "neighbors" and not spec["cluster"]:
            notes.append(f"The bias-aware standard error uses the nearest-neighbour variance, not the board's "
                         f"{shown(options['variance'])}.")
        notes.append("Its bandwidth is its own (the one that minimises the interval's length under the bound), "
                     "not the board's bandwidth.")
    if panel == "local_randomization":
        if options["donut"]:
            notes.append(f"The board's donut (radius {options['donut']:g}) is not applied: the window "
                         "includes the units closest to the cutoff.")
        if options["adjust"] and spec["covariates"]:
            notes.append("Local randomization compares raw outcomes in the window; it does not adjust for the "
                         "covariates.")
    return tuple(notes)


def inference_panel(comp, panel: str) -> Any:
    """A panel's result: the node's value with the board's caveats added to its warnings."""
    value = comp.node(INFERENCE_PANEL_NODES[panel])
    if isinstance(value, (Failure, NotApplicable)):
        return value
    extra = caveats(panel, comp.spec, comp.options)
    return replace(value, warnings=(*value.warnings, *extra)) if extra else value


@dataclass(frozen=True, eq=False)
class InferenceTable:
    """A derived table (sensitivity over the bound or over windows, the window table) with what a
    reader's export needs: ``table()``, ``title()``, ``notes()``, ``warnings`` and ``level`` (named
    in the interval columns' labels)."""
    frame: pd.DataFrame = field(repr=False)
    heading: str
    lines: tuple[str, ...] = ()
    level: float | None = None
    warnings: tuple[str, ...] = ()

    def table(self) -> pd.DataFrame:
        return self.frame.copy()

    def title(self) -> str:
        return self.heading

    def notes(self) -> list[str]:
        return list(self.lines)


def sensitivity_table(result) -> InferenceTable:
    """The bias-aware interval at multiples of the bound, bandwidth re-optimised for each."""
    frame = result.sensitivity[["multiple", "smoothness", "bandwidth", "estimate", "max_bias", "std_error",
                                "ci_low", "ci_high", "ci_low_fixed_bandwidth", "ci_high_fixed_bandwidth"]]
    frame = frame.rename(columns={"multiple": "smoothness_multiple"})
    return InferenceTable(frame, f"Bias-aware {result.level:.0%} interval over the smoothness bound "
                                 f"({result.outcome})",
                          (f"Multiples 0.5 to 4 of M = {result.smoothness:.4g} ({result.smoothness_rule}); "
                           "bandwidth re-optimised for each bound, and fixed at the chosen one.",), result.level)


def windows_table(result) -> InferenceTable:
    """The nested windows with their balance p-values and the chosen one."""
    frame = result.windows[["half_width", "n_below", "n_above", "balance_p_value", "least_balanced", "chosen"]]
    lo, hi = result.window
    return InferenceTable(frame, f"Windows around the cutoff: covariate balance ({result.outcome})",
                          (f"Smallest randomization p-value over the covariates in each window; the window is "
                           f"chosen as the largest one such that it and every smaller one reach "
                           f"{result.balance_threshold:g}. Analysed window: {window_text(result)}.",))


def randomization_sensitivity(result) -> InferenceTable:
    """Estimate, p-value and inverted interval over the windows of the sequence."""
    return InferenceTable(result.sensitivity, f"Local randomization over windows ({result.outcome}, "
                                              f"{result.statistic})",
                          ("Each row re-runs the randomization test in a window of that half-width.",),
                          result.level)


# The worst-case bias and the bound M belong to the bias-aware row only; a dash (not a blank cell,
# which reads as a value not yet computed) marks them elsewhere.
NOT_APPLICABLE = "—"


def interval_comparison(fit, aware) -> InferenceTable:
    """Conventional, robust bias-corrected and bias-aware intervals side by side (one row each)."""
    rows = [
        {"estimator": "conventional", "estimate": fit.estimate, "std_error": fit.std_error,
         "ci_low": fit.conf_int[0], "ci_high": fit.conf_int[1], "bandwidth_below": fit.bandwidth[0],
         "bandwidth_above": fit.bandwidth[1], "max_bias": NOT_APPLICABLE, "smoothness": NOT_APPLICABLE},
        {"estimator": "robust bias-corrected", "estimate": fit.bias_corrected_estimate,
         "std_error": fit.robust_std_error, "ci_low": fit.robust_conf_int[0], "ci_high": fit.robust_conf_int[1],
         "bandwidth_below": fit.bandwidth[0], "bandwidth_above": fit.bandwidth[1], "max_bias": NOT_APPLICABLE,
         "smoothness": NOT_APPLICABLE},
    ]
    lines = [f"Conventional and robust bias-corrected (Calonico, Cattaneo and Titiunik 2014) at the board's "
             f"bandwidth; bias-aware (Armstrong and Kolesar 2018, 2020) at its own bandwidth, valid for any "
             f"curvature up to the bound M."]
    warnings: tuple[str, ...] = ()
    if aware is not None:
        lo, hi = aware.conf_int
        rows.append({"estimator": "bias-aware", "estimate": aware.estimate, "std_error": aware.std_error,
                     "ci_low": lo, "ci_high": hi, "bandwidth_below": aware.bandwidth[0],
                     "bandwidth_above": aware.bandwidth[1], "max_bias": aware.max_bias,
                     "smoothness": aware.smoothness})
        lines.append(smoothness_sentence(aware))
        warnings = tuple(aware.warnings)
    return InferenceTable(pd.DataFrame(rows), f"Intervals for the jump in {fit.outcome}", tuple(lines),
                          fit.level, warnings)


def smoothness_sentence(aware) -> str:
    """The bound M in words, as the panel and the exports state it."""
    takeup = (f" on the outcome and {aware.takeup_smoothness:.4g} on take-up" if aware.takeup_smoothness
              is not None else "")
    how = ("rule of thumb: the largest curvature of a global quartic on each side"
           if aware.smoothness_rule == "rule of thumb" else "given")
    return (f"Smoothness bound M = {aware.smoothness:.4g}{takeup} ({how}). On each side the outcome's "
            f"first-order expansion at the cutoff errs by at most M x^2 / 2; worst-case bias "
            f"{aware.max_bias:.4g}, critical value {aware.critical_value:.3f}.")


#: Export names of the inference tables -> (the board result they read, how the table is made).
EXPORTS: Mapping[str, tuple[str, Any]] = {
    "intervals": ("fit", None),
    "bias_aware": ("bias_aware", None),
    "bias_aware_sensitivity": ("bias_aware", sensitivity_table),
    "weak_iv": ("weak_iv", None),
    "local_randomization": ("local_randomization", None),
    "windows": ("local_randomization", windows_table),
    "randomization_sensitivity": ("local_randomization", randomization_sensitivity),
}


def export_source(results: Mapping[str, Any], what: str) -> Any:
    """The result (or derived table) behind an inference export, or the NotApplicable/None there."""
    key, derive = EXPORTS[what]
    value = results.get(key)
    if value is None or isinstance(value, NotApplicable):
        return value
    if what == "intervals":
        aware = results.get("bias_aware")
        return interval_comparison(value, aware if hasattr(aware, "max_bias") else None)
    return derive(value) if derive is not None else value


def shape_words(shape: str) -> str:
    """A confidence set's shape in words (one interval, two rays, the whole line, ...)."""
    from ..results.inference import SHAPE_WORDS
    return f"the set is {SHAPE_WORDS[shape]}"


def window_text(result) -> str:
    """The analysed window "[low, high]" as the methods paragraph prints it."""
    from ..export.methods import window_text as text
    return text(result.window, result.cutoff)
