"""Export layer: results -> table model -> one pure renderer per format -> optional file.

Imports only numpy/pandas and the standard library (no widgets, no charting), so tables can be
produced in scripts and headless runs.
"""
from .labels import export_table, labelled_model, result_model
from .paper import PaperTable, paper_table
from .paper_session import PaperTables, paper_tables
from .render import latex_escape, markdown_escape, to_csv, to_html, to_latex, to_markdown
from .script import board_script, replication_script
from .table_model import Cell, TableModel, format_number, from_dataframe
from .write import write_table

__all__ = [
    "Cell",
    "PaperTable",
    "PaperTables",
    "board_script",
    "export_table",
    "labelled_model",
    "paper_table",
    "paper_tables",
    "replication_script",
    "result_model",
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
