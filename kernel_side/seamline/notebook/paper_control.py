"""The board's "Add to paper table" control: a table name, a button and what happened.

It does what the Designs side panel's "Paper table: Add…" does (both call
``seamline.paper_tables.add(board, name)``), for users without the JupyterLab extension (Notebook
7, VS Code, a plain widget front end). Failures are shown beside the button, never raised into the
widget machinery, so the kernel keeps working.
"""
from __future__ import annotations

import html

import ipywidgets as widgets

from ..export.paper_session import paper_tables

__all__ = ["PaperControl"]


class PaperControl(widgets.HBox):
    """Name field + "Add to paper table" button + a one-line message.

    Parameters
    ----------
    board : Board
        Anything with ``name`` and a ``fit`` (its headline), as ``paper_tables.add`` reads it.
    tables : PaperTables, optional
        The collection to add to; the session's ``seamline.paper_tables`` by default.
    """

    def __init__(self, board, tables=None, **kwargs):
        super().__init__(**kwargs)
        self.board = board
        self._tables = paper_tables if tables is None else tables
        self.name = widgets.Text(value="main", placeholder="paper table name",
                                 layout=widgets.Layout(width="130px"))
        self.name.add_class("seamline-paper-name")
        self.button = widgets.Button(description="Add to paper table", icon="table",
                                     tooltip="Add this board's headline estimate as a column of the named "
                                             "paper table (seamline.paper_tables[name])",
                                     layout=widgets.Layout(width="auto"))
        self.button.add_class("seamline-paper-add")
        self.message = widgets.HTML()
        self.message.add_class("seamline-paper-message")
        self.button.on_click(lambda _b: self.add())
        self.add_class("seamline-paper-control")
        self.layout = widgets.Layout(align_items="center")
        self.children = [self.name, self.button, self.message]

    def add(self) -> bool:
        """Add the board's headline to the named table; the message says what happened."""
        table = self.name.value.strip()
        try:
            columns = self._tables.add(self.board, table)
        except Exception as exc:  # noqa: BLE001 - shown beside the button; the kernel keeps working
            self.message.value = f'<span class="seamline-error">{html.escape(str(exc))}</span>'
            return False
        code = html.escape(f"seamline.paper_tables[{table!r}]")
        self.message.value = (f"Paper table <b>{html.escape(table)}</b>: {len(columns)} column(s) "
                              f"({html.escape(', '.join(columns))}). Read it with <code>{code}</code>.")
        return True
