"""Rendering a chart: SVG and PNG drawn offline by vl-convert (exports and the static copy), and
the Vega-Lite spec with its summary data inline that the live view sends to the browser.
"""
from __future__ import annotations

import re

from .charts_style import _alt

__all__ = ["VEGA_LITE_MIME", "to_png", "to_svg", "to_vega_lite"]


def _vlc():
    try:
        import vl_convert
    except ImportError as exc:  # pragma: no cover - exercised only without the extra
        raise ImportError(
            "exporting charts needs the `vl-convert-python` package; install it with "
            "`pip install vl-convert-python` (a dependency of seamline)."
        ) from exc
    return vl_convert


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
        Its pandas frames are replaced in place by the records Altair would make of them (the same
        spec, built faster; ``_inline_frames``): pass a chart built for this call.

    Returns
    -------
    dict
        JSON-ready; the data inside are binned or summary values, never the raw rows.
    """
    _inline_frames(chart)
    spec = chart.to_dict(validate=False)    # the builders are validated by the tests; saves ~40 ms a chart
    spec["$schema"] = _V5_SCHEMA
    return spec


def _inline_frames(chart) -> None:
    """Give every part of ``chart`` (built for this call: it is changed in place) the data
    ``{"values": records}`` Altair would make of its pandas frame, read straight off the columns.
    Altair's general sanitizer costs about 5 ms a frame, a large share of a live chart. Frames
    with dtypes beyond numbers, booleans and text (dates, categories) are left to Altair; the
    spec is the same either way (tested)."""
    import pandas as pd
    data = getattr(chart, "data", None)
    if isinstance(data, pd.DataFrame):
        values = _records(data)
        if values is not None:
            chart.data = {"values": values}
    for name in ("layer", "hconcat", "vconcat", "concat"):
        for part in getattr(chart, name, None) or ():
            if not isinstance(part, (str, bytes)):
                _inline_frames(part)
    spec = getattr(chart, "spec", None)
    if spec is not None and not isinstance(spec, (str, bytes, dict)):
        _inline_frames(spec)


def _records(frame) -> list[dict] | None:
    """The frame's rows as JSON-ready dicts, as Altair's sanitizer makes them (non-finite floats
    and missing values as None, numpy scalars as Python ones), or None for other dtypes."""
    import numpy as np
    import pandas as pd
    if isinstance(frame.columns, pd.MultiIndex) or not all(isinstance(c, str) for c in frame.columns):
        return None
    columns = []
    for name in frame.columns:
        column = frame[name]
        kind = column.dtype.kind if isinstance(column.dtype, np.dtype) else None
        if kind == "f":
            values = column.to_numpy()
            items = values.tolist()
            for i in np.flatnonzero(~np.isfinite(values)).tolist():
                items[i] = None
        elif kind in ("i", "u", "b"):
            items = column.to_numpy().tolist()
        elif kind == "O" or isinstance(column.dtype, pd.StringDtype):
            items = column.astype(object).tolist()
            if not all(v is None or v is pd.NA or isinstance(v, (str, bool, int, float)) for v in items):
                return None       # arrays, dates or other objects: Altair's own rules
            items = [None if v is None or v is pd.NA or (isinstance(v, float) and v != v) else v for v in items]
        else:
            return None
        columns.append(items)
    names = list(frame.columns)
    return [dict(zip(names, row)) for row in zip(*columns)]
