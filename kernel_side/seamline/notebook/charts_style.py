"""The look every board chart shares: size, palette, style, titles, and the small layers and
formatting helpers the builders (``charts_score``, ``charts_robustness``, ``charts_designs``,
``charts_inference``) draw with.

Altair is imported inside the functions (``_alt``), so importing this module pulls in neither Altair
nor vl-convert.
"""
from __future__ import annotations

import functools
import math
from typing import Any

import numpy as np
import pandas as pd

from ..errors import shown

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


def _p_is(value: Any) -> str:
    """A p-value as titles write it: "p = 0.042", "p < 0.001", "p = n/a"."""
    p = _p(value)
    return f"p {p}" if p.startswith("<") else f"p = {p}"


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
    """The chart, which its builder has just made, with seamline's look (fonts, axes, legend) set
    in place. The look is one ``Config``, built once: Altair's chained ``configure_*`` calls, and
    even a shallow copy of a layered chart, copy every layer (about a third of a live chart's
    cost). Sharing it is safe because Altair's ``configure_*`` methods copy the config before
    they change it."""
    if not configure:
        return chart
    chart.config = _look()
    return chart


@functools.lru_cache(maxsize=1)
def _look():
    alt = _alt()
    return (
        alt.Chart().configure(font=FONT, background="white", padding=6)
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
    ).config


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
    ).encode(x=alt.X("c:Q"), y=alt.YValue(0), text=alt.Text("label:N"))
    return rule + text


def _zero_rule(alt, axis: str = "y"):
    frame = pd.DataFrame({"zero": [0.0]})
    enc = {axis: alt.X("zero:Q") if axis == "x" else alt.Y("zero:Q")}
    return alt.Chart(frame).mark_rule(color=MUTED, strokeWidth=1).encode(**enc)


def _estimate_path(alt, data: pd.DataFrame, x: str, x_title: str, color, y_title: str = "estimate"):
    """Estimates with their intervals along ``x`` over a zero line (placebo, donut, windows)."""
    ci = _finite(data, ["lo", "hi"])
    return [
        _zero_rule(alt, "y"),
        alt.Chart(ci).mark_rule(strokeWidth=1.4).encode(x=alt.X(f"{x}:Q"), y=alt.Y("lo:Q"), y2=alt.Y2("hi:Q"),
                                                         color=color),
        alt.Chart(data).mark_circle(size=34, opacity=1).encode(
            x=alt.X(f"{x}:Q", title=x_title, scale=alt.Scale(zero=False, nice=True)),
            y=alt.Y("estimate:Q", title=y_title, scale=alt.Scale(zero=False)), color=color,
            tooltip=[alt.Tooltip(f"{x}:Q", format=".4g"), alt.Tooltip("estimate:Q", format=".4g"),
                     alt.Tooltip("lo:Q", format=".4g", title="CI low"),
                     alt.Tooltip("hi:Q", format=".4g", title="CI high")]),
    ]
