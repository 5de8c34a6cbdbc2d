"""Named publication tables kept for the session, filled one board headline at a time.

``seamline.paper_tables`` is the session's collection. The Designs side panel ("Paper table:
Add…"), a board's own "Add to paper table" control and code (``paper_tables.add(board, "main")``)
all add to it; ``paper_tables["main"]`` is then a :class:`~seamline.export.paper.PaperTable` with
``to_latex()``, ``to_markdown()``, ``to_html()``, ``to_docx(path)`` and ``to_csv()``.

A column holds the headline *as it was when added* (the board's current fit, a frozen result), so
a table does not change behind the author's back while a board is being explored; adding the same
board again replaces its column with the newer numbers. Items are read by attribute, as
``paper_table`` reads them, so this module imports no notebook code.
"""
from __future__ import annotations

import threading
import unicodedata
from collections.abc import Iterator, Mapping, Sequence
from typing import Any

from ..errors import shown
from .paper import PaperTable, PaperTableError, _headline, paper_table

__all__ = ["PaperTables", "UnknownPaperTableError", "check_table_name", "paper_tables"]

#: Longest table name accepted (a name is a handle for code and a file stem, not a caption).
MAX_NAME = 60


def check_table_name(name: Any) -> str:
    """The table name with surrounding spaces removed, or a PaperTableError saying what to type."""
    if not isinstance(name, str):
        raise PaperTableError(f"`table` must be the name of a paper table (text); got {shown(name)}. "
                              'Pass e.g. "main".')
    text = name.strip()
    if not text or len(text) > MAX_NAME or any(unicodedata.category(c).startswith("C") for c in text):
        raise PaperTableError(f"`table` must be 1 to {MAX_NAME} printable characters; got {shown(name)}. "
                              'Pass a short name such as "main" or "robustness".')
    return text


class UnknownPaperTableError(PaperTableError, KeyError):
    """No paper table of that name in this session (a KeyError too, as a mapping raises)."""

    def __str__(self) -> str:  # KeyError would wrap the message in quotes
        return str(self.args[0]) if self.args else ""


class PaperTables(Mapping[str, PaperTable]):
    """The session's named paper tables: name -> :class:`PaperTable` (built on each read).

    Examples
    --------
    >>> import seamline
    >>> from seamline.demo_data import sharp_scenario
    >>> s = sharp_scenario(n=2000, seed=1)
    >>> design = seamline.Design(s.data, **s.design_kwargs())
    >>> tables = PaperTables()
    >>> tables.add(design.fit(), "main", label="Local linear")
    ('Local linear',)
    >>> tables["main"].columns
    ('Local linear',)
    """

    def __init__(self) -> None:
        self._lock = threading.RLock()
        self._tables: dict[str, dict[str, Any]] = {}   # name -> column label -> frozen headline

    def add(self, item: Any, table: str = "main", label: str | None = None) -> tuple[str, ...]:
        """Add an item's headline as a column of the named table (made if new).

        Parameters
        ----------
        item : board, Fit or bias-aware result
            A board stands for its current headline fit (waits for it).
        table : str, default "main"
            The paper table's name.
        label : str, optional
            Column heading; default the board's name, else "(k)". A column with the same heading
            is replaced (so adding a board again updates it) and keeps its place.

        Returns
        -------
        tuple of str
            The table's column headings after the addition.

        Raises
        ------
        PaperTableError
            For a bad name, an item without a current estimate, or an item whose confidence level
            differs from the table's other columns.
        """
        name = check_table_name(table)
        headline = _headline(item, 0)
        with self._lock:
            columns = dict(self._tables.get(name, {}))
            if label is None:
                label = getattr(item, "name", None) or f"({len(columns) + 1})"
            if not isinstance(label, str) or not label.strip():
                raise PaperTableError(f"`label` must be a non-empty column heading; got {shown(label)}. "
                                      'Pass e.g. "Main outcome".')
            columns[label.strip()] = headline
            # Build once now, so a column that cannot sit with the others (another confidence
            # level) is refused here rather than when the table is read.
            paper_table(list(columns.values()), labels=list(columns))
            self._tables[name] = columns
            return tuple(columns)

    def remove(self, table: str, label: str | None = None) -> None:
        """Drop one column (``label``) or the whole table."""
        name = self._known(table)
        with self._lock:
            if label is None:
                del self._tables[name]
                return
            if label not in self._tables[name]:
                raise PaperTableError(f"`label` must be a column of paper table {shown(name)} "
                                      f"({', '.join(map(repr, self._tables[name]))}); got {shown(label)}.")
            del self._tables[name][label]
            if not self._tables[name]:
                del self._tables[name]

    def clear(self) -> None:
        """Forget every paper table."""
        with self._lock:
            self._tables.clear()

    def columns(self, table: str) -> tuple[str, ...]:
        """The column headings of a table, in order."""
        name = self._known(table)
        with self._lock:
            return tuple(self._tables[name])

    def table(self, table: str, *, rows: Sequence[str] | None = None, decimals: int = 3,
              notes: Sequence[str] | None = None, title: str = "") -> PaperTable:
        """The named table with ``paper_table``'s options (``self[name]`` uses the defaults)."""
        name = self._known(table)
        with self._lock:
            columns = dict(self._tables[name])
        return paper_table(list(columns.values()), labels=list(columns), rows=rows, decimals=decimals,
                           notes=notes, title=title)

    def listing(self) -> list[dict[str, Any]]:
        """``[{"name": ..., "columns": [...]}, ...]`` for the front end, in creation order."""
        with self._lock:
            return [{"name": name, "columns": list(columns)} for name, columns in self._tables.items()]

    def _known(self, table: Any) -> str:
        name = check_table_name(table)
        with self._lock:
            if name not in self._tables:
                known = ", ".join(repr(n) for n in self._tables) or "none yet"
                raise UnknownPaperTableError(f"`table` must name a paper table of this session ({known}); got "
                                      f"{shown(name)}. Add a board to it first: paper_tables.add(board, {shown(name)}).")
        return name

    def __getitem__(self, table: str) -> PaperTable:
        return self.table(table)

    def __contains__(self, table: object) -> bool:
        with self._lock:
            return isinstance(table, str) and table.strip() in self._tables

    def __iter__(self) -> Iterator[str]:
        with self._lock:
            return iter(list(self._tables))

    def __len__(self) -> int:
        with self._lock:
            return len(self._tables)

    def __repr__(self) -> str:
        inside = ", ".join(f"{name!r}: {len(columns)} column(s)" for name, columns in self._tables.items())
        return f"PaperTables({{{inside}}})"


#: The session's paper tables (what ``seamline.paper_tables`` is).
paper_tables = PaperTables()
