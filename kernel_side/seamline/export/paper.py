"""The publication table: several estimates side by side, one column each, as a paper shows them.

``paper_table(items)`` takes fits, boards (anything whose ``.fit`` holds a fit) and bias-aware
results, reads their numbers into a :class:`PaperTable` and renders it as LaTeX (booktabs),
Markdown, HTML, Word (python-docx, imported on first use) or CSV. Items are read by their
attributes, never by their class, so this module imports no notebook code.

Every shown number goes through ``table_model.format_number`` with the table's decimals, the
formatting the other exports use, so a number here reads the same as in a result's own table.
"""
from __future__ import annotations

import csv
import html
import io
import math
import numbers
import os
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd

from ..errors import SeamlineError, shown
from ..results.base import CAUTION
from .labels import ROW_LABELS, interval_label
from .render import latex_escape, markdown_escape
from .table_model import format_number

__all__ = ["PaperTable", "paper_table", "ROWS"]

#: Row keys in the order they are shown; ``rows=`` picks and orders a subset.
ROWS: tuple[str, ...] = ("estimate", "robust_ci", "robust_p_value", "bias_aware_ci", "max_bias", "bandwidth",
                         "bandwidth_below", "bandwidth_above", "kernel", "degree", "n_below", "n_above",
                         "clusters", "first_stage", "first_stage_f")
# Rows printed beneath another row (standard errors in parentheses), not selectable on their own.
_BENEATH = {"estimate": "std_error", "first_stage": "first_stage_std_error"}
_CITATIONS = {
    "robust_ci": "Robust CI: robust bias-corrected confidence interval (Calonico, Cattaneo and Titiunik 2014).",
    "bias_aware_ci": ("Bias-aware CI: fixed-length interval valid for any function with second derivative "
                      "bounded by the stated smoothness (Armstrong and Kolesár 2020)."),
}

class PaperTableError(SeamlineError):
    """An item or option of ``paper_table`` cannot be used."""


@dataclass(frozen=True)
class _Row:
    key: str
    label: str
    kind: str                       # "number", "beneath", "interval", "count", "text"
    values: tuple[Any, ...]         # one raw value per column; None where it does not apply


@dataclass(frozen=True)
class PaperTable:
    """A publication table: one column per item, rows of estimates and specification.

    Build it with :func:`paper_table`. ``cells()`` gives the grid every renderer shows;
    ``table()`` the raw numbers (rows by key) for code.

    Attributes
    ----------
    columns : tuple of str
        Column headings.
    outcomes : tuple of str
        The outcome of each column (the first body row).
    rows : tuple
        Body rows (key, label, kind, raw values).
    decimals : int
        Digits after the decimal point for real numbers.
    notes : tuple of str
        Lines printed under the table.
    title : str
        Caption ("" for none).
    """

    columns: tuple[str, ...]
    outcomes: tuple[str, ...]
    rows: tuple[_Row, ...]
    decimals: int
    notes: tuple[str, ...]
    title: str = ""

    # ---- the grid -----------------------------------------------------------------------
    def _show(self, row: _Row, value: Any) -> str:
        if value is None or (isinstance(value, float) and math.isnan(value)):
            return ""
        if row.kind == "text":
            return str(value)
        if row.kind == "count":
            return format_number(int(value), self.decimals)
        if row.kind == "interval":
            return format_number(tuple(float(v) for v in value), self.decimals)
        text = format_number(float(value), self.decimals)
        return f"({text})" if row.kind == "beneath" else text

    def header(self) -> list[str]:
        """The heading row: an empty corner, then one heading per column."""
        return ["", *self.columns]

    def cells(self) -> list[list[str]]:
        """The body as shown: the outcome row, then one list of texts per row (label first)."""
        body = [["Outcome", *self.outcomes]]
        body += [[row.label, *(self._show(row, v) for v in row.values)] for row in self.rows]
        return body

    def table(self) -> pd.DataFrame:
        """Raw values for code: index = row keys, one column per heading (intervals as tuples)."""
        data = {"outcome": list(self.outcomes)}
        data.update({row.key: list(row.values) for row in self.rows})
        return pd.DataFrame(data, index=list(self.columns)).T

    # ---- renderers ------------------------------------------------------------------------
    def to_latex(self, label: str | None = None) -> str:
        """A booktabs ``table`` float with the notes under the tabular.

        Needs ``\\usepackage{booktabs}``. Minus signs are typeset as ``$-$``; all text is escaped.
        """
        def cell(text: str, numeric: bool) -> str:
            return latex_escape(text).replace("-", "$-$") if numeric else latex_escape(text)

        lines = [r"\begin{table}[htbp]", r"\centering"]
        if self.title:
            lines.append(rf"\caption{{{latex_escape(self.title)}}}")
        if label:
            lines.append(rf"\label{{{latex_escape(label)}}}")
        lines += [rf"\begin{{tabular}}{{l{'c' * len(self.columns)}}}", r"\toprule",
                  " & ".join(latex_escape(h) for h in self.header()) + r" \\", r"\midrule"]
        for i, row in enumerate(self.cells()):
            numeric = i > 0 and self.rows[i - 1].kind != "text"
            lines.append(" & ".join([latex_escape(row[0]), *(cell(c, numeric) for c in row[1:])]) + r" \\")
            if i == 0:
                lines.append(r"\midrule")
        lines += [r"\bottomrule", r"\end{tabular}"]
        if self.notes:
            lines.append(r"\par\smallskip{\footnotesize\raggedright")
            lines += [latex_escape(n) + r"\par" for n in self.notes]
            lines.append("}")
        lines.append(r"\end{table}")
        return "\n".join(lines) + "\n"

    def to_markdown(self) -> str:
        """A GitHub pipe table with the title above and the notes below."""
        out = [f"**{markdown_escape(self.title)}**", ""] if self.title else []
        out.append("| " + " | ".join(markdown_escape(h) for h in self.header()) + " |")
        out.append("| :--- | " + " | ".join(":---:" for _ in self.columns) + " |")
        for i, row in enumerate(self.cells()):
            # Numbers (digits, ".", "-", "[", "]", "(", ")", ", ") cannot start Markdown syntax on
            # their own, so they stay unescaped and readable in the source; text is escaped.
            numeric = i > 0 and self.rows[i - 1].kind != "text"
            out.append("| " + " | ".join([markdown_escape(row[0]),
                                          *(c if numeric else markdown_escape(c) for c in row[1:])]) + " |")
        for note in self.notes:
            out += ["", markdown_escape(note)]
        return "\n".join(out) + "\n"

    def to_html(self) -> str:
        """A self-contained ``<table class="seamline-paper-table">`` (inline styles, text escaped)."""
        esc = html.escape
        rule = "border-bottom:1px solid currentColor"
        pad = "padding:0.2em 0.7em"
        out = ['<table class="seamline-paper-table" style="border-collapse:collapse;'
               'border-top:2px solid currentColor;border-bottom:2px solid currentColor;margin:0.5em 0">']
        if self.title:
            out.append(f'<caption style="caption-side:top;text-align:left;font-weight:bold">{esc(self.title)}'
                       "</caption>")
        head = "".join(f'<th style="{pad};{rule};text-align:{"left" if j == 0 else "center"}">{esc(h)}</th>'
                       for j, h in enumerate(self.header()))
        out.append(f"<thead><tr>{head}</tr></thead><tbody>")
        for i, row in enumerate(self.cells()):
            style = f"{pad};{rule}" if i == 0 else pad
            tds = "".join(f'<td style="{style};text-align:{"left" if j == 0 else "center"}">{esc(c)}</td>'
                          for j, c in enumerate(row))
            out.append(f"<tr>{tds}</tr>")
        out.append("</tbody>")
        if self.notes:
            span = len(self.columns) + 1
            out.append("<tfoot>" + "".join(f'<tr><td colspan="{span}" style="font-size:85%;{pad}">{esc(n)}</td>'
                                           "</tr>" for n in self.notes) + "</tfoot>")
        out.append("</table>")
        return "\n".join(out) + "\n"

    def to_csv(self) -> str:
        """CSV at full precision: a label column and one column per item; intervals as two rows
        ("... (low)", "... (high)") and standard errors on their own "Std. error" row, so the file
        loads as numbers. Title and notes are left out."""
        buffer = io.StringIO()
        writer = csv.writer(buffer, lineterminator="\n")
        writer.writerow(["", *self.columns])
        writer.writerow(["Outcome", *self.outcomes])

        def raw(value: Any) -> str:
            if value is None or (isinstance(value, float) and math.isnan(value)):
                return ""
            if isinstance(value, numbers.Integral) or isinstance(value, str):
                return str(value)
            return repr(float(value))

        for row in self.rows:
            if row.kind == "interval":
                for end, name in ((0, "low"), (1, "high")):
                    writer.writerow([f"{row.label} ({name})",
                                     *(raw(None if v is None else v[end]) for v in row.values)])
                continue
            label = row.label or ("First-stage std. error" if row.key.startswith("first_stage") else "Std. error")
            writer.writerow([label, *(raw(v) for v in row.values)])
        return buffer.getvalue()

    def to_docx(self, path: str | os.PathLike[str]) -> Path:
        """Write the table to a Word file (python-docx): title above, rules like booktabs, notes below.

        Parameters
        ----------
        path : str or path-like
            The ``.docx`` file to write (replaced if it exists).

        Returns
        -------
        pathlib.Path

        Raises
        ------
        ImportError
            When python-docx is not installed (``pip install python-docx``).
        """
        try:
            import docx
            from docx.enum.text import WD_ALIGN_PARAGRAPH
            from docx.oxml import OxmlElement
            from docx.oxml.ns import qn
            from docx.shared import Pt
        except ImportError as exc:   # pragma: no cover - a core dependency
            raise ImportError("Writing Word files needs python-docx: `pip install python-docx`.") from exc

        def rule(cell, edge: str, size: int) -> None:
            borders = cell._tc.get_or_add_tcPr().first_child_found_in("w:tcBorders")
            if borders is None:
                borders = OxmlElement("w:tcBorders")
                cell._tc.get_or_add_tcPr().append(borders)
            line = OxmlElement(f"w:{edge}")
            line.set(qn("w:val"), "single")
            line.set(qn("w:sz"), str(size))
            borders.append(line)

        document = docx.Document()
        if self.title:
            document.add_paragraph(self.title).runs[0].bold = True
        grid = [self.header(), *self.cells()]
        table = document.add_table(rows=len(grid), cols=len(grid[0]))
        for i, row in enumerate(grid):
            for j, text in enumerate(row):
                cell = table.cell(i, j)
                cell.text = text
                if j > 0:
                    cell.paragraphs[0].alignment = WD_ALIGN_PARAGRAPH.CENTER
                if i == 0:
                    rule(cell, "top", 12)
                    rule(cell, "bottom", 6)
                if i == 1:
                    rule(cell, "bottom", 4)
                if i == len(grid) - 1:
                    rule(cell, "bottom", 12)
        for note in self.notes:
            run = document.add_paragraph().add_run(note)
            run.font.size = Pt(8)
        target = Path(path)
        document.save(str(target))
        return target

    def _repr_html_(self) -> str:
        return self.to_html()

    def __str__(self) -> str:
        return self.to_markdown()


# ---- reading the items ---------------------------------------------------------------------------
def _headline(item: Any, position: int) -> Any:
    """The fit or bias-aware result an item stands for (a board stands for its headline fit)."""
    if hasattr(item, "estimate"):
        return item
    if hasattr(item, "fit"):
        fit = item.fit
        if fit is None or not hasattr(fit, "estimate"):
            name = getattr(item, "name", type(item).__name__)
            reason = dict(getattr(item, "errors", None) or {}).get("fit", "it has no current fit")
            raise PaperTableError(f"`items[{position}]` must have a current estimate; got board {shown(name)}, "
                                  f"whose fit is missing: {reason}. Fix the board's error or refresh it first.")
        return fit
    raise PaperTableError(f"`items[{position}]` must be a fit, a board or a bias-aware result; got "
                          f"{shown(item)}. Pass e.g. design.fit() or a board.")


def _pair(value: Any) -> tuple[float, float] | None:
    if value is None:
        return None
    if isinstance(value, numbers.Real):
        return (float(value), float(value))
    below, above = value
    return (float(below), float(above))


def _read(item: Any) -> dict[str, Any]:
    """The numbers of one column, by row key (None where a row does not apply)."""
    bias_aware = hasattr(item, "max_bias") and not hasattr(item, "robust_conf_int")
    h = _pair(getattr(item, "bandwidth", None))
    n = getattr(item, "n_used", None)
    first = getattr(item, "first_stage", None)
    fit_like = not bias_aware
    values = {
        "estimate": float(item.estimate),
        "std_error": _float(getattr(item, "std_error", None)),
        "robust_ci": tuple(item.robust_conf_int) if fit_like and hasattr(item, "robust_conf_int") else None,
        "robust_p_value": _float(getattr(item, "robust_p_value", None)) if fit_like else None,
        "bias_aware_ci": tuple(item.conf_int) if bias_aware else None,
        "max_bias": _float(getattr(item, "max_bias", None)) if bias_aware else None,
        "bandwidth": h,
        "kernel": getattr(item, "kernel", None),
        "degree": getattr(item, "degree", None),
        "n_below": None if n is None else int(n[0]),
        "n_above": None if n is None else int(n[1]),
        "clusters": getattr(item, "n_clusters", None),
        "first_stage": None if first is None else float(first.estimate),
        "first_stage_std_error": None if first is None else float(first.std_error),
        "first_stage_f": _float(getattr(item, "first_stage_f", None)) if first is not None else None,
    }
    return values


def _float(value: Any) -> float | None:
    return None if value is None else float(value)


def _level_of(fits: Sequence[Any]) -> float | None:
    levels = sorted({float(f.level) for f in fits if getattr(f, "level", None) is not None})
    if len(levels) > 1:
        raise PaperTableError(f"`items` must share one confidence level; got {shown(tuple(levels))}. Report "
                              f"them at one level, e.g. fit.with_level({levels[-1]:g}).")
    return levels[0] if levels else None


def _strings(value: Any, argument: str, count: int | None = None) -> tuple[str, ...]:
    if isinstance(value, str):
        value = [value]
    try:
        items = tuple(value)
    except TypeError:
        raise PaperTableError(f"`{argument}` must be a list of strings; got {shown(value)}.") from None
    if not all(isinstance(v, str) for v in items):
        raise PaperTableError(f"`{argument}` must be a list of strings; got {shown(items)}. Pass text only.")
    if count is not None and len(items) != count:
        raise PaperTableError(f"`{argument}` must have one entry per item ({count}); got {len(items)}. "
                              "Give one heading per column.")
    return items


def paper_table(items: Iterable[Any], labels: Sequence[str] | None = None, rows: Sequence[str] | None = None,
                decimals: int = 3, notes: Sequence[str] | None = None, *, title: str = "") -> PaperTable:
    """Put several estimates side by side in one publication table.

    Parameters
    ----------
    items : iterable
        One column each: a :class:`seamline.Fit`, a board (anything whose ``.fit`` is a fit; its
        headline estimate) or a bias-aware result (anything with ``max_bias`` and ``conf_int``).
    labels : list of str, optional
        Column headings; default "(1)", "(2)", ...
    rows : list of str, optional
        Which rows to show, in this order, among :data:`ROWS`. Default: every row that applies to
        at least one item; a single "bandwidth" row when every item uses one bandwidth on both
        sides, else "bandwidth_below" and "bandwidth_above". The standard error is always shown
        in parentheses beneath the estimate (and beneath the first-stage estimate).
    decimals : int, default 3
        Digits after the decimal point for real numbers.
    notes : list of str, optional
        Lines added under the table after the standard ones (what the parentheses and intervals
        are, and the usual caution).
    title : str, optional
        Caption.

    Returns
    -------
    PaperTable
        With ``to_latex()``, ``to_markdown()``, ``to_html()``, ``to_docx(path)``, ``to_csv()``,
        ``cells()`` and ``table()``.

    Raises
    ------
    PaperTableError
        For an item without an estimate, mixed confidence levels, an unknown row or wrong labels.

    Examples
    --------
    >>> import seamline
    >>> from seamline.demo_data import sharp_scenario
    >>> s = sharp_scenario(n=2000, seed=1)
    >>> design = seamline.Design(s.data, **s.design_kwargs())
    >>> table = seamline.paper_table([design.fit(), design.fit(kernel="uniform")])
    >>> table.columns
    ('(1)', '(2)')
    """
    items = list(items)
    if not items:
        raise PaperTableError("`items` must hold at least one fit or board; got none. Pass e.g. [design.fit()].")
    if isinstance(decimals, bool) or not isinstance(decimals, numbers.Integral) or not 0 <= decimals <= 15:
        raise PaperTableError(f"`decimals` must be a whole number from 0 to 15; got {shown(decimals)}. Pass e.g. 3.")
    fits = [_headline(item, i) for i, item in enumerate(items)]
    columns = (_strings(labels, "labels", len(fits)) if labels is not None
               else tuple(f"({i + 1})" for i in range(len(fits))))
    level = _level_of(fits)
    read = [_read(f) for f in fits]
    common = all(v["bandwidth"] is None or v["bandwidth"][0] == v["bandwidth"][1] for v in read)
    for v in read:
        h = v.pop("bandwidth")
        v["bandwidth"] = None if h is None or not common else h[0]
        v["bandwidth_below"] = None if h is None or common else h[0]
        v["bandwidth_above"] = None if h is None or common else h[1]
    if rows is None:
        chosen = [k for k in ROWS if any(v[k] is not None for v in read)]
    else:
        chosen = list(_strings(rows, "rows"))
        unknown = [k for k in chosen if k not in ROWS]
        if unknown:
            raise PaperTableError(f"`rows` must be among {', '.join(ROWS)}; got {shown(unknown)}. Pick listed "
                                  "row names.")
        if "estimate" not in chosen:
            chosen.insert(0, "estimate")
    kinds = {"robust_ci": "interval", "bias_aware_ci": "interval", "kernel": "text", "degree": "count",
             "n_below": "count", "n_above": "count", "clusters": "count"}
    body = []
    for key in chosen:
        label = interval_label(ROW_LABELS[key], level) if key.endswith("_ci") else ROW_LABELS[key]
        body.append(_Row(key, label, kinds.get(key, "number"), tuple(v[key] for v in read)))
        if key in _BENEATH:
            beneath = _BENEATH[key]
            body.append(_Row(beneath, ROW_LABELS[beneath], "beneath", tuple(v[beneath] for v in read)))
    standard = ["Standard errors in parentheses."]
    standard += [_CITATIONS[k] for k in ("robust_ci", "bias_aware_ci") if k in chosen]
    standard.append(CAUTION)
    extra = () if notes is None else _strings(notes, "notes")
    outcomes = tuple(str(getattr(f, "outcome", "")) for f in fits)
    return PaperTable(columns=columns, outcomes=outcomes, rows=tuple(body), decimals=int(decimals),
                      notes=(*standard, *extra), title=str(title))
