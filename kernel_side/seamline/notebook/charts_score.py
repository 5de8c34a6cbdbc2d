"""Charts along the score: the cutoff plot (binned means and local polynomial fits), the first
stage of a fuzzy design, and the density of the score.

Each ends with ``time_axes.dated``, so a date score is drawn with dates on the x axis.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from . import time_axes
from .charts_style import (HEIGHT, MUTED, WIDTH, WINDOW, _alt, _attr, _configure, _cutoff_rule, _finite,
                           _level, _p_is, _pct, _records, _side_names, _side_scale, _stat, _title, number)

__all__ = ["density_chart", "estimate_chart", "first_stage_chart"]


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
        layers.append(alt.Chart(window).mark_rect(color=WINDOW).encode(x=alt.X("lo:Q"), x2=alt.X2("hi:Q")))
    if curve is not None and len(curve):
        band = curve.assign(side_name=curve["side"].map(names))
        band = _records(_finite(band, ["x", "fit"])[["side", "side_name", "x", "fit", "ci_low", "ci_high"]])
        band_ok = _finite(band, ["ci_low", "ci_high"])
        layers.append(alt.Chart(band_ok).mark_area(opacity=0.18, clip=True).encode(
            x=alt.X("x:Q"), y=alt.Y("ci_low:Q"), y2=alt.Y2("ci_high:Q"), color=color, detail=alt.Detail("side:N")))
    dots_ci = _finite(dots, ["ci_low", "ci_high"])
    layers.append(alt.Chart(dots_ci).mark_rule(strokeWidth=1, opacity=0.55, clip=True).encode(
        x=alt.X("x:Q"), y=alt.Y("ci_low:Q"), y2=alt.Y2("ci_high:Q"), color=color))
    layers.append(alt.Chart(dots).mark_circle(size=22, opacity=0.9).encode(
        x=x_enc, y=y_enc, color=color,
        tooltip=[alt.Tooltip("left:Q", title="bin from"), alt.Tooltip("right:Q", title="bin to"),
                 alt.Tooltip("count:Q", title="observations"), alt.Tooltip("mean:Q", format=".4g")]))
    if curve is not None and len(curve):
        layers.append(alt.Chart(band).mark_line(strokeWidth=2).encode(
            x=alt.X("x:Q"), y=alt.Y("fit:Q"), color=color, detail=alt.Detail("side:N")))
    notes = []
    if global_polynomial:
        frame = bins.global_polynomial() if hasattr(bins, "global_polynomial") else None
        if frame is not None and len(frame):
            value = "fit" if "fit" in frame.columns else [c for c in frame.columns if c not in ("side", "x")][0]
            guide = _records(_finite(frame.rename(columns={value: "fit"}), ["x", "fit"])[["side", "x", "fit"]])
            layers.append(alt.Chart(guide).mark_line(strokeWidth=1, strokeDash=[2, 2], color=MUTED, clip=True).encode(
                x=alt.X("x:Q"), y=alt.Y("fit:Q"), detail=alt.Detail("side:N")))
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
    chart = alt.layer(*layers, width=WIDTH, height=HEIGHT, title=_title(alt, title, subtitle))
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
            x2=alt.X2("right:Q"), y2=alt.Y2Datum(0), color=color,
            y=alt.Y("density:Q", title="density" if dates is None else f"density (per {dates.unit[:-1]})"),
            tooltip=[alt.Tooltip("left:Q", title="bin from"), alt.Tooltip("right:Q", title="bin to"),
                     alt.Tooltip("count:Q", title="observations")]),
    ]
    band = _finite(grid, ["ci_low", "ci_high"])
    if len(band):
        layers.append(alt.Chart(band).mark_area(opacity=0.2).encode(
            x=alt.X("x:Q"), y=alt.Y("ci_low:Q"), y2=alt.Y2("ci_high:Q"), color=color, detail=alt.Detail("side:N")))
    layers.append(alt.Chart(grid).mark_line(strokeWidth=2).encode(
        x=alt.X("x:Q"), y=alt.Y("density:Q"), color=color, detail=alt.Detail("side:N")))
    layers.append(_cutoff_rule(alt, float(cutoff)))
    method = getattr(density, "method", "")
    method_text = {"local-cdf": "local polynomial density test (Cattaneo, Jansson and Ma 2020)",
                   "binned": "binned log-difference density test (McCrary 2008)"}.get(method, "density test")
    stat = getattr(density, "statistic", float("nan"))
    pval = getattr(density, "p_value", float("nan"))
    title = f"Density of {score}: T = {_stat(stat)}, {_p_is(pval)}"
    subtitle = [method_text, f"bars: histogram; lines: fitted density with {_pct(_level(density))} band; "
                "a jump hints at sorting"]
    chart = alt.layer(*layers, width=WIDTH, height=HEIGHT, title=_title(alt, title, subtitle))
    return _configure(time_axes.dated(chart, dates, alt), configure=configure)
