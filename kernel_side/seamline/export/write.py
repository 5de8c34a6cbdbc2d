"""Write a rendered table to a file; the format follows the file's suffix.

Rendering stays in ``render.py`` (pure, returns text); this module only picks the renderer and
writes the text, so tests and notebook buttons can render without touching the disk.
"""
from __future__ import annotations

import os
from collections.abc import Callable
from pathlib import Path

from ..errors import shown
from .render import to_csv, to_html, to_latex, to_markdown
from .table_model import TableModel

__all__ = ["write_table", "RENDERERS_BY_SUFFIX"]

#: File suffix (lower case) -> renderer.
RENDERERS_BY_SUFFIX: dict[str, Callable[[TableModel], str]] = {
    ".tex": to_latex,
    ".md": to_markdown,
    ".html": to_html,
    ".csv": to_csv,
}


def write_table(model: TableModel, path: str | os.PathLike[str], *, encoding: str = "utf-8") -> Path:
    """Render ``model`` in the format named by the suffix of ``path`` and write it there.

    Parameters
    ----------
    model : TableModel
        The table to write.
    path : str or path-like
        Target file ending in ``.tex``, ``.md``, ``.html`` or ``.csv`` (any case). An existing
        file is replaced; the folder must exist.
    encoding : str, default "utf-8"

    Returns
    -------
    pathlib.Path
        The path written.

    Raises
    ------
    TypeError
        When ``model`` is not a TableModel.
    ValueError
        When the suffix names no supported format.

    Examples
    --------
    >>> write_table(model, "estimates.tex")  # doctest: +SKIP
    PosixPath('estimates.tex')
    """
    if not isinstance(model, TableModel):
        raise TypeError(
            f"`model` must be a TableModel; got {type(model).__name__}. "
            "Build one with seamline.export.from_dataframe(...)."
        )
    target = Path(path)
    suffix = target.suffix.lower()
    renderer = RENDERERS_BY_SUFFIX.get(suffix)
    if renderer is None:
        allowed = ", ".join(RENDERERS_BY_SUFFIX)
        raise ValueError(
            f"`path` must end in one of {allowed}; got {shown(str(path))}. "
            "Choose the format by the file suffix, e.g. 'table.tex'."
        )
    text = renderer(model)
    # newline="" writes the renderer's "\n" line ends unchanged on every platform.
    with open(target, "w", encoding=encoding, newline="") as handle:
        handle.write(text)
    return target
