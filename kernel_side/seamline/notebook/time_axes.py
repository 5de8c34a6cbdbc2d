"""Dates on the score axis: what a chart of a date-score design shows instead of day counts.

A date score reaches the engine as the distance from the cutoff in a unit (days by default; see
``seamline.time_score``). The chart builders in ``charts_*.py`` draw every layer in that distance;
:func:`dated` then turns the score axis of a finished chart into a temporal axis: the distance
columns the x and x2 channels read become timestamps, the channels become temporal on a UTC scale
with ISO ticks ("2024-07-01", with hours and minutes when the data carry a time of day), and the
tooltips that showed a distance show the date. Durations (bandwidths, donut radii) stay numbers
but their titles carry the unit (:func:`length_text`, :func:`unit_title`).

Timestamps are sent as the wall-clock time of the score's own time zone written as UTC epoch
milliseconds, and the axis is a UTC scale: the reader sees the dates the data were recorded in,
whatever the time zone of the browser or of the machine that renders the SVG.

Altair is passed in by the caller (``charts_style._alt()``); this module imports only pandas and numpy.
"""
from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

__all__ = ["axis_format", "cutoff_text", "dated", "epoch_ms", "length_text", "scale_of", "unit_title"]

_DATE_SUFFIX = "__date"       # the tooltip column added beside each converted distance column


def scale_of(*objects) -> Any:
    """The first ``time_scale`` among ``objects`` (results, fits), or None for a numeric score."""
    for obj in objects:
        scale = getattr(obj, "time_scale", None) if obj is not None else None
        if scale is not None:
            return scale
    return None


def epoch_ms(scale, distances) -> np.ndarray:
    """Distances from the cutoff as UTC epoch milliseconds of their wall-clock times (NaN stays NaN)."""
    values = np.asarray(pd.to_numeric(pd.Series(distances), errors="coerce"), dtype=float)
    out = np.full(values.shape, np.nan)
    ok = np.isfinite(values)
    if ok.any():
        stamps = pd.DatetimeIndex(scale.to_time(values[ok]))
        if stamps.tz is not None:
            stamps = stamps.tz_localize(None)    # the wall-clock time where the data were recorded
        out[ok] = (stamps - pd.Timestamp("1970-01-01")) / pd.Timedelta(milliseconds=1)
    return out


def _labels(scale, distances) -> list[str]:
    return ["" if not np.isfinite(d) else scale.label(float(d))
            for d in np.asarray(pd.to_numeric(pd.Series(distances), errors="coerce"), dtype=float)]


def axis_format(scale) -> str:
    """The d3 time format of the ticks: ISO dates, with the time of day when it matters."""
    return "%Y-%m-%d %H:%M" if scale.with_time else "%Y-%m-%d"


def cutoff_text(scale, cutoff) -> str:
    """The cutoff as a title writes it: ``40`` for a number, ``2024-07-01`` for a date score."""
    if scale is None:
        try:
            return f"{float(cutoff):g}"
        except (TypeError, ValueError):
            return str(cutoff)
    return scale.label(float(cutoff))


def length_text(scale, value, number) -> str:
    """A bandwidth or radius for a title: ``number(value)``, plus the unit for a date score."""
    text = number(value)
    if scale is None:
        return text
    unit = scale.unit[:-1] if float(value) == 1 else scale.unit
    return f"{text} {unit}"


def unit_title(scale, numeric_title: str, what: str) -> str:
    """An axis title for a duration: ``numeric_title`` for a number, "``what`` (days)" for a date score."""
    return numeric_title if scale is None else f"{what} ({scale.unit})"


# ---------------------------------------------------------------------------------------------
# Rewriting a finished chart
# ---------------------------------------------------------------------------------------------
def _field(channel) -> str | None:
    """The data field a channel reads ("x" for ``alt.X("x:Q")``), or None (a value, a datum)."""
    if channel is None or not hasattr(channel, "to_dict"):
        return None
    try:
        spec = channel.to_dict(validate=False)
    except Exception:
        return None
    field = spec.get("field") if isinstance(spec, dict) else None
    return field if isinstance(field, str) else None


def _set(obj, name: str):
    """An Altair attribute, or None when it is Undefined."""
    value = getattr(obj, name, None)
    return None if value is None or type(value).__name__ == "UndefinedType" else value


def dated(chart, scale, alt, tooltip_fields: tuple[str, ...] = ()):
    """``chart`` with its score axis (x, x2) drawn as dates of ``scale``; the chart is not modified.

    Every sub-chart whose x channel reads a field of its own data frame gets that field (and its
    x2 field) as timestamps, a temporal x on a UTC scale with ISO ticks, and tooltips on those fields
    replaced by the date written out. ``tooltip_fields`` are further score columns (e.g. a bin's
    edges) whose tooltips show dates too. Layers that share a frame object share one converted copy.
    """
    if scale is None:
        return chart
    chart = chart.copy(deep=True)
    converted: dict[int, pd.DataFrame] = {}
    _rewrite(chart, scale, alt, converted, tuple(tooltip_fields))
    return chart


def _rewrite(chart, scale, alt, converted, extra=()) -> None:
    data = _set(chart, "data")
    for child in _set(chart, "layer") or ():
        if isinstance(data, pd.DataFrame) and _set(child, "data") is None:
            child.data = data        # a layer inherits its parent's frame: convert it as its own
        _rewrite(child, scale, alt, converted, extra)
    encoding = _set(chart, "encoding")
    if encoding is None or not isinstance(data, pd.DataFrame):
        return
    x = _set(encoding, "x")
    if _set(x, "type") == "temporal" or str(_set(x, "shorthand") or "").endswith(":T"):
        return                       # already dated
    fields = [f for f in (_field(x), _field(_set(encoding, "x2"))) if f and f in data.columns]
    if not fields:
        return
    frame = converted.get(id(data))
    if frame is None:
        frame = data.copy()
        for f in fields:
            frame[f + _DATE_SUFFIX] = _labels(scale, data[f])
            frame[f] = epoch_ms(scale, data[f])
        converted[id(data)] = frame
    else:
        for f in fields:
            if f + _DATE_SUFFIX not in frame.columns:
                frame[f + _DATE_SUFFIX] = _labels(scale, data[f])
                frame[f] = epoch_ms(scale, data[f])
    chart.data = frame
    spec = x.to_dict(validate=False)
    options = {"title": spec["title"]} if "title" in spec else {}
    # "nice" as the numeric axis had it (layers that did not say leave it to the shared scale)
    nice = {"nice": bool(spec["scale"]["nice"])} if "nice" in spec.get("scale", {}) else {}
    encoding.x = alt.X(f"{fields[0]}:T", scale=alt.Scale(type="utc", **nice),
                       axis=alt.Axis(format=axis_format(scale), labelOverlap=True, tickCount=5), **options)
    if len(fields) > 1:
        encoding.x2 = alt.X2(f"{fields[1]}:T")
    tooltips = _set(encoding, "tooltip")
    if isinstance(tooltips, (list, tuple)):
        shown = [f for f in extra if f in frame.columns and f not in fields]
        for f in shown:
            if f + _DATE_SUFFIX not in frame.columns:
                frame[f + _DATE_SUFFIX] = _labels(scale, data[f])
        encoding.tooltip = [_date_tooltip(t, [*fields, *shown], alt) for t in tooltips]


def _date_tooltip(tooltip, fields, alt):
    field = _field(tooltip)
    if field not in fields:
        return tooltip
    spec = tooltip.to_dict(validate=False)
    return alt.Tooltip(f"{field}{_DATE_SUFFIX}:N", title=spec.get("title", field))
