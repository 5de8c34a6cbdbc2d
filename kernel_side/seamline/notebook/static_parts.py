"""The building blocks of a board's HTML: inline styles, defensive reads of a board (a failed or
missing result must not break the page), escaped fragments (error, information and warning
boxes, result tables, figures, the pending notice) and number formats.

``static`` builds the header and the panels from these (and re-exports them, so
``panels_designs`` and ``panels_inference`` reach them through ``static``). Imports neither
ipywidgets nor IPython.
"""
from __future__ import annotations

import html
from collections.abc import Callable, Iterable, Mapping
from typing import Any

import pandas as pd

from . import charts
from .identity_memo import IdentityMemo

_esc = html.escape
_BOX = ("font-family:var(--jp-ui-font-family, Helvetica, Arial, sans-serif);font-size:13px;"
        "line-height:1.4;color:var(--jp-ui-font-color1, #222)")
_ROW = "display:flex;flex-wrap:wrap;gap:14px 22px;align-items:flex-start"
_TABLES = "flex:1 1 380px;min-width:0;max-width:100%;overflow-x:auto"
_NOTE = "color:var(--jp-ui-font-color2, #555);font-size:12px;margin:2px 0 8px 0;max-width:58em"
_ERROR = ("border-left:3px solid #b3261e;background:#fbeeed;color:#5c1410;padding:6px 10px;"
          "margin:4px 0;font-size:12px;white-space:pre-wrap")
_WARN = ("border-left:3px solid #b07a2a;background:#fbf5ea;color:#4a3410;padding:4px 10px;"
         "margin:4px 0;font-size:12px")
_INFO = ("border-left:3px solid #8c8c8c;background:#f4f4f4;color:#333;padding:6px 10px;"
         "margin:4px 0;font-size:12px")
_PENDING = ("border-left:3px solid #1d6470;background:#eef5f6;color:#1d3b40;padding:4px 10px;"
            "margin:4px 0;font-size:12px")
_DIM = "opacity:0.45"


# ---- reading a board defensively ------------------------------------------------------------
def _results(board) -> Mapping[str, Any]:
    results = getattr(board, "results", None)
    return results if isinstance(results, Mapping) else {}


def _errors(board) -> Mapping[str, str]:
    errors = getattr(board, "errors", None)
    return errors if isinstance(errors, Mapping) else {}


def _fit(board):
    fit = _results(board).get("fit")
    return None if charts.not_applicable_reason(fit) is not None else fit


def _pending(board) -> frozenset:
    """The results of a board (state) that do not yet belong to its current inputs."""
    pending = getattr(board, "pending", None)
    return frozenset(pending) if pending else frozenset()


# ---- escaped fragments ----------------------------------------------------------------------
def error_html(message: str, *, title: str = "This panel could not be computed") -> str:
    """An error box (class ``seamline-error``) with the message escaped."""
    return (f'<div class="seamline-error" style="{_ERROR}"><b>{_esc(title)}.</b> '
            f"{_esc(str(message))}</div>")


def _info_html(message: str) -> str:
    return f'<div class="seamline-info" style="{_INFO}">{_esc(message)}</div>'


def _warnings_html(warnings: Iterable[str]) -> str:
    items = [w for w in dict.fromkeys(str(w) for w in warnings if w)]
    if not items:
        return ""
    body = "".join(f"<li>{_esc(w)}</li>" for w in items)
    return (f'<div class="seamline-warnings" style="{_WARN}"><b>Check:</b>'
            f'<ul style="margin:2px 0 0 0;padding-left:18px">{body}</ul></div>')


def _table_html(obj, title: str = "") -> str:
    """HTML of a result table through the result's own (escaping) renderer."""
    if obj is None:
        return ""
    if isinstance(obj, pd.DataFrame):   # a plain frame (the bandwidth rules): reader labels too
        from ..export.labels import labelled_model
        from ..export.render import to_html
        return to_html(labelled_model(obj, title=title))
    render = getattr(obj, "_repr_html_", None)
    if render is None:
        return f"<pre>{_esc(str(obj))}</pre>"
    return memo_html("table", (obj,), render)


_MEMO_SIZE = 64
_MEMO = IdentityMemo(_MEMO_SIZE)


def memo_html(tag: str, results: tuple, render: Callable[[], str]) -> str:
    """HTML that depends on nothing but ``results``, kept by their identity: a live view
    re-renders a panel each time one of its results arrives, and the tables of the results that
    did not change are read from here (about 10 ms a render on the Estimate tab)."""
    return _MEMO.get(tag, results, render)


def _figure(svg: str) -> str:
    # The SVG keeps its own size on a wide page and shrinks with a narrow one.
    svg = svg.replace("<svg ", '<svg style="max-width:100%;height:auto" ', 1)
    return f'<div class="seamline-chart">{svg}</div>'


def pending_note(what: str) -> str:
    """The notice a panel shows while its result is being recomputed for the new inputs."""
    return (f'<div class="seamline-pending" style="{_PENDING}">Updating {_esc(what)} for the current settings; '
            "the numbers below (dimmed) belong to the previous ones.</div>")


# ---- number formats -------------------------------------------------------------------------
def _number(value) -> str:
    return charts.number(value)


def _count(value) -> str:
    try:
        return f"{int(value):,}"
    except (TypeError, ValueError):
        return "n/a"


def _p_text(value) -> str:
    """A p-value in the header's prose: "p = 0.042", "p < 0.001" or "p n/a" (the charts' formats)."""
    return "p n/a" if charts._p(value) == "n/a" else charts._p_is(value)
