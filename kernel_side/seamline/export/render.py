"""One pure renderer per output format: TableModel -> text.

Each renderer returns a string ending in a newline and touches no file; ``write.py`` does the
writing. LaTeX, Markdown and HTML show numbers rounded to the model's per-column decimals, CSV
keeps full precision so the numbers read back exactly.
"""
from __future__ import annotations

import csv
import html
import io
import re

from .table_model import Cell, TableModel, format_number

__all__ = ["to_latex", "to_markdown", "to_html", "to_csv", "latex_escape", "markdown_escape"]

# --------------------------------------------------------------------------------------------
# LaTeX
# --------------------------------------------------------------------------------------------

_LATEX_SPECIALS = {
    "\\": r"\textbackslash{}",
    "&": r"\&",
    "%": r"\%",
    "$": r"\$",
    "#": r"\#",
    "_": r"\_",
    "{": r"\{",
    "}": r"\}",
    "~": r"\textasciitilde{}",
    "^": r"\textasciicircum{}",
    # In the default OT1 font encoding < and > print as inverted punctuation.
    "<": r"\textless{}",
    ">": r"\textgreater{}",
}
_LATEX_PATTERN = re.compile("|".join(re.escape(c) for c in _LATEX_SPECIALS))
_NEWLINES = re.compile(r"\s*[\r\n]+\s*")


def latex_escape(text: str) -> str:
    """Escape LaTeX's special characters so ``text`` prints literally in a text-mode cell.

    One pass over the string, so the backslashes this adds are never escaped again. Line breaks
    become spaces (a table cell is one line).

    Examples
    --------
    >>> print(latex_escape("50% of h_below & $5"))
    50\\% of h\\_below \\& \\$5
    """
    text = _NEWLINES.sub(" ", text)
    return _LATEX_PATTERN.sub(lambda m: _LATEX_SPECIALS[m.group(0)], text)


def _latex_cell(model: TableModel, i: int, j: int) -> str:
    value: Cell = model.rows[i][j]
    if value is None:
        return ""
    if isinstance(value, str):
        return latex_escape(value)
    # A typeset minus sign is longer than a hyphen; numbers are built from digits, '.', '-',
    # 'inf', '[', ']' and ', ' only, so nothing else needs escaping.
    return format_number(value, model.decimals[j]).replace("-", "$-$")


def to_latex(model: TableModel) -> str:
    """Render a booktabs table inside a floating ``table`` environment.

    The output needs ``\\usepackage{booktabs}`` in the preamble. Text columns are left-aligned,
    numeric columns right-aligned; the title becomes the ``\\caption``, the model's label the
    ``\\label``, and each note a footnote-size line below the tabular. Every text cell, header and
    note is escaped.

    Parameters
    ----------
    model : TableModel

    Returns
    -------
    str

    Examples
    --------
    >>> from seamline.export.table_model import TableModel
    >>> m = TableModel(title="T", columns=("a",), rows=((1.0,),), decimals=(1,))
    >>> print(to_latex(m).splitlines()[4])
    \\begin{tabular}{r}
    """
    numeric = model.numeric_columns()
    spec = "".join("r" if flag else "l" for flag in numeric)
    lines = [r"\begin{table}[htbp]", r"\centering"]
    if model.title:
        lines.append(rf"\caption{{{latex_escape(model.title)}}}")
    if model.label:
        lines.append(rf"\label{{{model.label}}}")
    lines.append(rf"\begin{{tabular}}{{{spec}}}")
    lines.append(r"\toprule")
    lines.append(" & ".join(latex_escape(c) for c in model.columns) + r" \\")
    lines.append(r"\midrule")
    for i in range(len(model.rows)):
        cells = [_latex_cell(model, i, j) for j in range(len(model.columns))]
        lines.append(" & ".join(cells) + r" \\")
    lines.append(r"\bottomrule")
    lines.append(r"\end{tabular}")
    if model.notes:
        lines.append(r"\par\smallskip{\footnotesize\raggedright")
        lines.extend(latex_escape(note) + r"\par" for note in model.notes)
        lines.append("}")
    lines.append(r"\end{table}")
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------------------------
# Markdown
# --------------------------------------------------------------------------------------------

# Backslash escapes GitHub-flavoured Markdown honours for ASCII punctuation: the ones that would
# otherwise start emphasis, code, links, raw HTML or math, or end a table cell.
_MARKDOWN_PATTERN = re.compile(r"([\\`*_\[\]<>|$])")


def markdown_escape(text: str) -> str:
    """Escape the characters that would change a Markdown table cell's meaning.

    Examples
    --------
    >>> print(markdown_escape("a|b *c*"))
    a\\|b \\*c\\*
    """
    return _MARKDOWN_PATTERN.sub(r"\\\1", _NEWLINES.sub(" ", text))


def to_markdown(model: TableModel) -> str:
    """Render a GitHub pipe table, with the title as a bold line above and the notes below.

    Parameters
    ----------
    model : TableModel

    Returns
    -------
    str
    """
    numeric = model.numeric_columns()
    out = []
    if model.title:
        out += [f"**{markdown_escape(model.title)}**", ""]
    out.append("| " + " | ".join(markdown_escape(c) for c in model.columns) + " |")
    out.append("| " + " | ".join("---:" if flag else ":---" for flag in numeric) + " |")
    for i, row in enumerate(model.rows):
        # Text is escaped; formatted numbers hold only digits, ".", "-", "inf", "[", "]" and ", ",
        # which cannot start Markdown syntax on their own, so they stay readable in the source.
        cells = [
            markdown_escape(value) if isinstance(value, str) else model.display(i, j)
            for j, value in enumerate(row)
        ]
        out.append("| " + " | ".join(cells) + " |")
    for note in model.notes:
        out += ["", markdown_escape(note)]
    return "\n".join(out) + "\n"


# --------------------------------------------------------------------------------------------
# HTML
# --------------------------------------------------------------------------------------------

_TABLE_STYLE = "border-collapse:collapse;border-top:2px solid currentColor;margin:0.5em 0"
_CAPTION_STYLE = "caption-side:top;text-align:left;font-weight:bold;padding:0.25em 0"
_HEAD_STYLE = "border-bottom:1px solid currentColor;padding:0.2em 0.6em;font-weight:bold"
_CELL_STYLE = "padding:0.2em 0.6em"
_BODY_STYLE = "border-bottom:2px solid currentColor"
_NOTE_STYLE = "text-align:left;font-size:85%;padding:0.3em 0.6em 0 0.6em"


def _align(flag: bool) -> str:
    return "text-align:right" if flag else "text-align:left"


def to_html(model: TableModel) -> str:
    """Render a small self-contained ``<table class="seamline-table">``.

    Styling is inline (no ``<style>`` block that could leak into a notebook page); rules above
    and below the body echo a booktabs table. Every title, header, cell and note is HTML-escaped,
    so a column label such as ``<b>x</b>`` is shown as text.

    Parameters
    ----------
    model : TableModel

    Returns
    -------
    str
    """
    numeric = model.numeric_columns()
    esc = html.escape
    out = [f'<table class="seamline-table" style="{_TABLE_STYLE}">']
    if model.title:
        out.append(f'<caption style="{_CAPTION_STYLE}">{esc(model.title)}</caption>')
    out.append("<thead>")
    head = "".join(
        f'<th style="{_HEAD_STYLE};{_align(flag)}">{esc(label)}</th>'
        for label, flag in zip(model.columns, numeric)
    )
    out.append(f"<tr>{head}</tr>")
    out.append("</thead>")
    out.append(f'<tbody style="{_BODY_STYLE}">')
    for i in range(len(model.rows)):
        cells = "".join(
            f'<td style="{_CELL_STYLE};{_align(flag)}">{esc(model.display(i, j))}</td>'
            for j, flag in enumerate(numeric)
        )
        out.append(f"<tr>{cells}</tr>")
    out.append("</tbody>")
    if model.notes:
        out.append("<tfoot>")
        span = max(len(model.columns), 1)
        for note in model.notes:
            out.append(f'<tr><td colspan="{span}" style="{_NOTE_STYLE}">{esc(note)}</td></tr>')
        out.append("</tfoot>")
    out.append("</table>")
    return "\n".join(out) + "\n"


# --------------------------------------------------------------------------------------------
# CSV
# --------------------------------------------------------------------------------------------


def _csv_cell(value: Cell) -> str:
    if value is None:
        return ""
    if isinstance(value, str):
        return value
    if isinstance(value, tuple):
        return "[" + ", ".join(repr(float(v)) for v in value) + "]"
    if isinstance(value, int) and not isinstance(value, bool):
        return str(value)
    # repr gives the shortest text that reads back as the same float.
    return repr(float(value))


def to_csv(model: TableModel) -> str:
    """Render plain CSV: one header line of column labels, then the rows at full precision.

    Title and notes are left out so the file loads as data. Missing cells are empty; intervals
    are written as ``[low, high]`` (quoted).

    Parameters
    ----------
    model : TableModel

    Returns
    -------
    str
    """
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(model.columns)
    for row in model.rows:
        writer.writerow([_csv_cell(v) for v in row])
    return buffer.getvalue()
