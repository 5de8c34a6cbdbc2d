"""Presentation shared by every result object: numbers first, rendering delegated to seamline.export."""
from __future__ import annotations

import pandas as pd

CAUTION = ("An RD estimate is local to the cutoff; it rests on continuity of the potential outcomes "
           "and no manipulation of the score, and does not replace judgement about the design.")


class Reported:
    """Mixin: a result with ``table()``, ``title()``, ``notes()`` and ``warnings`` renders everywhere."""

    warnings: tuple[str, ...]

    def table(self) -> pd.DataFrame:  # pragma: no cover - every result defines it
        raise NotImplementedError

    def title(self) -> str:  # pragma: no cover
        raise NotImplementedError

    def notes(self) -> list[str]:
        return [CAUTION]

    def _table_model(self):
        from ..export.table_model import from_dataframe
        return from_dataframe(self.table(), title=self.title(),
                              notes=[*self.notes(), *(f"Warning: {w}" for w in self.warnings)])

    def to_markdown(self) -> str:
        """GitHub-style Markdown table with the title above and notes below."""
        from ..export.render import to_markdown
        return to_markdown(self._table_model())

    def to_latex(self) -> str:
        """A booktabs LaTeX table (special characters escaped)."""
        from ..export.render import to_latex
        return to_latex(self._table_model())

    def to_csv(self) -> str:
        """The table as CSV at full precision."""
        from ..export.render import to_csv
        return to_csv(self._table_model())

    def _repr_html_(self) -> str:
        from ..export.render import to_html
        return to_html(self._table_model())
