"""Table exports of the By cutoff, Subgroups and Power panels.

``DESIGNS_EXPORTS`` maps each export name to the board result it reads; :func:`designs_table`
turns that result into what ``export.labels.export_table`` renders with reader labels. A column
that is blank in every row (the ``note`` column when every cutoff was fitted) is dropped rather
than printed as a column of dashes. Nothing here imports IPython or widgets.
"""
from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import pandas as pd

from ..errors import InvalidOptionError
from ..results.base import CAUTION

__all__ = ["DESIGNS_EXPORTS", "RESULT_EXPORTS", "designs_table", "drop_blank_columns", "without_caution"]

#: Export name -> (board result, what of it is exported).
DESIGNS_EXPORTS: Mapping[str, tuple[str, str]] = {
    "by_cutoff": ("by_cutoff", "the cutoff-specific effects"),
    "decomposition": ("by_cutoff", "the pooled estimate's decomposition"),
    "subgroups": ("subgroups", "the subgroup effects"),
    "power": ("power", "the power curve"),
    "sample_size": ("power", "the power and sample size summary"),
}


def without_caution(notes) -> list[str]:
    """Notes without the cautions sentence, which a board states once (and the methods paragraph)."""
    out = [str(n).replace(CAUTION, "").strip() for n in notes]
    return [n for n in out if n]


def drop_blank_columns(df: pd.DataFrame) -> pd.DataFrame:
    """``df`` without the columns whose every cell is missing or empty text (a copy)."""
    def blank(values: pd.Series) -> bool:
        return bool(values.map(lambda v: v is None or (isinstance(v, float) and v != v)
                               or (isinstance(v, str) and not v.strip())).all())
    return df[[c for c in df.columns if not blank(df[c])]].copy()


@dataclass(frozen=True, eq=False)
class _Exported:
    """A result seen through its exported table (blank columns dropped; title, notes, level kept)."""
    result: Any
    frame: pd.DataFrame

    @property
    def level(self):
        return getattr(self.result, "level", None)

    @property
    def warnings(self):
        return tuple(getattr(self.result, "warnings", ()) or ())

    def table(self) -> pd.DataFrame:
        return self.frame

    def title(self) -> str:
        return self.result.title()

    def notes(self) -> list[str]:
        return without_caution(self.result.notes())


def _pooled_row(effects) -> pd.DataFrame:
    """The cutoff table with the pooled estimate as its last row (column layout)."""
    table = effects.table()
    # cutoffs as written (30, not 30.000 at the tables' three decimals)
    table = table.assign(cutoff=[f"{c:g}" for c in table["cutoff"]])
    pooled = effects.pooled
    if pooled is None:
        return table
    lo, hi = pooled.robust_conf_int
    row = {"cutoff": "pooled (normalised score)", "estimate": pooled.estimate, "std_error": pooled.std_error,
           "robust_estimate": pooled.bias_corrected_estimate, "robust_std_error": pooled.robust_std_error,
           "robust_ci_low": lo, "robust_ci_high": hi, "robust_p_value": pooled.robust_p_value,
           "n_below": pooled.n_used[0], "n_above": pooled.n_used[1], "bandwidth_below": pooled.bandwidth[0],
           "bandwidth_above": pooled.bandwidth[1], "units_below": pooled.n_total[0],
           "units_above": pooled.n_total[1], "note": ""}
    return pd.concat([table, pd.DataFrame([row], columns=table.columns)], ignore_index=True)


class _Summary:
    """The Power panel's summary (item, value) as an exportable result."""

    def __init__(self, report):
        self.report = report
        self.level = None                # no interval in this table
        self.warnings = report.warnings

    def table(self) -> pd.DataFrame:
        return self.report.summary()

    def title(self) -> str:
        return self.report.title().replace("Power of", "Power and sample size of", 1)

    def notes(self) -> list[str]:
        return without_caution(self.report.notes())


def designs_table(what: str, result: Any) -> Any:
    """What export ``what`` renders of its board result.

    Raises
    ------
    InvalidOptionError
        When the board's result has no such table (a decomposition of cumulative cutoffs).
    """
    if what == "decomposition":
        decomposition = getattr(result, "decomposition", None)
        if decomposition is None:
            raise InvalidOptionError("`what` \"decomposition\" needs a cutoff column (the pooled estimate on the "
                                     "normalised score); got cumulative cutoffs, whose effects are increments of "
                                     "different doses and have no pooled estimate. Export \"by_cutoff\" instead.")
        return _Exported(decomposition, drop_blank_columns(decomposition.table()))
    if what == "by_cutoff":
        return _Exported(result, drop_blank_columns(_pooled_row(result)))
    if what == "subgroups":
        return _Exported(result, drop_blank_columns(result.table()))
    if what == "sample_size":
        return _Summary(result)
    return _Exported(result, result.table())


#: Export names of each board result (what a report writes for it).
RESULT_EXPORTS: Mapping[str, tuple[str, ...]] = {"by_cutoff": ("by_cutoff", "decomposition"),
                                                 "subgroups": ("subgroups",), "power": ("power", "sample_size")}
