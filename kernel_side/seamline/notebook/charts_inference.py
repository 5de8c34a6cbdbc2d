"""Charts of the inference panels (issue 9): the bias-aware interval against the smoothness bound,
and covariate balance over the nested windows of local randomization.

Built with the helpers and palette of ``charts`` (Altair, imported lazily there); exported like
every board chart (``Board.export(name, "svg" | "png")``).
"""
from __future__ import annotations

from typing import Any

import pandas as pd

from . import charts as c

__all__ = ["INFERENCE_CHARTS", "bias_aware_chart", "chart_for", "windows_chart"]

#: Chart names -> the board results they draw.
INFERENCE_CHARTS = {"bias_aware_sensitivity": ("bias_aware",), "windows": ("local_randomization",)}


def bias_aware_chart(aware, *, configure: bool = True):
    """The bias-aware interval at multiples 0.5-4 of the bound M (bandwidth re-optimised for each),
    with the chosen bound marked."""
    alt = c._alt()
    table = aware.sensitivity
    data = c._records(c._finite(table.assign(m=table["smoothness"], lo=table["ci_low"], hi=table["ci_high"]),
                                ["m", "estimate"])[["m", "estimate", "lo", "hi"]])
    layers = c._estimate_path(alt, data, "m", "smoothness bound M", alt.ColorValue(c.TREATED),
                              f"jump in {aware.outcome}")
    layers.append(c._cutoff_rule(alt, float(aware.smoothness), label="chosen M"))
    chart = alt.layer(*layers,
        width=c.WIDTH, height=c.HEIGHT,
        title=c._title(alt, "Bias-aware interval against the smoothness bound",
                       [f"{c._pct(aware.level)} interval for 0.5 to 4 times M = {c.number(aware.smoothness)} "
                        f"({aware.smoothness_rule})", "a larger bound allows more curvature: wider intervals"]))
    return c._configure(chart, configure=configure)


def windows_chart(lr, *, configure: bool = True):
    """The smallest covariate-balance p-value in each nested window, the threshold, and the
    analysed window."""
    alt = c._alt()
    table = lr.windows
    data = c._records(c._finite(table.assign(w=table["half_width"], p=table["balance_p_value"]), ["w", "p"])[
        ["w", "p", "least_balanced", "n_below", "n_above"]])
    threshold = pd.DataFrame({"t": [float(lr.balance_threshold)]})
    half = max(lr.window[1] - lr.cutoff, lr.cutoff - lr.window[0])
    layers = [
        alt.Chart(threshold).mark_rule(color=c.MUTED, strokeDash=[2, 2]).encode(y=alt.Y("t:Q")),
        alt.Chart(data).mark_line(color=c.TREATED, strokeWidth=1.2).encode(x=alt.X("w:Q"), y=alt.Y("p:Q")),
        alt.Chart(data).mark_circle(size=30, color=c.TREATED, opacity=1).encode(
            x=alt.X("w:Q", title=f"half-width of the window ({lr.score} units)"),
            y=alt.Y("p:Q", title="smallest balance p-value", scale=alt.Scale(domain=[0, 1])),
            tooltip=[alt.Tooltip("w:Q", format=".4g", title="half-width"),
                     alt.Tooltip("p:Q", format=".3f", title="p-value"),
                     alt.Tooltip("least_balanced:N", title="least balanced"),
                     alt.Tooltip("n_below:Q", title="below"), alt.Tooltip("n_above:Q", title="above")]),
        c._cutoff_rule(alt, float(half), label="analysed window"),
    ]
    chart = alt.layer(*layers,
        width=c.WIDTH, height=c.HEIGHT,
        title=c._title(alt, "Covariate balance in nested windows",
                       [f"smallest randomization p-value over the covariates; dashed line at "
                        f"{lr.balance_threshold:g}", "the window is the largest that stays above it, with every "
                        "smaller one"]))
    return c._configure(chart, configure=configure)


def chart_for(results, what: str, usable, *, configure: bool = True) -> Any:
    """The chart ``what`` of a board's results (``usable(key)`` raises with the reason when a result
    is missing or does not apply)."""
    if what == "bias_aware_sensitivity":
        return bias_aware_chart(usable("bias_aware"), configure=configure)
    lr = usable("local_randomization")
    if lr.windows["balance_p_value"].isna().all():
        raise ValueError("`what` 'windows' needs balance p-values, and the design has no covariates: the "
                         "window was given, not chosen by balance.")
    return windows_chart(lr, configure=configure)
