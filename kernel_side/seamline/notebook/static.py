"""Static HTML of a board: the header, every panel's tables and inline SVG charts, the warnings.

The same fragments feed two places: the live widget view (``panels.BoardView`` puts each panel's
fragment in an ``ipywidgets.HTML``) and the ``text/html`` fallback that sits next to the widget in
a cell's output bundle, which nbconvert, notebook viewers and a kernel-less JupyterLab show. The
HTML is self-contained: inline styles, SVG drawn kernel-side by vl-convert (no script, no CDN),
every piece of user text escaped.

The styles, defensive reads of a board, escaped fragments and number formats are in
``static_parts``; this module builds the header, the panels and the static copy from them.

This module imports neither ipywidgets nor IPython; Altair and vl-convert load on the first chart.
"""
from __future__ import annotations

import contextvars
import math
from collections import OrderedDict
from collections.abc import Iterable, Mapping
from datetime import datetime
from typing import Any

import pandas as pd

from ..errors import shown
from ..results.base import CAUTION
from ..time_score import TIME_CAUTION
from . import charts, panels_designs, panels_inference, time_axes
# The building blocks; panels_designs and panels_inference read them through this module.
from .static_parts import (_BOX, _DIM, _NOTE, _ROW, _TABLES, _count, _errors, _esc, _figure, _fit, _info_html,
                           _number, _p_text, _pending, _results, _table_html, _warnings_html, error_html,
                           memo_html, pending_note)

__all__ = [
    "PANELS",
    "PANEL_RESULTS",
    "chart_svg",
    "error_html",
    "header_html",
    "panel_html",
    "static_html",
]

#: The view's tabs: (panel key, tab title). The key names the CSS class ``seamline-panel-<key>``
#: (underscores become hyphens).
PANELS: tuple[tuple[str, str], ...] = (
    ("estimate", "Estimate"),
    ("bandwidths", "Bandwidths"),
    ("balance", "Balance"),
    ("density", "Density"),
    ("first_stage", "First stage"),
    ("placebos", "Placebos"),
    *panels_designs.TABS,           # by cutoff, subgroups, power
    ("local_randomization", "Local randomization"),
)

#: Which board results each panel shows (a change to one of them re-renders the panel).
PANEL_RESULTS: Mapping[str, tuple[str, ...]] = {
    "header": ("fit", "checks"),
    "estimate": ("fit", "bins", "bias_aware", "weak_iv"),
    "bandwidths": ("fit", "sensitivity", "bandwidths"),
    "balance": ("balance",),
    "density": ("fit", "density", "score_profile"),
    "first_stage": ("fit", "first_stage", "first_stage_bins"),
    "placebos": ("fit", "placebo", "donut"),
    **panels_designs.RESULTS,
    "local_randomization": ("local_randomization",),
}

#: The export name behind each panel's table and chart buttons.
PANEL_EXPORTS: Mapping[str, tuple[str, ...]] = {
    "estimate": ("estimate", "intervals", "bias_aware_sensitivity", "weak_iv"),
    "bandwidths": ("sensitivity",),
    "balance": ("balance",),
    "density": ("density",),
    "first_stage": ("first_stage",),
    "placebos": ("placebo", "donut"),
    **panels_designs.EXPORTS,
    "local_randomization": ("local_randomization", "windows", "randomization_sensitivity"),
}

#: The board result behind each export name.
EXPORT_RESULTS: Mapping[str, str] = {
    "estimate": "fit", "sensitivity": "sensitivity", "balance": "balance", "density": "density",
    "first_stage": "first_stage", "placebo": "placebo", "donut": "donut",
    **panels_designs.EXPORT_RESULTS,
    # inference tables (compute_inference.EXPORTS) read these results
    "intervals": "fit", "bias_aware": "bias_aware", "bias_aware_sensitivity": "bias_aware", "weak_iv": "weak_iv",
    "local_randomization": "local_randomization", "windows": "local_randomization",
    "randomization_sensitivity": "local_randomization",
}


# A small cache of rendered charts keyed by the identity of the result objects they draw. Each
# entry keeps those objects alive, so an id cannot be reused by a new object while the entry lives.
_SVG_CACHE: "OrderedDict[tuple, tuple[tuple, str]]" = OrderedDict()
_SVG_CACHE_SIZE = 48
# Whether panel fragments carry their SVG charts (the static copy) or leave them to the browser
# (the live view draws Vega-Lite specs itself); set per call by panel_html / static_html.
_DRAW_CHARTS: contextvars.ContextVar[bool] = contextvars.ContextVar("seamline_draw_charts", default=True)


# ---------------------------------------------------------------------------------------------
# What belongs to a panel: its errors, its exports (the board readers are in static_parts)
# ---------------------------------------------------------------------------------------------
def _panel_errors(board, panel: str) -> list[str]:
    """Error messages that belong to a panel: its own and those of the results it shows."""
    errors = _errors(board)
    keys = (panel, *PANEL_RESULTS.get(panel, ()))
    seen, out = set(), []
    for key in keys:
        message = errors.get(key)
        if message and message not in seen:
            seen.add(message)
            out.append(str(message))
    return out


def export_available(board, what: str) -> bool:
    """Whether the board has a current result to export under ``what``."""
    key = EXPORT_RESULTS.get(what, what)
    value = _results(board).get(key)
    return charts.not_applicable_reason(value) is None and panels_designs.has_table(value, what)


# ---------------------------------------------------------------------------------------------
# Charts (rendered once per set of result objects)
# ---------------------------------------------------------------------------------------------
def _chart_inputs(board, what: str) -> tuple:
    results = _results(board)
    keys = {"estimate": ("fit", "bins"), "sensitivity": ("fit", "sensitivity", "bandwidths"),
            "balance": ("balance",), "density": ("fit", "density"),
            "first_stage": ("fit", "first_stage", "first_stage_bins"),
            "placebo": ("fit", "placebo"), "donut": ("fit", "donut"), **panels_designs.CHART_INPUTS,
            "bias_aware_sensitivity": ("fit", "bias_aware"), "windows": ("fit", "local_randomization")}[what]
    return tuple(results.get(k) for k in keys)


def chart_svg(board, what: str) -> str:
    """The SVG of one chart of the board's current results (cached by result identity).

    Parameters
    ----------
    board : seamline Board
    what : one of ``charts.CHART_NAMES``

    Returns
    -------
    str

    Raises
    ------
    ValueError
        When a needed result is missing or does not apply (see :func:`charts.chart_for`).
    """
    inputs = _chart_inputs(board, what)
    key = (what, *(id(obj) for obj in inputs))
    hit = _SVG_CACHE.get(key)
    if hit is not None and all(a is b for a, b in zip(hit[0], inputs)):
        _SVG_CACHE.move_to_end(key)
        return hit[1]
    svg = charts.to_svg(charts.chart_for(board, what))
    _SVG_CACHE[key] = (inputs, svg)
    while len(_SVG_CACHE) > _SVG_CACHE_SIZE:
        _SVG_CACHE.popitem(last=False)
    return svg


def _chart_or_error(board, what: str) -> str:
    if not _DRAW_CHARTS.get():
        return ""
    try:
        return _figure(chart_svg(board, what))
    except Exception as exc:  # a chart that fails must not take the panel's table with it
        return error_html(f"{type(exc).__name__}: {exc}", title="The chart could not be drawn")


# ---------------------------------------------------------------------------------------------
# Header
# ---------------------------------------------------------------------------------------------
def _status_text(board) -> str:
    status = str(getattr(board, "status", "") or "")
    updated = getattr(board, "updated_at", None)
    when = f"updated at {updated:%H:%M:%S}" if isinstance(updated, datetime) else "not computed yet"
    reading = getattr(board, "reading", None)
    if status == "recomputing" and reading:
        done, total = reading
        return f"reading partitions: {done} of {total}..." if total else "reading partitions..."
    if status == "recomputing":
        return "recomputing..."
    if status == "stale":
        return f"inputs changed, not recomputed (paused); last {when}"
    if status == "error":
        return f"error; last good results {when}" if isinstance(updated, datetime) else "error"
    return when


def _checks_html(board) -> str:
    """One line of design checks (ok / flag / not applicable), flags first in the warnings."""
    checks = _results(board).get("checks")
    if "checks" in _pending(board):
        return ('<div class="seamline-checks seamline-checks-pending" style="font-size:12px;margin:3px 0">'
                "Design checks: updating for the current settings...</div>")
    if charts.not_applicable_reason(checks) is not None or not hasattr(checks, "table"):
        return ""
    marks = {"ok": ("ok", "#1d6470"), "flag": ("flag", "#b3261e")}
    items = []
    for row in checks.table().itertuples(index=False):
        word, color = marks.get(str(row.status), (str(row.status), "#777"))
        items.append(f'<span title="{_esc(str(row.detail), quote=True)}">{_esc(str(row.check))}: '
                     f'<b style="color:{color}">{_esc(word)}</b></span>')
    return ('<div class="seamline-checks" style="font-size:12px;margin:3px 0">Design checks: '
            + " &middot; ".join(items) + "</div>")


def _design_warnings(board, fit) -> list[str]:
    """Design-level warnings: the checks summary's when available, otherwise the fit's own."""
    checks = _results(board).get("checks")
    if "checks" not in _pending(board) and charts.not_applicable_reason(checks) is None \
            and hasattr(checks, "warnings"):
        return list(checks.warnings)
    return list(getattr(fit, "warnings", ()) or ())


def header_html(board) -> str:
    """The design summary: kind, observations per side, the headline estimate, warnings, status.

    Parameters
    ----------
    board : seamline Board

    Returns
    -------
    str
        A ``<div class="seamline-header">`` fragment.
    """
    name = str(getattr(board, "name", "") or "board")
    fit = _fit(board)
    parts = [f'<div class="seamline-header" style="{_BOX}">']
    status = _esc(_status_text(board))
    if fit is None:
        parts.append(f'<div><b>{_esc(name)}</b> &middot; <span class="seamline-status">{status}</span></div>')
        reason = charts.not_applicable_reason(_results(board).get("fit"))
        messages = _panel_errors(board, "header") or [reason or "no estimate yet"]
        parts.extend(error_html(m, title="No estimate") for m in messages)
        parts.append("</div>")
        return "".join(parts)
    kind = "Fuzzy" if fit.kind == "fuzzy" else "Sharp"
    untreated = "above" if fit.treated == "below" else "below"
    parts.append(
        f'<div style="font-size:14px"><b>{_esc(name)}</b>: {kind} cutoff design &mdash; '
        f"<code>{_esc(fit.outcome)}</code> at <code>{_esc(fit.score)}</code> = "
        f"{_esc(time_axes.cutoff_text(time_axes.scale_of(fit), fit.cutoff))} (treated side: {_esc(fit.treated)}, "
        f"comparison side: {untreated}) &middot; <span class=\"seamline-status\">{status}</span></div>")
    parts.append(panels_designs.header_note(board))     # several cutoffs: which one the headline is
    lo, hi = fit.robust_conf_int
    level = f"{100 * fit.level:g}%"
    stale_fit = "fit" in _pending(board)
    if stale_fit:
        parts.append(pending_note("the estimate"))
        parts.append(f'<div class="seamline-headline-previous" style="{_DIM}">')
    parts.append(
        f'<div class="seamline-headline" style="font-size:15px;margin:4px 0">Estimate '
        f"<b>{_esc(_number(fit.estimate))}</b> (se {_esc(_number(fit.std_error))}); robust {level} CI "
        f"<b>[{_esc(_number(lo))}, {_esc(_number(hi))}]</b>, {_esc(_p_text(fit.robust_p_value))}</div>")
    h_below, h_above = fit.bandwidth
    dates = time_axes.scale_of(fit)     # a date score: bandwidth and radius in its unit
    bw = charts._bandwidth_text(fit.bandwidth, dates)
    radius = charts._short(fit.donut) if dates is None else dates.length(float(fit.donut))
    donut = (f"; {_count(fit.n_donut)} inside the donut of radius {_esc(radius)}"
             if getattr(fit, "donut", 0) else "")
    parts.append(
        f'<div style="font-size:12px;color:var(--jp-ui-font-color2, #555)">'
        f"Observations used (inside the bandwidth): {_count(fit.n_used[0])} below, "
        f"{_count(fit.n_used[1])} above; on each side: {_count(fit.n_total[0])} below, "
        f"{_count(fit.n_total[1])} above; dropped for missing values: {_count(fit.n_dropped)}{donut}. "
        f"Bandwidth {_esc(bw)} ({_esc(fit.bandwidth_rule)}), {_esc(fit.kernel)} kernel, degree "
        f"{fit.degree}, bias correction degree {fit.bias_degree}, variance {_esc(fit.variance)}"
        + (f" ({fit.n_clusters} clusters)" if getattr(fit, "n_clusters", None) else "") + ".</div>")
    if fit.kind == "fuzzy" and fit.first_stage is not None:
        f_stat = getattr(fit, "first_stage_f", None)
        parts.append(
            f'<div style="font-size:12px">First stage: take-up jumps by '
            f"{_esc(_number(fit.first_stage.estimate))}"
            + (f"; F = {_esc(_number(f_stat))}" if f_stat is not None else "") + ".</div>")
    if stale_fit:
        parts.append("</div>")
    parts.append(f'<div class="seamline-caution" style="{_NOTE}">{_esc(CAUTION)}</div>')
    if dates is not None:
        parts.append(f'<div class="seamline-caution seamline-time-caution" style="{_NOTE}">'
                     f"{_esc(TIME_CAUTION)}</div>")
    parts.append(_checks_html(board))
    parts.append(_warnings_html(_design_warnings(board, fit)))
    parts.extend(error_html(m) for m in _panel_errors(board, "header"))
    parts.append("</div>")
    return "".join(parts)


# ---------------------------------------------------------------------------------------------
# Panels
# ---------------------------------------------------------------------------------------------
_EXPLAIN = {
    "estimate": ("The cutoff plot shows binned means of the outcome (dots, with intervals) and the "
                 "local polynomial fitted on each side inside the bandwidth (lines, with bands). "
                 "The estimate is the gap between the two fitted lines at the cutoff; the robust "
                 "bias-corrected interval is the one to report."),
    "bandwidths": ("Each point re-estimates the jump at another bandwidth. A credible estimate moves "
                   "little as the bandwidth changes; intervals widen as the bandwidth shrinks."),
    "balance": ("Pre-treatment covariates should not jump at the cutoff. Each row estimates a jump "
                "in a covariate with the same method; intervals should cover zero."),
    "density": ("If units could sort themselves across the cutoff, the number of observations "
                "would jump there. A small p-value is a warning sign, a large one does not prove "
                "the absence of sorting."),
    "first_stage": ("In a fuzzy design the cutoff changes the chance of treatment; the estimate "
                    "is the jump in the outcome divided by the jump in take-up. A weak first stage "
                    "(F below 10) makes that ratio unreliable."),
    "placebos": ("Placebo cutoffs, where nothing happens, should show no jump. The donut drops the "
                 "observations closest to the cutoff: a stable estimate suggests no heaping or "
                 "sorting right at the cutoff."),
    "local_randomization": ("Units in a small window around the cutoff are analysed as a randomized "
                            "experiment (Cattaneo, Frandsen and Titiunik 2015): the p-value comes from "
                            "re-assigning treatment within the window. The window is the largest one in "
                            "which the covariates stay balanced; the estimate is the window's average "
                            "effect, not the effect at the cutoff."),
}


def _explain(panel: str) -> str:
    text = _EXPLAIN[panel] if panel in _EXPLAIN else panels_designs.EXPLAIN[panel]
    return f'<div class="seamline-note" style="{_NOTE}">{_esc(text)}</div>'


def _result_block(board, key: str, what: str | None, *, extra_tables: Iterable[Any] = ()) -> str:
    """A chart (if ``what``) beside the result's table, or the reason the result is missing."""
    value = _results(board).get(key)
    reason = charts.not_applicable_reason(value)
    if reason is not None:
        errors = [m for m in _panel_errors(board, key)]
        if errors:
            return "".join(error_html(m) for m in errors)
        return _info_html(f"{key.replace('_', ' ').capitalize()}: {reason}.")
    pieces = [_chart_or_error(board, what)] if what else []
    tables = "".join(_table_html(t) for t in (value, *extra_tables))
    pieces.append(f'<div class="seamline-tables" style="{_TABLES}">{tables}</div>')
    warnings = getattr(value, "warnings", ()) or ()
    return f'<div style="{_ROW}">{"".join(pieces)}</div>' + _warnings_html(warnings)


def _specification(fit) -> pd.DataFrame | None:
    """The fit's specification table with counts shown as whole numbers."""
    if not hasattr(fit, "specification"):
        return None
    spec = fit.specification().astype(object)
    for i, item in enumerate(spec["item"]):
        if str(item).startswith("observations"):
            spec.iloc[i, 1:] = [int(v) for v in spec.iloc[i, 1:]]
    return spec


def _estimate_panel(board) -> str:
    fit = _fit(board)
    if fit is None:
        return ""
    def tables() -> str:
        specification = _specification(fit)
        return _table_html(fit) + (_table_html(specification) if specification is not None else "")

    pieces = [_chart_or_error(board, "estimate")]
    tables = memo_html("estimate tables", (fit,), tables)
    pieces.append(f'<div class="seamline-tables" style="{_TABLES}">{tables}</div>')
    return f'<div style="{_ROW}">{"".join(pieces)}</div>' + panels_inference.estimate_inference_html(board)


class _Titled:
    """A plain table shown under a title (e.g. the selectors' bandwidths with their unit)."""

    def __init__(self, frame: pd.DataFrame, title: str):
        self.frame, self.title = frame, title

    def _repr_html_(self) -> str:
        return _table_html(self.frame, self.title)


def _bandwidths_panel(board) -> str:
    selectors = _results(board).get("bandwidths")
    dates = time_axes.scale_of(_fit(board))
    if isinstance(selectors, pd.DataFrame) and dates is not None:
        selectors = _Titled(selectors, f"Bandwidth selectors ({dates.unit})")
    extra = [selectors] if isinstance(selectors, (pd.DataFrame, _Titled)) else []
    return _result_block(board, "sensitivity", "sensitivity", extra_tables=extra)


def _first_stage_panel(board) -> str:
    fit = _fit(board)
    value = _results(board).get("first_stage")
    reason = charts.not_applicable_reason(value)
    if reason is not None or fit is None or fit.kind != "fuzzy":
        if fit is not None and fit.kind != "fuzzy":
            reason = ("This is a sharp design: treatment follows the cutoff exactly, so there is no "
                      "take-up jump to estimate. Declare a `takeup` column for a fuzzy design."
                      if reason in (None, "not computed") else reason)
        errors = _panel_errors(board, "first_stage")
        if errors:
            return "".join(error_html(m) for m in errors)
        return _info_html(f"First stage does not apply: {reason}")
    stage = value if hasattr(value, "estimate") else fit.first_stage
    f_stat = getattr(fit, "first_stage_f", None)
    lo, hi = stage.robust_conf_int
    summary = (f'<div style="font-size:13px;margin:2px 0 6px 0">Take-up jump '
               f"<b>{_esc(_number(stage.estimate))}</b>, robust {100 * stage.level:g}% CI "
               f"[{_esc(_number(lo))}, {_esc(_number(hi))}]"
               + (f"; first-stage F = <b>{_esc(_number(f_stat))}</b>" if f_stat is not None else "")
               + ".</div>")
    weak = []
    if f_stat is not None and math.isfinite(float(f_stat)) and float(f_stat) < 10.0:
        weak.append(f"Weak first stage: F = {_number(f_stat)} is below 10 (common practice, Staiger "
                    "and Stock 1997); the ratio estimate and its interval are unreliable.")
    has_bins = charts.not_applicable_reason(_results(board).get("first_stage_bins")) is None
    chart = _chart_or_error(board, "first_stage") if has_bins else ""
    table = f'<div class="seamline-tables" style="{_TABLES}">{_table_html(stage)}</div>'
    return summary + f'<div style="{_ROW}">{chart}{table}</div>' + _warnings_html(weak)


def _density_panel(board) -> str:
    profile = _results(board).get("score_profile")
    extra = [profile] if charts.not_applicable_reason(profile) is None else []
    return _result_block(board, "density", "density", extra_tables=extra)


def _placebos_panel(board) -> str:
    return _result_block(board, "placebo", "placebo") + _result_block(board, "donut", "donut")


def panel_pending(board, panel: str) -> bool:
    """Whether a panel shows a result that does not yet belong to the board's current inputs."""
    return bool(set(PANEL_RESULTS.get(panel, ())) & _pending(board))


def panel_html(board, panel: str, *, charts: bool = True) -> str:
    """The HTML of one panel: explanation, charts, tables, warnings, or the panel's error.

    Never raises: an exception while rendering becomes an error box (class ``seamline-error``).
    A panel whose results are pending (``board.pending``) says so and shows the previous numbers
    dimmed.

    Parameters
    ----------
    board : seamline Board or BoardState
    panel : one of the keys of :data:`PANELS`
    charts : bool, default True
        Inline the charts as SVG (the static copy); False leaves them to the live view, which
        sends them to the browser as Vega-Lite specs.

    Returns
    -------
    str
    """
    token = _DRAW_CHARTS.set(charts)
    try:
        return _panel_html(board, panel)
    finally:
        _DRAW_CHARTS.reset(token)


def _panel_html(board, panel: str) -> str:
    try:
        if panel not in dict(PANELS):
            names = ", ".join(f'"{k}"' for k, _ in PANELS)
            raise ValueError(f"`panel` must be one of {names}; got {shown(panel)}. Pick a panel name.")
        if _fit(board) is None:
            messages = _panel_errors(board, panel) or _panel_errors(board, "header") or [
                "the main estimate is not available"]
            return "".join(error_html(m) for m in messages)
        body = {
            "estimate": _estimate_panel,
            "bandwidths": _bandwidths_panel,
            "balance": lambda b: _result_block(b, "balance", "balance"),
            "density": _density_panel,
            "first_stage": _first_stage_panel,
            "placebos": _placebos_panel,
            **panels_designs.BODIES,
            "local_randomization": panels_inference.local_randomization_html,
        }[panel](board)
        errors = [m for m in _panel_errors(board, panel)
                  if _esc(m) not in body]  # result-level errors are already shown in the body
        body = "".join(error_html(m) for m in errors) + body
        if panel_pending(board, panel):
            body = pending_note(f"the {dict(PANELS)[panel].lower()} panel") + f'<div style="{_DIM}">{body}</div>'
        return f'<div class="seamline-panel-body" style="{_BOX}">{_explain(panel)}{body}</div>'
    except Exception as exc:  # noqa: BLE001 - shown to the user inside the panel
        return error_html(f"{type(exc).__name__}: {exc}")


def static_html(board, *, charts: bool = True) -> str:
    """A self-contained HTML rendition of the whole board for the ``text/html`` fallback.

    Shows the header, then every panel one after the other (tables and inline SVG charts, no
    script). Used when widgets are not live: nbconvert's HTML, notebook viewers, a notebook opened
    without a kernel.

    Parameters
    ----------
    board : seamline Board or BoardState
    charts : bool, default True
        Inline every chart as SVG (drawn kernel-side by vl-convert, so only when the static copy
        is saved: headless runs, an idle board); False leaves a note instead.

    Returns
    -------
    str
    """
    try:
        header = header_html(board)
    except Exception as exc:  # noqa: BLE001
        header = error_html(f"{type(exc).__name__}: {exc}")
    parts = [f'<div class="seamline-static" style="{_BOX}">', header]
    for key, title in PANELS:
        css = key.replace("_", "-")
        parts.append(f'<section class="seamline-static-{css}" style="margin-top:14px">'
                     f'<h4 style="margin:6px 0 2px 0;font-size:14px;border-bottom:1px solid #ddd">'
                     f"{_esc(title)}</h4>{panel_html(board, key, charts=charts)}</section>")
    note = "" if charts else " Its charts are added once the board has finished computing."
    parts.append('<div style="font-size:11px;color:#777;margin-top:8px">Static copy of the seamline '
                 f"board; run the notebook for the live panels.{note}</div></div>")
    return "".join(parts)
