"""The board view's export buttons: one bar per tab, with a row per exportable table or chart, and
what an export produced (its text, or a download link carrying the file in a data URI).

``ViewExports`` is a base class of ``BoardView`` (panels.py); the exports themselves are the
board's (``board.export``, ``board.methods_paragraph``). A failed export is shown in the tab.

CSS classes: ``seamline-export`` (a tab's bar), ``seamline-export-button`` and
``seamline-export-<format>`` (each button), ``seamline-export-text``, ``seamline-download``.
"""
from __future__ import annotations

import base64
import html
import os
from typing import Any

import ipywidgets as widgets

from . import charts
from .static import PANEL_EXPORTS, error_html

_FORMATS = (("LaTeX", "latex"), ("Markdown", "markdown"), ("CSV", "csv"), ("SVG", "svg"),
            ("PNG", "png"))
_EXTENSIONS = {"latex": "tex", "markdown": "md", "csv": "csv", "svg": "svg", "png": "png",
               "html": "html", "text": "txt"}
_MIME = {"latex": "text/x-tex", "markdown": "text/markdown", "csv": "text/csv",
         "svg": "image/svg+xml", "png": "image/png", "html": "text/html", "text": "text/plain"}
_PNG_MAGIC = b"\x89PNG\r\n\x1a\n"


def _safe_name(text: str) -> str:
    keep = "".join(ch if ch.isalnum() or ch in "-_" else "_" for ch in text)
    return keep.strip("_") or "seamline"


def _png_bytes(value: Any) -> bytes:
    """The PNG an export returned: raw bytes, base64 text, or a path to the written file."""
    if isinstance(value, (bytes, bytearray)):
        return bytes(value)
    text = str(value)
    if os.path.isfile(text):
        with open(text, "rb") as handle:
            return handle.read()
    data = base64.b64decode(text.split(",", 1)[-1], validate=False)
    if not data.startswith(_PNG_MAGIC):
        raise ValueError("the PNG export returned neither PNG bytes, base64 text nor a file path")
    return data


def download_link(data: bytes | str, filename: str, fmt: str) -> str:
    """An ``<a download>`` link carrying the file in a data URI (works without a server round trip).

    Parameters
    ----------
    data : bytes or str
        File content (text is encoded as UTF-8).
    filename : str
        Suggested file name (shown escaped).
    fmt : str
        Export format, which sets the MIME type.

    Returns
    -------
    str
    """
    raw = data.encode("utf-8") if isinstance(data, str) else bytes(data)
    mime = _MIME.get(fmt, "application/octet-stream")
    uri = f"data:{mime};base64,{base64.b64encode(raw).decode('ascii')}"
    name = html.escape(filename, quote=True)
    return (f'<a class="seamline-download" download="{name}" href="{uri}" '
            f'style="font-size:12px">download {name}</a> '
            f'<span style="font-size:11px;color:#777">({len(raw):,} bytes)</span>')


class ViewExports:
    """The export bars of a ``BoardView`` (which sets ``board``, ``_export_bars``, ``_export_rows``
    and the shared button layout and style)."""

    def _export_bar(self, panel: str) -> None:
        """Fill a tab's export bar (once, when the tab is first rendered)."""
        bar, out = self._export_bars[panel]
        if bar.children:
            return
        rows = []
        for what in PANEL_EXPORTS[panel]:
            label = widgets.HTML(f'<span style="font-size:12px;color:#555">Export {html.escape(what.replace("_", " "))}:</span>')
            buttons = [label]
            for title, fmt in _FORMATS if what in charts.CHART_NAMES else _FORMATS[:3]:   # tables only
                button = widgets.Button(description=title, layout=self._button_layout, style=self._button_style,
                                        tooltip=f"{title} of the {what.replace('_', ' ')} "
                                                f"{'chart' if fmt in ('svg', 'png') else 'table'}")
                button.add_class("seamline-export-button")
                button.add_class(f"seamline-export-{fmt}")
                button.on_click(lambda _b, w=what, f=fmt: self._export(w, f, out))
                buttons.append(button)
            row = widgets.HBox(buttons, layout=widgets.Layout(align_items="center", flex_flow="row wrap"))
            self._export_rows[what] = row
            rows.append(row)
        bar.children = rows

    def _export(self, what: str, fmt: str, out: widgets.VBox) -> None:
        """Run ``board.export(what, fmt)`` and show the text and a download link (or the error)."""
        name = _safe_name(f"{getattr(self.board, 'name', 'seamline')}_{what}")
        filename = f"{name}.{_EXTENSIONS.get(fmt, 'txt')}"
        try:
            if what == "methods":
                paragraph = getattr(self.board, "methods_paragraph", None)
                text = paragraph() if callable(paragraph) else self.board.export("methods", "text")
            else:
                text = self.board.export(what, fmt)
            if fmt == "png":
                data = _png_bytes(text)
                shown = [widgets.HTML(download_link(data, filename, fmt))]
            elif fmt == "svg":
                shown = [widgets.HTML(download_link(str(text), filename, fmt))]
            else:
                area = widgets.Textarea(value=str(text), layout=widgets.Layout(width="100%", height="160px"))
                area.add_class("seamline-export-text")
                shown = [area, widgets.HTML(download_link(str(text), filename, fmt))]
        except Exception as exc:  # noqa: BLE001
            shown = [widgets.HTML(error_html(f"{type(exc).__name__}: {exc}",
                                             title=f"Export of {what} as {fmt} failed"))]
        close = widgets.Button(description="close", layout=widgets.Layout(width="auto", height="24px"))
        close.on_click(lambda _b: setattr(out, "children", ()))
        out.children = (*shown, close)
