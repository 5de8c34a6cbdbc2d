"""What the board shows of the inference beyond the robust interval (issue 9): the intervals side by
side and the weak-instrument-robust set in the Estimate tab, and the Local randomization tab.

HTML fragments only (escaped, like ``static.py``), plus ``smoothness_control`` for the live view
(ipywidgets imported inside it). Numbers are the engine's results as the board holds them; nothing
here computes anything.
"""
from __future__ import annotations

import html
import math
from typing import Any

from . import compute_inference as inference

__all__ = ["estimate_inference_html", "local_randomization_html", "randomization_controls", "smoothness_control",
           "smoothness_text", "window_text"]

_esc = html.escape


def _static():
    from . import static   # static imports this module: import it when rendering
    return static


def _number(value) -> str:
    return _static()._number(value)


def _end(value: float) -> str:
    return "-∞" if value == -math.inf else "+∞" if value == math.inf else _number(value)


def _set_text(intervals) -> str:
    return " ∪ ".join(f"[{_end(lo)}, {_end(hi)}]" for lo, hi in intervals)


def _table(result) -> str:
    """A labelled table (reader labels, the level in interval columns) as HTML."""
    from ..export.labels import result_model
    from ..export.render import to_html
    return to_html(result_model(result, caution=False))   # the board states the caution once


def _missing(board, key: str, what: str) -> str | None:
    """The error or reason box of a result that is not there (None when it is)."""
    s = _static()
    value = s._results(board).get(key)
    reason = s.charts.not_applicable_reason(value)
    if reason is None:
        return None
    errors = s._panel_errors(board, key)
    if errors:
        return "".join(s.error_html(m, title=f"The {what} could not be computed") for m in errors)
    return s._info_html(f"{what[:1].upper()}{what[1:]}: {reason}")


def smoothness_text(value: Any) -> str:
    """The smoothness option as the control shows it."""
    if value is None:
        return "rule of thumb"
    if isinstance(value, tuple):
        return ", ".join(f"{v:g}" for v in value)
    return f"{value:g}"


def estimate_inference_html(board) -> str:
    """The Estimate tab's inference block: the three intervals side by side, the bound M, the
    bias-aware warnings, the sensitivity over M and (fuzzy boards) the weak-IV-robust set."""
    s = _static()
    results = s._results(board)
    fit = s._fit(board)
    if fit is None:
        return ""
    parts = ['<h4 style="margin:10px 0 4px 0">Intervals side by side</h4>']
    aware = results.get("bias_aware")
    has_aware = hasattr(aware, "max_bias")
    parts.append(s.memo_html("intervals", (fit, aware), lambda: _table(
        inference.interval_comparison(fit, aware if has_aware else None))))
    if has_aware:
        parts.append(f'<div class="seamline-smoothness" style="{s._NOTE}">'
                     f"{_esc(inference.smoothness_sentence(aware))} Change M with the <b>M (smoothness)</b> "
                     "control or a <code>smoothness:</code> line in the cell (e.g. <code>smoothness: 0.5</code>; "
                     "<code>smoothness: rule of thumb</code> for the default).</div>")
        if aware.kind == "fuzzy":
            parts.append(f'<div style="{s._NOTE}">Bias-aware set {_esc(_set_text(aware.intervals))}: '
                         f"{_esc(inference.shape_words(aware.shape))}</div>")
        parts.append(s._warnings_html(aware.warnings))
        parts.append('<details class="seamline-bias-aware-sensitivity"><summary style="font-size:12px">'
                     "How the bias-aware interval moves with M</summary>"
                     f"{s._chart_or_error(board, 'bias_aware_sensitivity')}"
                     f"{s.memo_html('sensitivity over M', (aware,), lambda: _table(inference.sensitivity_table(aware)))}"
                     "</details>")
    else:
        parts.append(_missing(board, "bias_aware", "bias-aware interval") or "")
    if fit.kind == "fuzzy":
        parts.append('<h4 style="margin:10px 0 4px 0">Weak-instrument-robust set</h4>')
        weak = results.get("weak_iv")
        if hasattr(weak, "intervals"):
            lo, hi = weak.wald_conf_int
            parts.append(f'<div class="seamline-weak-iv" style="font-size:13px;margin:2px 0 6px 0">'
                         f"{100 * weak.level:g}% weak-instrument-robust set <b>{_esc(_set_text(weak.intervals))}</b> "
                         f"beside the Wald (robust ratio) interval [{_esc(_end(lo))}, {_esc(_end(hi))}]; "
                         f"robust first-stage F (squared robust t of the take-up jump) = {_esc(_number(weak.first_stage_f))}.</div>"
                         f'<div class="seamline-weak-iv-shape" style="{s._NOTE}">{_esc(weak.explanation)}</div>')
            parts.append(s.memo_html("weak iv", (weak,), lambda: _table(weak)))
            parts.append(s._warnings_html(weak.warnings))
        else:
            parts.append(_missing(board, "weak_iv", "weak-instrument-robust set") or "")
    return f'<div class="seamline-inference">{"".join(parts)}</div>'


def local_randomization_html(board) -> str:
    """The Local randomization tab: chosen window, p-values, the window table, sensitivity."""
    s = _static()
    missing = _missing(board, "local_randomization", "local randomization")
    if missing is not None:
        return missing
    lr = s._results(board)["local_randomization"]
    how = ("chosen by covariate balance" if lr.window_rule == "covariate balance" else "as given")
    method = ("exact, over all assignments" if lr.exact else
              f"Monte Carlo, {lr.assignments:,} random assignments, seed {lr.seed}")
    summary = (f'<div class="seamline-lr-summary" style="font-size:13px;margin:2px 0 6px 0">Window '
               f"<b>{_esc(inference.window_text(lr))}</b> ({_esc(how)}): {lr.n_below} units below, "
               f"{lr.n_above} above. Difference in means <b>{_esc(_number(lr.estimate))}</b>; randomization "
               f"p-value ({_esc(lr.statistic)}) <b>{_esc(_static()._p_text(lr.p_value))}</b> ({_esc(method)}); "
               f"{100 * lr.level:g}% interval [{_esc(_number(lr.conf_int[0]))}, {_esc(_number(lr.conf_int[1]))}]"
               ".</div>")
    keys = (f'<div style="{s._NOTE}">Settings in the cell: <code>window:</code> (by balance, a half-width or '
            "<code>low, high</code>), <code>statistic:</code> (difference in means, Kolmogorov-Smirnov, rank sum), "
            "<code>permutations:</code> and <code>seed:</code>.</div>")
    tables = (_table(lr) + '<h4 style="margin:10px 0 4px 0">Windows</h4>' + _table(inference.windows_table(lr))
              + '<h4 style="margin:10px 0 4px 0">Sensitivity over windows</h4>'
              + _table(inference.randomization_sensitivity(lr)))
    chart = s._chart_or_error(board, "windows") if lr.windows["balance_p_value"].notna().any() else ""
    return summary + keys + f'<div style="{s._ROW}">{chart}<div class="seamline-tables" style="{s._TABLES}">' \
        f'{tables}</div></div>' + s._warnings_html(lr.warnings)


def smoothness_control(layout):
    """A text box for M: a positive number, two for a fuzzy board, or "rule of thumb" (the view
    observes it like its other controls)."""
    import ipywidgets as widgets
    box = widgets.Text(value="rule of thumb", description="M (smoothness)", continuous_update=False,
                       style={"description_width": "95px"}, layout=layout,
                       tooltip="Bound on the outcome's curvature for the bias-aware interval")
    box.add_class("seamline-control-smoothness")
    return box


def window_text(value: Any) -> str:
    """The window option as the tab's control shows it."""
    if value is None:
        return "by balance"
    if isinstance(value, tuple):
        return ", ".join(f"{v:g}" for v in value)
    return f"{value:g}"


def randomization_controls(layout):
    """The Local randomization tab's own controls: the window (text: "by balance", a half-width or
    "low, high") and the statistic. Returns (box, window, statistic); the view observes them."""
    import ipywidgets as widgets
    from ..core.randomization import STATISTICS
    window = widgets.Text(value="by balance", description="window", continuous_update=False,
                          style={"description_width": "95px"}, layout=layout,
                          tooltip='"by balance", a half-width, or two scores "low, high"')
    window.add_class("seamline-control-window")
    statistic = widgets.Dropdown(options=list(STATISTICS), value=STATISTICS[0], description="statistic",
                                 style={"description_width": "95px"}, layout=layout)
    statistic.add_class("seamline-control-statistic")
    box = widgets.HBox([window, statistic], layout=widgets.Layout(flex_flow="row wrap"))
    box.add_class("seamline-randomization-controls")
    return box, window, statistic
