"""Presentation shared by every result object: numbers first, rendering delegated to seamline.export."""
from __future__ import annotations

import pandas as pd

#: Shown once per board and at the end of the methods paragraph (not under every table).
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
        """Lines printed under the exported table (the caution sentence is shown once per board and
        in the methods paragraph, not under every table)."""
        return []

    def _table_model(self, join_intervals: bool = True):
        from ..export.labels import result_model
        return result_model(self, join_intervals=join_intervals)

    def to_markdown(self) -> str:
        """GitHub-style Markdown table with reader labels, the title above and notes below."""
        from ..export.render import to_markdown
        return to_markdown(self._table_model())

    def to_latex(self) -> str:
        """A booktabs LaTeX table with reader labels (special characters escaped)."""
        from ..export.render import to_latex
        return to_latex(self._table_model())

    def to_csv(self) -> str:
        """The table as CSV at full precision, with reader labels (interval bounds in two columns).

        ``table()`` keeps the machine column names for code."""
        from ..export.render import to_csv
        return to_csv(self._table_model(join_intervals=False))

    def to_html(self) -> str:
        """A self-contained HTML table with reader labels."""
        from ..export.render import to_html
        return to_html(self._table_model())

    def _repr_html_(self) -> str:
        return self.to_html()
