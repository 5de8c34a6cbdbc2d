"""The By cutoff, Subgroups and Power panels of a board, as HTML (live view and static copy).

``static`` merges the tables below into its own (tabs, results, exports, charts, explanations)
and calls :data:`BODIES` for the panels' content; the live view (``panels``) shows that HTML and
draws the charts in the browser. The tabs are on every board: By cutoff applies to a cutoff column
or cumulative cutoffs, Subgroups to a board with ``groups:``; elsewhere the tab says why it does
not apply and which line of the cell would make it apply. Nothing here imports widgets.
"""
from __future__ import annotations

import html
from typing import Any

__all__ = ["BODIES", "CHART_INPUTS", "EXPLAIN", "EXPORTS", "EXPORT_RESULTS", "RESULTS", "TABS"]

#: (panel key, tab title), after the single-cutoff tabs.
TABS: tuple[tuple[str, str], ...] = (("by_cutoff", "By cutoff"), ("subgroups", "Subgroups"), ("power", "Power"))
#: Board results each panel shows.
#: (By cutoff names the headline cutoff, so it also follows the main fit; the others change with their result.)
RESULTS = {"by_cutoff": ("fit", "by_cutoff"), "subgroups": ("subgroups",), "power": ("power",)}
#: Export names behind each panel's buttons.
EXPORTS = {"by_cutoff": ("by_cutoff", "decomposition"), "subgroups": ("subgroups",), "power": ("power", "sample_size")}
#: The board result behind each export name.
EXPORT_RESULTS = {"by_cutoff": "by_cutoff", "decomposition": "by_cutoff", "subgroups": "subgroups",
                  "power": "power", "sample_size": "power"}
#: The results each chart reads (its SVG is cached by their identity).
CHART_INPUTS = {"by_cutoff": ("fit", "by_cutoff"), "subgroups": ("fit", "subgroups"), "power": ("fit", "power")}
#: The charts each tab draws.
TAB_CHARTS = {"by_cutoff": ("by_cutoff",), "subgroups": ("subgroups",), "power": ("power",)}

EXPLAIN = {
    "by_cutoff": ("With several cutoffs each one is a design of its own: the effect at each cutoff is the default "
                  "fit on its own units (a cutoff column) or on the observations between its neighbouring cutoffs "
                  "(cumulative cutoffs). With a cutoff column the headline pools every unit on the normalised "
                  "score, a weighted average of the cutoff-specific effects (Cattaneo, Keele, Titiunik and "
                  "Vazquez-Bare 2016)."),
    "subgroups": ("Each row is the default fit on one group's rows, with its own bandwidth; the chi-square test "
                  "asks whether the groups share one effect. Groups must be defined before treatment; a large "
                  "p-value is not evidence of equal effects."),
    "power": ("Power of the robust bias-corrected test with this sample as pilot data (Cattaneo, Titiunik and "
              "Vazquez-Bare 2019): how large an effect the design can detect, and how many observations an "
              "effect you plan for (the effect control, or `effect:` in the cell) would need."),
}

_esc = html.escape


def _static():
    from . import static      # static imports this module's tables: import it when drawing
    return static


def _table(result) -> str:
    from ..export.labels import export_table
    return export_table(result, "html")


def _unavailable(board, key: str, title: str) -> str | None:
    """The info or error box of a result that is missing, failed or does not apply (else None)."""
    s = _static()
    from . import charts
    value = s._results(board).get(key)
    reason = charts.not_applicable_reason(value)
    if reason is None:
        return None
    errors = s._panel_errors(board, key)
    if errors:
        return "".join(s.error_html(m) for m in errors)
    return s._info_html(f"{title} does not apply to this board: {reason}")


def _layout(board, chart: str, tables: list[str], warnings=()) -> str:
    s = _static()
    pieces = [s._chart_or_error(board, chart),
              f'<div class="seamline-tables" style="{s._TABLES}">{"".join(tables)}</div>']
    return f'<div style="{s._ROW}">{"".join(pieces)}</div>' + s._warnings_html(warnings)


def _summary(text: str) -> str:
    return f'<div class="seamline-summary" style="font-size:13px;margin:2px 0 6px 0">{text}</div>'


def _by_cutoff(board) -> str:
    from .exports_designs import designs_table
    missing = _unavailable(board, "by_cutoff", "By cutoff")
    if missing is not None:
        return missing
    effects = _static()._results(board)["by_cutoff"]
    fit = _static()._fit(board)
    if effects.layout == "column":
        lo, hi = effects.pooled.robust_conf_int
        head = (f"Headline: the pooled estimate on the normalised score, <b>{effects.pooled.estimate:.4g}</b> "
                f"(robust {100 * effects.level:g}% CI [{lo:.4g}, {hi:.4g}]), a weighted average of the "
                f"{len(effects.rows)} cutoff-specific effects below.")
    else:
        at = getattr(fit, "cutoff", None)
        head = (f"Cumulative cutoffs: the headline and the other tabs show the cutoff <b>{_esc(f'{at:g}')}</b> "
                "(pick another with the headline control or `headline_cutoff:`). Each effect is the increment "
                "of the treatment at its cutoff.") if at is not None else "Cumulative cutoffs."
    tables = [_table(designs_table("by_cutoff", effects))]
    if effects.decomposition is not None:
        tables.append(_table(designs_table("decomposition", effects)))
    test = _summary(_esc(effects.equality.sentence("cutoffs")))
    return _summary(head) + _layout(board, "by_cutoff", tables, effects.warnings) + test


def _subgroups(board) -> str:
    from .exports_designs import designs_table
    missing = _unavailable(board, "subgroups", "Subgroups")
    if missing is not None:
        return missing
    groups = _static()._results(board)["subgroups"]
    test = groups.equality
    caveat = f"<br><b>Assumption:</b> {_esc(test.assumption)}" if test.applies else ""
    return (_layout(board, "subgroups", [_table(designs_table("subgroups", groups))], groups.warnings)
            + _summary(_esc(test.sentence("groups")) + caveat))


def _power(board) -> str:
    from .exports_designs import designs_table
    s = _static()
    missing = _unavailable(board, "power", "Power")
    if missing is not None:
        return missing
    report = s._results(board)["power"]
    body = _summary(_esc(report.sentence()))
    if report.effect is None:
        body += s._info_html("Set an effect (the effect control above, or `effect: 0.2` in the cell) for the power "
                             "against it and the sample size that reaches 80% power.")
    elif report.sample is None and report.sample_error:
        body += s.error_html(report.sample_error, title="The sample size could not be computed")
    warnings = [w for w in report.warnings if w != report.sample_error]
    return body + _layout(board, "power", [_table(designs_table("sample_size", report))], warnings)


def has_table(value: Any, what: str) -> bool:
    """Whether a result has the table of export ``what`` (cumulative cutoffs have no decomposition)."""
    return what != "decomposition" or getattr(value, "decomposition", None) is not None


def header_note(board) -> str:
    """A line under the header's design line on boards with several cutoffs (else empty)."""
    from .designs_spec import cutoff_layout, cutoff_text
    spec = getattr(board, "spec", None) or {}
    layout = cutoff_layout(spec)
    if layout == "single":
        return ""
    if layout == "column":
        text = (f"Cutoffs from the column <code>{_esc(spec['cutoff'])}</code>: the headline pools every unit on "
                "the normalised score (each cutoff's own estimate: <b>By cutoff</b>).")
    else:
        chosen = spec.get("headline_cutoff")
        shown = chosen if chosen is not None else spec["cutoff"][0]
        text = (f"Cumulative cutoffs {_esc(cutoff_text(spec['cutoff']))}: the headline and the single-cutoff tabs "
                f"show the cutoff {shown:g} (the <i>headline</i> control picks another; all: <b>By cutoff</b>).")
    return f'<div class="seamline-cutoffs-note" style="font-size:12px;color:#555;margin:2px 0">{text}</div>'


#: Panel key -> function(board or state) -> HTML body.
BODIES: dict[str, Any] = {"by_cutoff": _by_cutoff, "subgroups": _subgroups, "power": _power}
