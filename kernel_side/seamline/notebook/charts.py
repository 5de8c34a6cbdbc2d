"""Chart builders: one pure function per diagnostic, result object -> ``altair`` chart.

Every builder reads only the summary tables a result object exposes (``table()``, ``curve()``,
``grid()``, ``histogram()``) and the fit's scalar fields, so the data inside a chart spec is binned
or summary data, never the raw rows. Altair and vl-convert are imported inside the functions: this
module can be imported without either, and ``import seamline`` never pulls them in.

The look is meant for a working paper: two charts fit side by side in a normal notebook (about
360 px wide each), one colour per side of the cutoff (the treated side darker), thin intervals,
a dashed rule at the cutoff, axis titles carrying the column names, no decoration.

User column names only ever appear as *titles*; inside the specs the data columns are renamed to
fixed internal names, so a name with dots, brackets or markup cannot break an encoding, and Vega
escapes titles when it writes SVG text.

This module is where callers import them from, and it dispatches a board's export names
(:func:`chart_for`). The builders live in ``charts_score`` (the cutoff plot, the first stage, the
density of the score), ``charts_robustness`` (bandwidths, balance, placebo cutoffs, donut),
``charts_designs`` and ``charts_inference``; the shared look in ``charts_style``; SVG, PNG and
Vega-Lite output in ``charts_render``.

Examples
--------
>>> import seamline
>>> from seamline.demo_data import sharp_scenario
>>> from seamline.notebook.charts import estimate_chart, to_svg
>>> s = sharp_scenario(seed=1)
>>> design = seamline.Design(s.data, **s.design_kwargs())
>>> fit = design.fit()
>>> svg = to_svg(estimate_chart(design.bins(), fit))        # doctest: +SKIP
"""
from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import pandas as pd

from ..errors import shown
# Re-exported: other modules (charts_inference as `charts.X`, static) and the tests read the
# builders, the renderers and the style names here.
from .charts_render import VEGA_LITE_MIME, _tidy_svg, to_png, to_svg, to_vega_lite  # noqa: F401
from .charts_robustness import balance_chart, donut_chart, placebo_chart, sensitivity_chart
from .charts_score import _bandwidth_text, density_chart, estimate_chart, first_stage_chart  # noqa: F401
from .charts_style import (FONT, HEIGHT, INK, MUTED, TREATED, UNTREATED, WIDTH, WINDOW,  # noqa: F401
                           _alt, _attr, _ci_columns, _colors, _configure, _cutoff_rule, _estimate_path,
                           _finite, _level, _p, _p_is, _pct, _records, _short, _side_names, _side_scale,
                           _stat, _title, _zero_rule, number)

__all__ = [
    "CHART_NAMES",
    "WIDTH",
    "HEIGHT",
    "balance_chart",
    "chart_for",
    "density_chart",
    "donut_chart",
    "estimate_chart",
    "not_applicable_reason",
    "number",
    "first_stage_chart",
    "placebo_chart",
    "sensitivity_chart",
    "to_png",
    "to_svg",
]

#: Export names that :func:`chart_for` understands.
CHART_NAMES = ("estimate", "sensitivity", "balance", "density", "first_stage", "placebo", "donut",
               "by_cutoff", "subgroups", "power",      # charts_designs
               "bias_aware_sensitivity", "windows")   # charts_inference.py


# ---------------------------------------------------------------------------------------------
# Dispatch from a board
# ---------------------------------------------------------------------------------------------
def chart_for(board, what: str, *, configure: bool = True):
    """The chart of one export name for a board's current results.

    Parameters
    ----------
    board : seamline Board
        Reads ``board.results`` (keys "fit", "bins", "sensitivity", "bandwidths", "balance",
        "density", "first_stage", "first_stage_bins", "placebo", "donut").
    what : {"estimate", "sensitivity", "balance", "density", "first_stage", "placebo", "donut"}

    Returns
    -------
    altair chart

    Raises
    ------
    ValueError
        When ``what`` is not a chart name, or the result it needs is missing or does not apply
        (the message carries the reason).
    """
    if what not in CHART_NAMES:
        names = ", ".join(f'"{n}"' for n in CHART_NAMES)
        raise ValueError(f"`what` must be one of {names}; got {shown(what)}. Pick a chart name.")
    results: Mapping[str, Any] = board.results
    errors = getattr(board, "errors", None)

    def usable(key: str):
        return _usable(results, key, what, errors if isinstance(errors, Mapping) else None)

    fit = usable("fit")
    if what in ("by_cutoff", "subgroups", "power"):
        from .charts_designs import designs_chart
        return designs_chart(results, what, usable, configure=configure)
    if what in ("bias_aware_sensitivity", "windows"):
        from . import charts_inference
        return charts_inference.chart_for(results, what, usable, configure=configure)
    if what == "estimate":
        return estimate_chart(usable("bins"), fit, configure=configure)
    if what == "sensitivity":
        bw = results.get("bandwidths")
        bw = bw if isinstance(bw, pd.DataFrame) else None
        return sensitivity_chart(usable("sensitivity"), fit=fit, bandwidths=bw, configure=configure)
    if what == "balance":
        return balance_chart(usable("balance"), configure=configure)
    if what == "density":
        return density_chart(usable("density"), score=fit.score, treated=fit.treated, configure=configure)
    if what == "first_stage":
        usable("first_stage")
        return first_stage_chart(usable("first_stage_bins"), fit, configure=configure)
    if what == "placebo":
        return placebo_chart(usable("placebo"), cutoff=fit.cutoff, score=fit.score, treated=fit.treated,
                             configure=configure)
    return donut_chart(usable("donut"), fit=fit, configure=configure)


def not_applicable_reason(value: Any) -> str | None:
    """The reason text of a "does not apply" result, or None for a real result."""
    if value is None:
        return "not computed"
    if isinstance(value, Exception):
        return str(value)
    applies = getattr(value, "applies", None)
    if applies is False or getattr(value, "applicable", None) is False:
        return str(getattr(value, "reason", "does not apply"))
    return None


def _usable(results: Mapping[str, Any], key: str, what: str, errors: Mapping[str, str] | None = None):
    value = results.get(key)
    reason = not_applicable_reason(value)
    if reason is not None:
        if reason == "not computed" and errors and errors.get(key):
            reason = str(errors[key])
        raise ValueError(f"`what` {shown(what)} needs the {shown(key)} result, which is unavailable: {reason}")
    return value
