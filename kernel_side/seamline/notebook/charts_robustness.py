"""Charts of the robustness and falsification checks: estimate versus bandwidth, covariate
balance, placebo cutoffs and the donut.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from . import time_axes
from .charts_style import (HEIGHT, INK, MUTED, TREATED, UNTREATED, WIDTH, _alt, _attr, _ci_columns,
                           _colors, _configure, _cutoff_rule, _estimate_path, _finite, _level, _p_is,
                           _pct, _records, _side_names, _title, _zero_rule)

__all__ = ["balance_chart", "donut_chart", "placebo_chart", "sensitivity_chart"]


# ---------------------------------------------------------------------------------------------
# Estimate versus bandwidth
# ---------------------------------------------------------------------------------------------
def sensitivity_chart(sensitivity, *, fit=None, bandwidths: pd.DataFrame | None = None,
                      configure: bool = True):
    """Estimate and robust interval at each bandwidth, the selected bandwidth and each selector.

    Parameters
    ----------
    sensitivity : seamline Sensitivity result (``design.sensitivity()``)
        ``table()`` rows with label, bandwidth_below, bandwidth_above, kernel, degree, estimate,
        robust_ci_low, robust_ci_high. With several kernels or degrees each gets its own colour.
    fit : seamline Fit, optional
        The headline fit: its bandwidth is marked as "selected".
    bandwidths : DataFrame, optional
        ``design.bandwidths()`` (rule, bandwidth_below, bandwidth_above, ...): each selector's
        bandwidth is marked with a labelled tick along the top.

    Returns
    -------
    altair.LayerChart
    """
    alt = _alt()
    table = sensitivity.table()
    low, high = _ci_columns(table)
    asymmetric = bool((table["bandwidth_below"] != table["bandwidth_above"]).any())
    data = table.assign(
        h=table["bandwidth_below"],
        spec=table["kernel"].astype(str) + ", degree " + table["degree"].astype(str),
        lo=table[low], hi=table[high], label=table["label"].astype(str))
    data = _records(_finite(data, ["h", "estimate"])[["label", "h", "bandwidth_above", "spec",
                                                      "estimate", "lo", "hi"]])
    several = data["spec"].nunique() > 1
    level = _level(sensitivity, _level(fit))
    # Rows "x0.5" ... "x2" scale the selected bandwidth and form the path; rows named after a
    # selector ("mse", "coverage", ...) are shown as open points on their own.
    scaled = data["label"].str.match(r"^x[0-9.]+$")
    path, named = data[scaled], data[~scaled]
    color = (alt.Color("spec:N", legend=alt.Legend(title=None),
                       scale=alt.Scale(range=[TREATED, UNTREATED, MUTED, INK]))
             if several else alt.ColorValue(TREATED))
    x_title = "bandwidth below the cutoff" if asymmetric else "bandwidth"
    dates = time_axes.scale_of(sensitivity, fit)
    if dates is not None:
        x_title += f" ({dates.unit})"
    elif fit is not None:
        x_title += f" ({_attr((fit, sensitivity), 'score', 'score units')} units)"
    x_enc = alt.X("h:Q", title=x_title, scale=alt.Scale(zero=False, nice=True))
    y_title = f"jump in {_attr((sensitivity, fit), 'outcome', 'the outcome')}"
    tooltip = [alt.Tooltip("label:N", title="bandwidth"), alt.Tooltip("h:Q", format=".4g"),
               alt.Tooltip("estimate:Q", format=".4g"), alt.Tooltip("lo:Q", format=".4g", title="CI low"),
               alt.Tooltip("hi:Q", format=".4g", title="CI high")]
    layers = [_zero_rule(alt, "y")]
    ci = _finite(path, ["lo", "hi"])
    if not several and len(ci) > 2:
        layers.append(alt.Chart(ci).mark_area(opacity=0.14, color=TREATED).encode(
            x=alt.X("h:Q"), y=alt.Y("lo:Q"), y2=alt.Y2("hi:Q")))
    layers.append(alt.Chart(ci).mark_rule(strokeWidth=1.2).encode(
        x=alt.X("h:Q"), y=alt.Y("lo:Q"), y2=alt.Y2("hi:Q"), color=color))
    layers.append(alt.Chart(path).mark_line(strokeWidth=1, opacity=0.6).encode(
        x=alt.X("h:Q"), y=alt.Y("estimate:Q"), color=color, detail=alt.Detail("spec:N")))
    layers.append(alt.Chart(path).mark_circle(size=30, opacity=1).encode(
        x=x_enc, y=alt.Y("estimate:Q", title=y_title, scale=alt.Scale(zero=False)), color=color,
        tooltip=tooltip))
    if len(named):
        named_ci = _finite(named, ["lo", "hi"])
        layers.append(alt.Chart(named_ci).mark_rule(strokeWidth=1, color=MUTED).encode(
            x=alt.X("h:Q"), y=alt.Y("lo:Q"), y2=alt.Y2("hi:Q")))
        layers.append(alt.Chart(named).mark_point(size=34, filled=False, strokeWidth=1.4, color=INK).encode(
            x=x_enc, y=alt.Y("estimate:Q", title=y_title, scale=alt.Scale(zero=False)), tooltip=tooltip))

    marks = []
    if bandwidths is not None and len(bandwidths):
        for _, row in bandwidths.iterrows():
            marks.append({"h": float(row["bandwidth_below"]), "label": str(row["rule"]), "kind": "selector"})
    else:
        for _, row in named.iterrows():
            marks.append({"h": float(row["h"]), "label": str(row["label"]), "kind": "selector"})
    selected_rule = None
    if fit is not None:
        selected_rule = str(getattr(fit, "bandwidth_rule", ""))
        marks = [m for m in marks if m["label"] != selected_rule]
        marks.append({"h": float(fit.bandwidth[0]), "label": f"selected ({selected_rule})", "kind": "selected"})
    if marks:
        frame = _records(pd.DataFrame(marks))
        frame = frame[np.isfinite(frame["h"])]
        # Stagger labels in three rows so neighbouring selectors do not print over each other.
        frame = frame.sort_values("h").reset_index(drop=True)
        frame["row"] = [i % 3 for i in range(len(frame))]
        frame["dy"] = frame["row"] * 10
        sel = frame[frame["kind"] == "selected"]
        oth = frame[frame["kind"] == "selector"]
        if len(oth):
            layers.append(alt.Chart(oth).mark_rule(color=MUTED, strokeDash=[2, 2], strokeWidth=1).encode(
                x=alt.X("h:Q")))
        if len(sel):
            layers.append(alt.Chart(sel).mark_rule(color=INK, strokeDash=[5, 3], strokeWidth=1.2).encode(
                x=alt.X("h:Q")))
        layers.append(alt.Chart(frame).mark_text(align="left", baseline="top", dx=3, fontSize=9,
                                                 color=INK).encode(
            x=alt.X("h:Q"), y=alt.Y("dy:Q", scale=None), text=alt.Text("label:N")))
    subtitle = [f"dots: estimate at multiples of the selected bandwidth; "
                f"{'bars' if several else 'band'}: robust {_pct(level)} CI",
                "open points: other selectors (dotted rules)"
                + ("; dashed rule: the bandwidth in use" if fit is not None else "")]
    chart = alt.layer(*layers,
        width=WIDTH, height=HEIGHT, title=_title(alt, "Estimate versus bandwidth", subtitle))
    return _configure(chart, configure=configure)


# ---------------------------------------------------------------------------------------------
# Covariate balance
# ---------------------------------------------------------------------------------------------
def balance_chart(balance, *, configure: bool = True):
    """Jump of each pre-treatment covariate at the cutoff with its robust interval.

    Each covariate gets its own row and its own horizontal scale (covariates are in different
    units), with a zero line; a balanced design has every interval covering zero.

    Parameters
    ----------
    balance : seamline Balance result (``design.balance()``)
        ``table()`` with covariate, estimate, ci_low, ci_high, p_value (and p_value_holm);
        ``joint_p_value`` goes into the subtitle.

    Returns
    -------
    altair.FacetChart
    """
    alt = _alt()
    table = balance.table()
    low, high = _ci_columns(table)
    p_col = "p_value_holm" if "p_value_holm" in table.columns else "p_value"
    data = table.assign(name=table["covariate"].astype(str), lo=table[low], hi=table[high],
                        p=table[p_col], zero=0.0)
    data = _records(data[["name", "estimate", "lo", "hi", "p", "zero"]])
    data["p_text"] = data["p"].map(_p_is)
    level = _level(balance)
    base = alt.Chart()
    zero = base.mark_rule(color=MUTED, strokeWidth=1).encode(x=alt.X("zero:Q"))
    bars = base.mark_rule(color=TREATED, strokeWidth=1.6).encode(
        x=alt.X("lo:Q", title=None, scale=alt.Scale(zero=True, nice=True),
                axis=alt.Axis(tickCount=5, labelOverlap=True, labelFontSize=9)), x2=alt.X2("hi:Q"))
    dots = base.mark_circle(color=TREATED, size=36, opacity=1).encode(
        x=alt.X("estimate:Q"),
        tooltip=[alt.Tooltip("name:N", title="covariate"), alt.Tooltip("estimate:Q", format=".4g"),
                 alt.Tooltip("lo:Q", format=".4g", title="CI low"),
                 alt.Tooltip("hi:Q", format=".4g", title="CI high"), alt.Tooltip("p_text:N", title="p")])
    ptext = base.mark_text(align="right", baseline="middle", fontSize=9, color="#555555").encode(
        x=alt.XValue(WIDTH - 10), text=alt.Text("p_text:N"))
    layer = alt.layer(zero, bars, dots, ptext, data=data, width=WIDTH - 60, height=20)
    facet = layer.facet(
        row=alt.Row("name:N", sort=list(data["name"]), title=None,
                    header=alt.Header(labelAngle=0, labelAlign="left", labelOrient="left",
                                      labelLimit=110, labelPadding=4)),
        spacing=6,
    ).resolve_scale(x="independent")
    joint = getattr(balance, "joint_p_value", None)
    subtitle = [f"dots: jump in each covariate; bars: robust {_pct(level)} CI; "
                f"{'Holm-adjusted ' if p_col == 'p_value_holm' else ''}p-values at right",
                "each row in the covariate's own units"
                + (f"; joint test {_p_is(joint)}"
                   if joint is not None else "")]
    facet = facet.properties(title=_title(alt, "Covariate balance at the cutoff", subtitle))
    return _configure(facet, configure=configure)


# ---------------------------------------------------------------------------------------------
# Placebo cutoffs and donut
# ---------------------------------------------------------------------------------------------
def placebo_chart(placebo, *, cutoff: float | None = None, score: str | None = None,
                  treated: str | None = None, configure: bool = True):
    """Estimates at placebo cutoffs (where no jump should be) with robust intervals.

    Placebo cutoffs below the true cutoff use only the data below it and those above only the
    data above it, so the true jump cannot leak into them; the true cutoff is marked.

    Parameters
    ----------
    placebo : seamline Placebo result (``design.placebo_cutoffs()``)
        ``table()`` rows with cutoff, side, estimate and the interval columns.
    cutoff, score, treated : optional
        The true cutoff, the score's column name and the treated side (defaults: the result's
        own attributes, when it has them).

    Returns
    -------
    altair.LayerChart
    """
    alt = _alt()
    table = placebo.table()
    low, high = _ci_columns(table)
    treated = treated or getattr(placebo, "treated", None) or "above"
    dates = time_axes.scale_of(placebo)
    score = score or getattr(placebo, "score", None) or ("date" if dates is not None else "score")
    if cutoff is None:
        cutoff = getattr(placebo, "true_cutoff", None)
        if cutoff is None:
            cutoff = getattr(placebo, "cutoff", None)
    names = _side_names(treated)
    side = table["side"] if "side" in table.columns else pd.Series("below", index=table.index)
    data = table.assign(at=table["cutoff"], lo=table[low], hi=table[high],
                        side_name=side.map(lambda s: f"placebo {names.get(str(s), str(s))}"
                                           .replace(" (treated)", " (treated side)")))
    data = _records(_finite(data, ["at", "estimate"])[["at", "side_name", "estimate", "lo", "hi"]])
    colors = _colors(treated)
    domain = [f"placebo {names['below']}".replace(" (treated)", " (treated side)"),
              f"placebo {names['above']}".replace(" (treated)", " (treated side)")]
    color = alt.Color("side_name:N", legend=alt.Legend(title=None),
                      scale=alt.Scale(domain=domain, range=[colors["below"], colors["above"]]))
    outcome = getattr(placebo, "outcome", None)
    layers = _estimate_path(alt, data, "at", f"placebo cutoff ({score})", color,
                            f"jump in {outcome}" if outcome else "estimate")
    if cutoff is not None:
        label = "true cutoff" if dates is None else f"true cutoff {time_axes.cutoff_text(dates, cutoff)}"
        layers.append(_cutoff_rule(alt, float(cutoff), label=label))
    level = _level(placebo)
    chart = alt.layer(*layers,
        width=WIDTH, height=HEIGHT,
        title=_title(alt, "Placebo cutoffs",
                     [f"estimate and robust {_pct(level)} CI at cutoffs where no jump is expected",
                      "each side uses only its own observations"]))
    return _configure(time_axes.dated(chart, dates, alt), configure=configure)


def donut_chart(donut, *, fit=None, configure: bool = True):
    """Estimate and robust interval as observations nearest the cutoff are dropped.

    Parameters
    ----------
    donut : seamline Donut result (``design.donut()``)
        ``table()`` rows with radius, estimate and the interval columns.
    fit : seamline Fit, optional
        Supplies the score's column name for the axis title.

    Returns
    -------
    altair.LayerChart
    """
    alt = _alt()
    table = donut.table()
    low, high = _ci_columns(table)
    score = _attr((fit, donut), "score", "score")
    data = _records(_finite(table.assign(radius=table["radius"], lo=table[low], hi=table[high]),
                            ["radius", "estimate"])[["radius", "estimate", "lo", "hi"]])
    outcome = _attr((donut, fit), "outcome", None)
    dates = time_axes.scale_of(donut, fit)
    radius_title = time_axes.unit_title(dates, f"donut radius ({score} units excluded each side)",
                                        "donut radius excluded each side")
    layers = _estimate_path(alt, data, "radius", radius_title,
                            alt.ColorValue(TREATED), f"jump in {outcome}" if outcome else "estimate")
    level = _level(donut, _level(fit))
    chart = alt.layer(*layers,
        width=WIDTH, height=HEIGHT,
        title=_title(alt, "Donut: dropping observations nearest the cutoff",
                     [f"estimate and robust {_pct(level)} CI by radius; radius 0 is the full sample",
                      "stable estimates suggest no heaping or sorting right at the cutoff"]))
    return _configure(chart, configure=configure)
