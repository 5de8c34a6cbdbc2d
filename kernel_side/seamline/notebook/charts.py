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

import math
import re
from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd

from ..errors import shown
from . import time_axes

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

WIDTH = 340    # plot area; with axes the chart is about 400 px, so two sit side by side
HEIGHT = 210

# Palette of our own: the treated side in a deep teal, the untreated side in a muted ochre, the
# cutoff and reference lines in greys. Both colours stay distinct in greyscale print.
TREATED = "#1d6470"
UNTREATED = "#b07a2a"
INK = "#333333"
MUTED = "#8c8c8c"
WINDOW = "#eef1f2"
FONT = "Helvetica, Arial, sans-serif"


# ---------------------------------------------------------------------------------------------
# Small helpers
# ---------------------------------------------------------------------------------------------
def _alt():
    try:
        import altair as alt
    except ImportError as exc:  # pragma: no cover - exercised only without the extra
        raise ImportError(
            "seamline's charts need the `altair` package; install it with "
            "`pip install altair vl-convert-python` (both are dependencies of seamline)."
        ) from exc
    return alt


def _vlc():
    try:
        import vl_convert
    except ImportError as exc:  # pragma: no cover - exercised only without the extra
        raise ImportError(
            "exporting charts needs the `vl-convert-python` package; install it with "
            "`pip install vl-convert-python` (a dependency of seamline)."
        ) from exc
    return vl_convert


def number(value: Any, digits: int = 3) -> str:
    """Format a number for a title: about ``digits`` significant digits, "n/a" when missing.

    Examples
    --------
    >>> number(3.0571), number(0.59481), number(1234.6), number(float("nan"))
    ('3.06', '0.595', '1,235', 'n/a')
    """
    try:
        x = float(value)
    except (TypeError, ValueError):
        return "n/a"
    if not math.isfinite(x):
        return "n/a"
    if x == 0.0:
        return "0"
    decimals = max(0, min(6, digits - 1 - int(math.floor(math.log10(abs(x))))))
    text = f"{x:,.{decimals}f}"
    return "0" if float(text.replace(",", "")) == 0.0 else text


def _short(value: Any) -> str:
    """A value the user typed (a cutoff, a radius) shown as written: 40, 0.5, 65."""
    try:
        return f"{float(value):g}"
    except (TypeError, ValueError):
        return str(value)


def _p(value: Any) -> str:
    try:
        p = float(value)
    except (TypeError, ValueError):
        return "n/a"
    if not math.isfinite(p):
        return "n/a"
    return "< 0.001" if p < 0.001 else f"{p:.3f}"


def _stat(value: Any) -> str:
    try:
        x = float(value)
    except (TypeError, ValueError):
        return "n/a"
    return f"{x:.2f}" if math.isfinite(x) else "n/a"


def _level(obj: Any, default: float = 0.95) -> float:
    level = getattr(obj, "level", None)
    if level is None:
        # results that hold one fit per row (placebos, donut) report at their fits' level
        fits = getattr(obj, "fits", None) or ()
        level = getattr(fits[0], "level", None) if len(fits) else None
    try:
        level = float(level)
    except (TypeError, ValueError):
        return default
    return level if 0.0 < level < 1.0 else default


def _pct(level: float) -> str:
    return f"{100.0 * level:g}%"


def _side_names(treated: str | None) -> dict[str, str]:
    """Legend labels for the two sides, naming the treated one."""
    names = {"below": "below cutoff", "above": "above cutoff"}
    if treated in names:
        names[treated] += " (treated)"
    return names


def _colors(treated: str | None) -> dict[str, str]:
    treated = treated if treated in ("below", "above") else "above"
    other = "below" if treated == "above" else "above"
    return {treated: TREATED, other: UNTREATED}


def _side_scale(alt, treated: str | None):
    names = _side_names(treated)
    colors = _colors(treated)
    return alt.Scale(domain=[names["below"], names["above"]],
                     range=[colors["below"], colors["above"]])


def _finite(df: pd.DataFrame, columns) -> pd.DataFrame:
    """Rows where every listed column is a finite number (Vega drops NaN marks unevenly)."""
    mask = np.ones(len(df), dtype=bool)
    for c in columns:
        mask &= np.isfinite(pd.to_numeric(df[c], errors="coerce").to_numpy(dtype=float))
    return df.loc[mask]


def _records(df: pd.DataFrame) -> pd.DataFrame:
    """A plain copy with a default index and float columns rounded for a compact spec."""
    out = df.reset_index(drop=True).copy()
    for c in out.columns:
        if pd.api.types.is_float_dtype(out[c]):
            # 6 significant digits are far below what a chart can show and halve the spec size.
            out[c] = out[c].map(lambda v: float(f"{v:.6g}") if math.isfinite(v) else v)
    return out


def _ci_columns(df: pd.DataFrame) -> tuple[str, str]:
    for low, high in (("robust_ci_low", "robust_ci_high"), ("ci_low", "ci_high")):
        if low in df.columns and high in df.columns:
            return low, high
    raise KeyError(
        f"`table()` must have interval columns robust_ci_low/robust_ci_high or ci_low/ci_high; "
        f"got {shown(list(df.columns))}. Pass a seamline result object."
    )


def _configure(chart, *, configure: bool):
    if not configure:
        return chart
    return (
        chart.configure(font=FONT, background="white", padding=6)
        .configure_view(stroke=None)
        .configure_axis(
            labelFontSize=10, titleFontSize=11, titleFontWeight="normal", titleColor=INK,
            labelColor=INK, domainColor=MUTED, tickColor=MUTED, tickSize=4, gridColor="#ececec",
            labelFlush=False,
        )
        .configure_axisX(grid=False)
        .configure_title(fontSize=12, fontWeight="bold", anchor="start", color=INK,
                         subtitleFontSize=10, subtitleColor="#555555", offset=8)
        .configure_legend(orient="bottom", direction="horizontal", title=None, labelFontSize=10,
                          symbolSize=60, symbolOpacity=1, symbolType="circle", padding=0, offset=6,
                          labelLimit=220)
        .configure_header(labelFontSize=10, labelColor=INK, titleFontSize=11)
    )


def _title(alt, text: str, subtitle: str | list[str] | None = None):
    if subtitle:
        return alt.TitleParams(text=text, subtitle=subtitle)
    return alt.TitleParams(text=text)


def _attr(objects, name: str, default=None):
    """The first non-None attribute ``name`` among ``objects``."""
    for obj in objects:
        if obj is None:
            continue
        value = getattr(obj, name, None)
        if value is not None:
            return value
    return default


def _cutoff_rule(alt, cutoff: float, *, label: str | None = None):
    frame = pd.DataFrame({"c": [float(cutoff)], "label": [label or ""]})
    rule = alt.Chart(frame).mark_rule(color=INK, strokeDash=[4, 3], strokeWidth=1).encode(
        x=alt.X("c:Q"))
    if not label:
        return rule
    text = alt.Chart(frame).mark_text(
        align="left", baseline="top", dx=3, dy=2, fontSize=9, color=INK,
    ).encode(x="c:Q", y=alt.value(0), text="label:N")
    return rule + text


def _zero_rule(alt, axis: str = "y"):
    frame = pd.DataFrame({"zero": [0.0]})
    enc = {axis: alt.X("zero:Q") if axis == "x" else alt.Y("zero:Q")}
    return alt.Chart(frame).mark_rule(color=MUTED, strokeWidth=1).encode(**enc)


# ---------------------------------------------------------------------------------------------
# The cutoff plot (binned means + local polynomial fits)
# ---------------------------------------------------------------------------------------------
def estimate_chart(bins, fit=None, *, global_polynomial: bool = False, y_title: str | None = None,
                   x_title: str | None = None, title: str | None = None, configure: bool = True):
    """Cutoff plot: binned means with intervals, local polynomial fits with bands, the cutoff.

    Parameters
    ----------
    bins : seamline Bins result (``design.bins()``)
        Its ``table()`` (side, left, right, count, mean, ci_low, ci_high, score_mean) gives the
        dots and their intervals; its ``curve()`` (side, x, fit, ci_low, ci_high) the fitted
        local polynomial and its confidence band inside the bandwidth on each side.
    fit : seamline Fit, optional
        Supplies the column names for the axis titles, the cutoff, the treated side, the
        bandwidth window (shaded) and the headline numbers in the subtitle.
    global_polynomial : bool, default False
        Add the bins result's global polynomial on each side (``bins.global_polynomial()``) as a
        dotted grey line, labelled "display only": a visual guide, never an estimator (global
        polynomials behave badly at a boundary; Gelman and Imbens 2019).
    x_title, y_title, title : str, optional
        Override the axis titles (e.g. to add units) or the chart title.
    configure : bool, default True
        Apply seamline's chart style (set False to concatenate charts yourself).

    Returns
    -------
    altair.LayerChart
    """
    alt = _alt()
    table = bins.table()
    curve = bins.curve() if hasattr(bins, "curve") else None
    cutoff = float(_attr((fit, bins), "cutoff", _cutoff_from_bins(table)))
    treated = _attr((fit, bins), "treated", "above")
    score = _attr((fit, bins), "score", "score")
    outcome = _attr((bins, fit), "outcome", "outcome")
    names = _side_names(treated)
    scale = _side_scale(alt, treated)
    level = _level(bins, _level(fit))
    dates = time_axes.scale_of(bins, fit)    # a date score: dates on the x axis (time_axes.dated)

    dots = table.copy()
    x_pos = dots["score_mean"].where(np.isfinite(dots["score_mean"]), (dots["left"] + dots["right"]) / 2)
    dots = dots.assign(x=x_pos, side_name=dots["side"].map(names))
    dots = _records(_finite(dots, ["x", "mean"])[["side", "side_name", "x", "left", "right", "count",
                                                  "mean", "ci_low", "ci_high"]])
    color = alt.Color("side_name:N", scale=scale, legend=alt.Legend(title=None))
    x_enc = alt.X("x:Q", title=x_title or str(score), scale=alt.Scale(zero=False, nice=False))
    # The vertical range follows the bin means and the fitted bands; the interval of a sparse bin
    # far from the cutoff may run past it and is clipped, so it cannot flatten the picture.
    y_domain = _y_domain([dots["mean"]] + ([curve["ci_low"], curve["ci_high"], curve["fit"]]
                                           if curve is not None and len(curve) else []))
    y_enc = alt.Y("mean:Q", title=y_title or f"{outcome} (mean per bin)",
                  scale=alt.Scale(zero=False, domain=y_domain) if y_domain else alt.Scale(zero=False))

    layers = []
    if fit is not None and getattr(fit, "bandwidth", None) is not None:
        h_below, h_above = (float(h) for h in fit.bandwidth)
        lo = max(cutoff - h_below, float(table["left"].min()))
        hi = min(cutoff + h_above, float(table["right"].max()))
        window = pd.DataFrame({"lo": [lo], "hi": [hi]})
        layers.append(alt.Chart(window).mark_rect(color=WINDOW).encode(x="lo:Q", x2="hi:Q"))
    if curve is not None and len(curve):
        band = curve.assign(side_name=curve["side"].map(names))
        band = _records(_finite(band, ["x", "fit"])[["side", "side_name", "x", "fit", "ci_low", "ci_high"]])
        band_ok = _finite(band, ["ci_low", "ci_high"])
        layers.append(alt.Chart(band_ok).mark_area(opacity=0.18, clip=True).encode(
            x=alt.X("x:Q"), y=alt.Y("ci_low:Q"), y2="ci_high:Q", color=color, detail="side:N"))
    dots_ci = _finite(dots, ["ci_low", "ci_high"])
    layers.append(alt.Chart(dots_ci).mark_rule(strokeWidth=1, opacity=0.55, clip=True).encode(
        x=alt.X("x:Q"), y=alt.Y("ci_low:Q"), y2="ci_high:Q", color=color))
    layers.append(alt.Chart(dots).mark_circle(size=22, opacity=0.9).encode(
        x=x_enc, y=y_enc, color=color,
        tooltip=[alt.Tooltip("left:Q", title="bin from"), alt.Tooltip("right:Q", title="bin to"),
                 alt.Tooltip("count:Q", title="observations"), alt.Tooltip("mean:Q", format=".4g")]))
    if curve is not None and len(curve):
        layers.append(alt.Chart(band).mark_line(strokeWidth=2).encode(
            x=alt.X("x:Q"), y=alt.Y("fit:Q"), color=color, detail="side:N"))
    notes = []
    if global_polynomial:
        frame = bins.global_polynomial() if hasattr(bins, "global_polynomial") else None
        if frame is not None and len(frame):
            value = "fit" if "fit" in frame.columns else [c for c in frame.columns if c not in ("side", "x")][0]
            guide = _records(_finite(frame.rename(columns={value: "fit"}), ["x", "fit"])[["side", "x", "fit"]])
            layers.append(alt.Chart(guide).mark_line(strokeWidth=1, strokeDash=[2, 2], color=MUTED, clip=True).encode(
                x=alt.X("x:Q"), y=alt.Y("fit:Q"), detail="side:N"))
            notes.append("dotted: global polynomial (display only)")
    layers.append(_cutoff_rule(alt, cutoff))

    what = "Take-up" if y_title and "take-up" in y_title.lower() else str(outcome)
    if title is None:
        title = f"{what} around the cutoff {score} = {time_axes.cutoff_text(dates, cutoff)}"
    subtitle = []
    if fit is not None:
        lo_ci, hi_ci = fit.robust_conf_int
        subtitle.append(
            f"jump {number(fit.estimate)}; robust {_pct(fit.level)} CI [{number(lo_ci)}, {number(hi_ci)}]; "
            f"bandwidth {_bandwidth_text(fit.bandwidth, dates)} (shaded)")
    subtitle.append(f"dots: bin means with {_pct(level)} CIs; lines: local polynomial fits with bands"
                    + ("; " + notes[0] if notes else ""))
    chart = alt.layer(*layers).properties(width=WIDTH, height=HEIGHT, title=_title(alt, title, subtitle))
    return _configure(time_axes.dated(chart, dates, alt, ("left", "right")), configure=configure)


def _y_domain(series, pad: float = 0.06) -> list[float] | None:
    values = np.concatenate([pd.to_numeric(v, errors="coerce").to_numpy(dtype=float) for v in series])
    values = values[np.isfinite(values)]
    if values.size == 0:
        return None
    lo, hi = float(values.min()), float(values.max())
    span = hi - lo if hi > lo else max(abs(hi), 1.0)
    return [lo - pad * span, hi + pad * span]


def _cutoff_from_bins(table: pd.DataFrame) -> float:
    above = table[table["side"] == "above"]
    if len(above):
        return float(above["left"].min())
    return float(table["right"].max())


def _bandwidth_text(bandwidth, dates=None) -> str:
    h_below, h_above = (float(h) for h in bandwidth)
    if h_below == h_above:
        return time_axes.length_text(dates, h_below, number)
    return (f"{time_axes.length_text(dates, h_below, number)} below, "
            f"{time_axes.length_text(dates, h_above, number)} above")


def first_stage_chart(bins, fit, *, configure: bool = True):
    """First-stage plot of a fuzzy design: binned take-up shares with the local polynomial fits.

    Parameters
    ----------
    bins : seamline Bins result of the take-up column (``design.bins(outcome=<takeup column>)``).
    fit : seamline Fit
        The fuzzy fit; its ``first_stage`` (the take-up jump) and ``first_stage_f`` go into the
        subtitle. A first-stage Fit itself is accepted too.

    Returns
    -------
    altair.LayerChart
    """
    stage = getattr(fit, "first_stage", None) or fit
    takeup = _attr((bins,), "outcome", None) or getattr(stage, "outcome", "take-up")
    chart = estimate_chart(bins, stage, y_title=f"take-up share ({takeup})",
                           title="First stage: take-up of treatment around the cutoff",
                           configure=False)
    f_stat = getattr(fit, "first_stage_f", None)
    lo_ci, hi_ci = stage.robust_conf_int
    subtitle = [f"take-up jump {number(stage.estimate)}; robust {_pct(stage.level)} CI "
                f"[{number(lo_ci)}, {number(hi_ci)}]"
                + (f"; first-stage F = {number(f_stat)}" if f_stat is not None else ""),
                "dots: binned take-up shares; lines: local polynomial fits with bands"]
    alt = _alt()
    chart = chart.properties(title=_title(alt, "First stage: take-up of treatment around the cutoff",
                                          subtitle))
    return _configure(chart, configure=configure)


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
             if several else alt.value(TREATED))
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
            x=alt.X("h:Q"), y=alt.Y("lo:Q"), y2="hi:Q"))
    layers.append(alt.Chart(ci).mark_rule(strokeWidth=1.2).encode(
        x=alt.X("h:Q"), y=alt.Y("lo:Q"), y2="hi:Q", color=color))
    layers.append(alt.Chart(path).mark_line(strokeWidth=1, opacity=0.6).encode(
        x=alt.X("h:Q"), y=alt.Y("estimate:Q"), color=color, detail="spec:N"))
    layers.append(alt.Chart(path).mark_circle(size=30, opacity=1).encode(
        x=x_enc, y=alt.Y("estimate:Q", title=y_title, scale=alt.Scale(zero=False)), color=color,
        tooltip=tooltip))
    if len(named):
        named_ci = _finite(named, ["lo", "hi"])
        layers.append(alt.Chart(named_ci).mark_rule(strokeWidth=1, color=MUTED).encode(
            x=alt.X("h:Q"), y=alt.Y("lo:Q"), y2="hi:Q"))
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
            x=alt.X("h:Q"), y=alt.Y("dy:Q", scale=None), text="label:N"))
    subtitle = [f"dots: estimate at multiples of the selected bandwidth; "
                f"{'bars' if several else 'band'}: robust {_pct(level)} CI",
                "open points: other selectors (dotted rules)"
                + ("; dashed rule: the bandwidth in use" if fit is not None else "")]
    chart = alt.layer(*layers).properties(
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
    data["p_text"] = data["p"].map(lambda v: "p " + (_p(v) if _p(v).startswith("<") else "= " + _p(v)))
    level = _level(balance)
    base = alt.Chart()
    zero = base.mark_rule(color=MUTED, strokeWidth=1).encode(x=alt.X("zero:Q"))
    bars = base.mark_rule(color=TREATED, strokeWidth=1.6).encode(
        x=alt.X("lo:Q", title=None, scale=alt.Scale(zero=True, nice=True),
                axis=alt.Axis(tickCount=5, labelOverlap=True, labelFontSize=9)), x2="hi:Q")
    dots = base.mark_circle(color=TREATED, size=36, opacity=1).encode(
        x=alt.X("estimate:Q"),
        tooltip=[alt.Tooltip("name:N", title="covariate"), alt.Tooltip("estimate:Q", format=".4g"),
                 alt.Tooltip("lo:Q", format=".4g", title="CI low"),
                 alt.Tooltip("hi:Q", format=".4g", title="CI high"), alt.Tooltip("p_text:N", title="p")])
    ptext = base.mark_text(align="right", baseline="middle", fontSize=9, color="#555555").encode(
        x=alt.value(WIDTH - 10), text="p_text:N")
    layer = alt.layer(zero, bars, dots, ptext, data=data).properties(width=WIDTH - 60, height=20)
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
                + (f"; joint test p {_p(joint) if _p(joint).startswith('<') else '= ' + _p(joint)}"
                   if joint is not None else "")]
    facet = facet.properties(title=_title(alt, "Covariate balance at the cutoff", subtitle))
    return _configure(facet, configure=configure)


# ---------------------------------------------------------------------------------------------
# Density of the score
# ---------------------------------------------------------------------------------------------
def density_chart(density, *, score: str | None = None, treated: str | None = None,
                  configure: bool = True):
    """Histogram of the score with the fitted density and its band on each side of the cutoff.

    Parameters
    ----------
    density : seamline DensityTest result (``design.density_test()``)
        ``histogram()`` (side, left, right, count, density) gives the bars, ``grid()`` (side, x,
        density, ci_low, ci_high) the fitted curves; ``statistic``, ``p_value`` and ``method`` go
        into the title.
    score, treated : str, optional
        Column name of the score for the axis title, and the treated side for the colours
        (defaults: the result's own ``score`` and ``treated`` if it has them).

    Returns
    -------
    altair.LayerChart
    """
    alt = _alt()
    score = score or getattr(density, "score", None) or "score"
    treated = treated or getattr(density, "treated", None) or "above"
    names = _side_names(treated)
    scale = _side_scale(alt, treated)
    color = alt.Color("side_name:N", scale=scale, legend=alt.Legend(title=None))
    hist = density.histogram()
    hist = _records(hist.assign(side_name=hist["side"].map(names))[
        ["side", "side_name", "left", "right", "count", "density"]])
    grid = density.grid()
    grid = _records(_finite(grid.assign(side_name=grid["side"].map(names)), ["x", "density"])[
        ["side", "side_name", "x", "density", "ci_low", "ci_high"]])
    cutoff = getattr(density, "cutoff", None)
    if cutoff is None:
        cutoff = _cutoff_from_bins(hist)
    dates = time_axes.scale_of(density)
    layers = [
        alt.Chart(hist).mark_rect(opacity=0.28, stroke="white", strokeWidth=0.5).encode(
            x=alt.X("left:Q", title=f"{score}", scale=alt.Scale(zero=False, nice=False)),
            x2="right:Q", y2=alt.datum(0), color=color,
            y=alt.Y("density:Q", title="density" if dates is None else f"density (per {dates.unit[:-1]})"),
            tooltip=[alt.Tooltip("left:Q", title="bin from"), alt.Tooltip("right:Q", title="bin to"),
                     alt.Tooltip("count:Q", title="observations")]),
    ]
    band = _finite(grid, ["ci_low", "ci_high"])
    if len(band):
        layers.append(alt.Chart(band).mark_area(opacity=0.2).encode(
            x="x:Q", y="ci_low:Q", y2="ci_high:Q", color=color, detail="side:N"))
    layers.append(alt.Chart(grid).mark_line(strokeWidth=2).encode(
        x="x:Q", y="density:Q", color=color, detail="side:N"))
    layers.append(_cutoff_rule(alt, float(cutoff)))
    method = getattr(density, "method", "")
    method_text = {"local-cdf": "local polynomial density test (Cattaneo, Jansson and Ma 2020)",
                   "binned": "binned log-difference density test (McCrary 2008)"}.get(method, "density test")
    stat = getattr(density, "statistic", float("nan"))
    pval = getattr(density, "p_value", float("nan"))
    p_txt = _p(pval)
    title = f"Density of {score}: T = {_stat(stat)}, p {p_txt if p_txt.startswith('<') else '= ' + p_txt}"
    subtitle = [method_text, f"bars: histogram; lines: fitted density with {_pct(_level(density))} band; "
                "a jump hints at sorting"]
    chart = alt.layer(*layers).properties(width=WIDTH, height=HEIGHT, title=_title(alt, title, subtitle))
    return _configure(time_axes.dated(chart, dates, alt), configure=configure)


# ---------------------------------------------------------------------------------------------
# Placebo cutoffs and donut
# ---------------------------------------------------------------------------------------------
def _estimate_path(alt, data: pd.DataFrame, x: str, x_title: str, color, y_title: str = "estimate"):
    ci = _finite(data, ["lo", "hi"])
    return [
        _zero_rule(alt, "y"),
        alt.Chart(ci).mark_rule(strokeWidth=1.4).encode(x=alt.X(f"{x}:Q"), y="lo:Q", y2="hi:Q",
                                                         color=color),
        alt.Chart(data).mark_circle(size=34, opacity=1).encode(
            x=alt.X(f"{x}:Q", title=x_title, scale=alt.Scale(zero=False, nice=True)),
            y=alt.Y("estimate:Q", title=y_title, scale=alt.Scale(zero=False)), color=color,
            tooltip=[alt.Tooltip(f"{x}:Q", format=".4g"), alt.Tooltip("estimate:Q", format=".4g"),
                     alt.Tooltip("lo:Q", format=".4g", title="CI low"),
                     alt.Tooltip("hi:Q", format=".4g", title="CI high")]),
    ]


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
    chart = alt.layer(*layers).properties(
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
                            alt.value(TREATED), f"jump in {outcome}" if outcome else "estimate")
    level = _level(donut, _level(fit))
    chart = alt.layer(*layers).properties(
        width=WIDTH, height=HEIGHT,
        title=_title(alt, "Donut: dropping observations nearest the cutoff",
                     [f"estimate and robust {_pct(level)} CI by radius; radius 0 is the full sample",
                      "stable estimates suggest no heaping or sorting right at the cutoff"]))
    return _configure(chart, configure=configure)


# ---------------------------------------------------------------------------------------------
# Dispatch from a board, and offline rendering
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


_VL_VERSION: str | None = None


def _vl_version() -> str | None:
    """The Vega-Lite version of the installed Altair schema, if vl-convert ships it."""
    global _VL_VERSION
    if _VL_VERSION is None:
        alt, vlc = _alt(), _vlc()
        major_minor = ".".join(alt.SCHEMA_VERSION.lstrip("v").split(".")[:2])
        _VL_VERSION = major_minor if major_minor in vlc.get_vegalite_versions() else ""
    return _VL_VERSION or None


_ID = re.compile(r'\bid="([^"]+)"')
_LONG_DECIMAL = re.compile(r"(\d\.\d\d)\d+")
# Geometry attributes only: text content (axis labels such as 0.025) must stay exactly as drawn.
_GEOMETRY = re.compile(r'(\s(?:d|transform|x|y|x1|x2|y1|y2|cx|cy|r|width|height|points)=")([^"]*)(")')


def _tidy_svg(svg: str) -> str:
    """Make ids unique to this drawing and trim geometry coordinates to two decimals.

    vl-convert numbers its clip paths ``clip1``, ``clip2``, ... in every SVG, so two SVGs inlined
    in one page would share (and mix up) their clip paths; a prefix taken from the content makes
    the ids distinct yet reproducible. Hundredths of a pixel are below what a screen shows, and
    trimming them shrinks the SVG (and a saved notebook) by about a third.
    """
    import hashlib

    svg = _GEOMETRY.sub(lambda m: m.group(1) + _LONG_DECIMAL.sub(r"\1", m.group(2)) + m.group(3), svg)
    # vl-convert's counter runs on across calls (clip1, then clip7, ...): number the ids afresh in
    # order of appearance first, so the same chart always gives the same SVG.
    ids = list(dict.fromkeys(_ID.findall(svg)))
    renamed = {old: f"@{i}@" for i, old in enumerate(ids)}
    svg = _rename_ids(svg, renamed)
    prefix = "sl" + hashlib.blake2b(svg.encode("utf-8"), digest_size=4).hexdigest()
    return _rename_ids(svg, {f"@{i}@": f"{prefix}-{i + 1}" for i in range(len(ids))})


def _rename_ids(svg: str, names: dict[str, str]) -> str:
    for old in sorted(names, key=len, reverse=True):
        new = names[old]
        svg = (svg.replace(f'id="{old}"', f'id="{new}"').replace(f"url(#{old})", f"url(#{new})")
               .replace(f'href="#{old}"', f'href="#{new}"'))
    return svg


def to_svg(chart) -> str:
    """Render a chart to an SVG string offline with vl-convert (no browser, no network).

    Element ids get a prefix derived from the drawing, so several SVGs can be inlined in one HTML
    page, and coordinates are kept to hundredths of a pixel.

    Parameters
    ----------
    chart : altair chart

    Returns
    -------
    str
        A standalone ``<svg>`` document.
    """
    vlc = _vlc()
    spec = chart.to_dict()
    version = _vl_version()
    svg = vlc.vegalite_to_svg(spec, vl_version=version) if version else vlc.vegalite_to_svg(spec)
    return _tidy_svg(svg)


def to_png(chart, scale: float = 2) -> bytes:
    """Render a chart to PNG bytes offline with vl-convert.

    Parameters
    ----------
    chart : altair chart
    scale : float, default 2
        Pixel density factor (2 gives a sharp image for a paper or a high-resolution screen).

    Returns
    -------
    bytes
    """
    vlc = _vlc()
    spec = chart.to_dict()
    version = _vl_version()
    if version:
        return vlc.vegalite_to_png(spec, scale=scale, vl_version=version)
    return vlc.vegalite_to_png(spec, scale=scale)


#: The MIME type of chart specs sent to the browser (JupyterLab's built-in Vega 5 renderer).
VEGA_LITE_MIME = "application/vnd.vegalite.v5+json"
_V5_SCHEMA = "https://vega.github.io/schema/vega-lite/v5.json"


def to_vega_lite(chart) -> dict:
    """A chart as a Vega-Lite specification with its summary data inline, for the browser.

    JupyterLab draws ``application/vnd.vegalite.v5+json`` with the renderer in its own bundle
    (no request leaves the machine); the spec declares the v5 schema that renderer reads. The
    builders only use marks and encodings both Vega-Lite 5 and 6 know (tested by compiling each
    chart with vl-convert's Vega-Lite 5).

    Parameters
    ----------
    chart : altair chart

    Returns
    -------
    dict
        JSON-ready; the data inside are binned or summary values, never the raw rows.
    """
    spec = chart.to_dict(validate=False)    # the builders are validated by the tests; saves ~40 ms a chart
    spec["$schema"] = _V5_SCHEMA
    return spec
