"""Exports of a board: one table, chart or the methods paragraph, rendered from current results.

``export_result`` takes the board's results *for its current inputs* (the board waits for them
before calling), so an export never shows a stale number. Tables go through
``seamline.export``; charts are drawn kernel-side to SVG or PNG by vl-convert, only here and for
the static copy of a saved notebook. Nothing here imports IPython or widgets.
"""
from __future__ import annotations

import html
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import pandas as pd

from ..errors import InvalidOptionError, shown
from ..options import check_option
from .exports_designs import DESIGNS_EXPORTS, designs_table
from .spec import NotApplicable

__all__ = ["CHART_FORMATS", "EXPORTS", "LABELS", "TABLE_FORMATS", "export_result", "methods_text"]

LABELS = {
    "fit": "main estimate", "first_stage": "first stage", "bins": "binned means",
    "first_stage_bins": "binned take-up", "bandwidths": "bandwidth rules", "density": "density test",
    "balance": "covariate balance", "sensitivity": "bandwidth sensitivity",
    "placebo": "placebo cutoffs", "donut": "donut radii", "score_profile": "score profile",
    "checks": "design checks",
    "by_cutoff": "effects by cutoff", "subgroups": "subgroup effects", "power": "power and sample size",
    "bias_aware": "bias-aware interval", "weak_iv": "weak-instrument-robust set",
    "local_randomization": "local randomization",
}
#: Export names -> result keys.
EXPORTS: dict[str, str] = {
    "estimate": "fit", "first_stage": "first_stage", "bandwidths": "bandwidths",
    "sensitivity": "sensitivity", "balance": "balance", "density": "density", "placebo": "placebo",
    "donut": "donut", "bins": "bins", "score_profile": "score_profile", "checks": "checks",
    **{name: key for name, (key, _) in DESIGNS_EXPORTS.items()},
}
TABLE_FORMATS = ("latex", "markdown", "csv", "html", "text")
CHART_FORMATS = ("svg", "png")
_METHODS_FORMATS = ("text", "markdown", "latex", "html")


def methods_text(fit, results: Mapping[str, Any], errors: Mapping[str, str], weights: str | None) -> str:
    """The specification and results in prose (see ``seamline.export.methods.methods_paragraph``)."""
    from ..export.methods import methods_paragraph
    if fit is None:
        raise InvalidOptionError(f"`board` must have a current main fit to describe; got none: "
                                 f"{errors.get('fit', 'not computed')}. Fix the error first.")
    diagnostics = {k: v for k, v in results.items()
                   if k in ("density", "balance", "sensitivity", "placebo", "donut", "bias_aware", "weak_iv",
                            "local_randomization") and v is not None
                   and not isinstance(v, NotApplicable)}
    from ..export.methods_designs import designs_sentences
    # several cutoffs, subgroups, power: no sentence where they do not apply
    return methods_paragraph(fit, diagnostics=diagnostics, weights=weights, extra=designs_sentences(results))


def export_result(state, what: str, fmt: str, path: str | Path | None, *, weights: str | None) -> str | bytes:
    """Render ``what`` of a board's state (``results``, ``errors``, ``name``) as ``fmt``; write it
    to ``path`` when given. See ``Board.export`` for the names and formats."""
    fmt = check_option("fmt", fmt, TABLE_FORMATS + CHART_FORMATS)
    if what == "methods":
        if fmt not in _METHODS_FORMATS:
            raise InvalidOptionError(f"`fmt` for the methods paragraph must be \"text\", \"markdown\", "
                                     f"\"latex\" or \"html\"; got {shown(fmt)}. Use fmt=\"text\".")
        fit = state.results.get("fit")
        text = methods_text(None if isinstance(fit, NotApplicable) else fit, state.results, state.errors, weights)
        if fmt == "latex":
            from ..export.render import latex_escape
            text = latex_escape(text) + "\n"
        elif fmt == "html":
            text = f"<p class=\"seamline-methods\">{html.escape(text)}</p>\n"
        else:
            text += "\n"
        return _write(text, path)
    from . import compute_inference as inference
    if what in inference.EXPORTS and fmt not in CHART_FORMATS:
        result = inference.export_source(state.results, what)
        if result is None or isinstance(result, NotApplicable):
            key = inference.EXPORTS[what][0]
            reason = str(result) if result is not None else state.errors.get(key, "not computed")
            raise InvalidOptionError(f"`what` must name a panel with a current result; got {shown(what)}, which has "
                                     f"none: {reason}")
        return _write(_render_table(result, fmt, title=None), path)
    if what not in EXPORTS and not (what in inference.EXPORTS and fmt in CHART_FORMATS):
        names = ", ".join(f'"{n}"' for n in (*EXPORTS, *inference.EXPORTS, "methods"))
        raise InvalidOptionError(f"`what` must be one of {names}; got {shown(what)}. Pick a table or chart name.")
    if fmt in CHART_FORMATS:
        from . import charts
        chart = charts.chart_for(state, what)
        return _write(charts.to_svg(chart) if fmt == "svg" else charts.to_png(chart), path)
    result = state.results.get(EXPORTS[what])
    if result is None or isinstance(result, NotApplicable):
        reason = str(result) if result is not None else state.errors.get(EXPORTS[what], "not computed")
        raise InvalidOptionError(f"`what` must name a panel with a current result; got {shown(what)}, which has "
                                 f"none: {reason}")
    if what in DESIGNS_EXPORTS:
        label = DESIGNS_EXPORTS[what][1]
        return _write(_render_table(designs_table(what, result), fmt, title=f"{state.name}: {label}"), path)
    return _write(_render_table(result, fmt, title=f"{state.name}: {LABELS[EXPORTS[what]]}"), path)


def _render_table(result: Any, fmt: str, *, title: str) -> str:
    """Reader labels in every format (seamline.export.labels); ``table()`` keeps the machine names."""
    from ..export.labels import export_table
    return export_table(result, fmt, title=title if isinstance(result, pd.DataFrame) else None)


def _write(value: str | bytes, path: str | Path | None) -> str | bytes:
    if path is not None:
        target = Path(path)
        if isinstance(value, bytes):
            target.write_bytes(value)
        else:
            with open(target, "w", encoding="utf-8", newline="") as handle:
                handle.write(value)
    return value
