"""An immutable, format-neutral model of a results table.

Every table seamline exports (an estimate, a bandwidth-sensitivity grid, a balance table) is first
turned into a :class:`TableModel`; one pure renderer per format (see ``render.py``) then turns the
model into text. Keeping the model separate means the four formats show the same numbers, and a
renderer can be tested on a small hand-made model.

Cells hold the raw values, never pre-formatted strings, so each format decides how to show them:
rounded to the column's decimals for LaTeX, Markdown and HTML, at full precision for CSV.
"""
from __future__ import annotations

import math
import numbers
import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from typing import Any, Union

import numpy as np
import pandas as pd

from ..errors import shown

__all__ = ["Cell", "TableModel", "from_dataframe", "format_number", "is_number"]

#: A cell is text, a whole number, a real number, a tuple of real numbers (an interval), or
#: None for a missing value.
Cell = Union[str, int, float, tuple[float, ...], None]

_LABEL = re.compile(r"^[A-Za-z0-9:._\-]+$")
_MAX_DECIMALS = 15


def is_number(value: Cell) -> bool:
    """Return True for a cell that is a number or a tuple of numbers (not text, not missing)."""
    if isinstance(value, tuple):
        return True
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _normalise_cell(value: Any) -> Cell:
    """Turn one incoming value into a plain-Python cell (numpy scalars, NaN and NA included)."""
    if value is None or value is pd.NA or value is pd.NaT:
        return None
    if isinstance(value, (str, np.str_)):
        return str(value)
    if isinstance(value, (bool, np.bool_)):
        # Booleans are shown as words; treating them as 0/1 numbers would hide what they mean.
        return "True" if value else "False"
    if isinstance(value, numbers.Integral):
        return int(value)
    if isinstance(value, numbers.Real):
        number = float(value)
        return None if math.isnan(number) else number
    if isinstance(value, (tuple, list, np.ndarray)) and len(value) > 0:
        items = list(value)
        if all(
            isinstance(v, numbers.Real) and not isinstance(v, (bool, np.bool_)) for v in items
        ):
            return tuple(float(v) for v in items)
    return str(value)


def _check_decimals(argument: str, value: Any) -> int:
    if (
        isinstance(value, bool)
        or not isinstance(value, numbers.Integral)
        or not 0 <= value <= _MAX_DECIMALS
    ):
        raise ValueError(
            f"`{argument}` must be a whole number from 0 to {_MAX_DECIMALS}; got {shown(value)}. "
            "Pass the number of digits to show after the decimal point, e.g. 3."
        )
    return int(value)


@dataclass(frozen=True)
class TableModel:
    """A results table as data: title, column labels, rows of raw cells, formats and notes.

    Parameters
    ----------
    title : str
        Caption shown above the table ("" for none).
    columns : tuple of str
        Column labels, shown as the header row.
    rows : tuple of tuple of Cell
        One tuple per row, one cell per column. Cells are text, numbers, tuples of numbers
        (intervals) or None (missing). Lists, numpy scalars and NaN are normalised on creation.
    decimals : tuple of int
        Digits after the decimal point for real numbers in each column (whole numbers are always
        shown without decimals). CSV output ignores this and keeps full precision.
    notes : tuple of str, default ()
        Lines printed below the table (sources, significance conventions, specification).
    label : str or None, default None
        Cross-reference key for LaTeX (``\\label{...}``); letters, digits and ``:._-`` only.

    Raises
    ------
    ValueError
        When a row's length, the number of decimals or the label does not fit.

    Examples
    --------
    >>> model = TableModel(
    ...     title="Invented example", columns=("Estimator", "Estimate"),
    ...     rows=(("Conventional", 1.23456),), decimals=(3, 3))
    >>> model.display(0, 1)
    '1.235'
    """

    title: str
    columns: tuple[str, ...]
    rows: tuple[tuple[Cell, ...], ...]
    decimals: tuple[int, ...]
    notes: tuple[str, ...] = ()
    label: str | None = None

    def __post_init__(self) -> None:
        if not isinstance(self.title, str):
            raise TypeError(
                f"`title` must be a string; got {type(self.title).__name__}. Pass the caption text."
            )
        columns = tuple(str(c) for c in self.columns)
        width = len(columns)
        rows = tuple(tuple(_normalise_cell(v) for v in row) for row in self.rows)
        for i, row in enumerate(rows):
            if len(row) != width:
                raise ValueError(
                    f"`rows[{i}]` must have {width} cells, one per column; got {len(row)}. "
                    "Give every row one value per column (None for a missing value)."
                )
        if isinstance(self.decimals, numbers.Integral) and not isinstance(self.decimals, bool):
            decimals = (_check_decimals("decimals", self.decimals),) * width
        else:
            decimals = tuple(_check_decimals("decimals", d) for d in self.decimals)
        if len(decimals) != width:
            raise ValueError(
                f"`decimals` must have {width} entries, one per column; got {len(decimals)}. "
                "Pass one whole number per column, or a single number for all of them."
            )
        if isinstance(self.notes, str):
            notes: tuple[str, ...] = (self.notes,)
        else:
            notes = tuple(str(n) for n in self.notes)
        if self.label is not None and not (
            isinstance(self.label, str) and _LABEL.match(self.label)
        ):
            raise ValueError(
                f"`label` must use only letters, digits and the characters : . _ -; got "
                f"{shown(self.label)}. Use a key such as 'tab:main-estimate'."
            )
        # The dataclass is frozen; these normalised values are set once, here.
        object.__setattr__(self, "columns", columns)
        object.__setattr__(self, "rows", rows)
        object.__setattr__(self, "decimals", decimals)
        object.__setattr__(self, "notes", notes)

    @property
    def shape(self) -> tuple[int, int]:
        """(number of rows, number of columns)."""
        return len(self.rows), len(self.columns)

    def numeric_columns(self) -> tuple[bool, ...]:
        """For each column, True when every non-missing cell is a number (renderers right-align it).

        A column with no values at all counts as text.
        """
        flags = []
        for j in range(len(self.columns)):
            present = [row[j] for row in self.rows if row[j] is not None]
            flags.append(bool(present) and all(is_number(v) for v in present))
        return tuple(flags)

    def display(self, i: int, j: int) -> str:
        """Text of cell (i, j) as LaTeX, Markdown and HTML show it (before escaping)."""
        value = self.rows[i][j]
        if value is None:
            return ""
        if isinstance(value, str):
            return value
        return format_number(value, self.decimals[j])


def _format_real(value: float, decimals: int) -> str:
    if math.isinf(value):
        return "inf" if value > 0 else "-inf"
    text = f"{value:.{decimals}f}"
    # A tiny negative number rounds to "-0.000"; a signed zero would read as a negative result.
    if text.startswith("-") and float(text) == 0.0:
        text = text[1:]
    return text


def format_number(value: Cell, decimals: int) -> str:
    """Format a numeric cell for display.

    Whole numbers are shown without decimals, real numbers with ``decimals`` digits, tuples of
    numbers as ``[a, b]``; missing cells give "". Text is returned unchanged.

    Examples
    --------
    >>> format_number(-0.0001, 3), format_number(12, 3), format_number((0.51, 1.5), 2)
    ('0.000', '12', '[0.51, 1.50]')
    """
    if value is None:
        return ""
    if isinstance(value, str):
        return value
    if isinstance(value, tuple):
        return "[" + ", ".join(_format_real(float(v), decimals) for v in value) + "]"
    if isinstance(value, int) and not isinstance(value, bool):
        return str(value)
    return _format_real(float(value), decimals)


def _label_of(key: Any) -> str:
    if isinstance(key, tuple):  # MultiIndex columns: join the levels
        return " / ".join(str(k) for k in key if str(k) != "")
    return "" if key is None else str(key)


def _has_default_index(df: pd.DataFrame) -> bool:
    index = df.index
    return (
        isinstance(index, pd.RangeIndex)
        and index.start == 0
        and index.step == 1
        and index.name is None
    )


def from_dataframe(
    df: pd.DataFrame,
    *,
    title: str,
    notes: Iterable[str] = (),
    decimals: int | Mapping[str, int] = 3,
    label: str | None = None,
    index: bool | None = None,
) -> TableModel:
    """Build a :class:`TableModel` from a pandas DataFrame.

    Parameters
    ----------
    df : pandas.DataFrame
        The table; its column labels become the header (MultiIndex levels joined by " / ").
    title : str
        Caption of the table.
    notes : iterable of str, default ()
        Lines printed below the table.
    decimals : int or mapping of column label to int, default 3
        Digits after the decimal point for real numbers; a mapping sets columns one by one and
        the others keep 3.
    label : str or None, default None
        LaTeX cross-reference key.
    index : bool or None, default None
        Include the row labels as the first column. None includes them unless the index is the
        default 0..n-1 range without a name.

    Returns
    -------
    TableModel

    Raises
    ------
    TypeError
        When ``df`` is not a DataFrame.
    ValueError
        When ``decimals`` is not a whole number from 0 to 15, or names a column not in ``df``.

    Examples
    --------
    >>> import pandas as pd
    >>> df = pd.DataFrame({"estimate": [1.5, -0.25]}, index=["conventional", "robust"])
    >>> from_dataframe(df, title="Invented example", decimals=2).columns
    ('', 'estimate')
    """
    if not isinstance(df, pd.DataFrame):
        raise TypeError(
            f"`df` must be a pandas DataFrame; got {type(df).__name__}. "
            "Convert the table with pandas.DataFrame(...) first."
        )
    labels = [_label_of(c) for c in df.columns]
    if isinstance(decimals, Mapping):
        unknown = [k for k in decimals if str(k) not in labels]
        if unknown:
            raise ValueError(
                f"`decimals` must name columns of the table; got {shown(unknown)}. "
                f"Use labels among {shown(labels)}."
            )
        per_column = [
            _check_decimals(f"decimals[{label_!r}]", decimals.get(label_, 3)) for label_ in labels
        ]
    else:
        per_column = [_check_decimals("decimals", decimals)] * len(labels)

    include_index = (not _has_default_index(df)) if index is None else bool(index)
    rows = [list(record) for record in df.itertuples(index=False, name=None)]
    if include_index:
        index_name = _label_of(tuple(df.index.names) if df.index.nlevels > 1 else df.index.name)
        labels = [index_name, *labels]
        per_column = [decimals if isinstance(decimals, int) else 3, *per_column]
        keys = [" / ".join(map(str, k)) if isinstance(k, tuple) else k for k in df.index]
        rows = [[key, *row] for key, row in zip(keys, rows)]
    return TableModel(
        title=title,
        columns=tuple(labels),
        rows=tuple(tuple(r) for r in rows),
        decimals=tuple(per_column),
        notes=tuple(notes),
        label=label,
    )
