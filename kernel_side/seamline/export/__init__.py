"""Export layer: results -> table model -> one pure renderer per format -> optional file.

Imports only numpy/pandas and the standard library (no widgets, no charting), so tables can be
produced in scripts and headless runs.
"""
from .render import latex_escape, markdown_escape, to_csv, to_html, to_latex, to_markdown
from .table_model import Cell, TableModel, format_number, from_dataframe
from .write import write_table

__all__ = [
    "Cell",
    "TableModel",
    "format_number",
    "from_dataframe",
    "latex_escape",
    "markdown_escape",
    "to_csv",
    "to_html",
    "to_latex",
    "to_markdown",
    "write_table",
]
