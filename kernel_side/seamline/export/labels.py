"""The one vocabulary of labels a reader sees in exported tables.

``table()`` on a result returns machine column names (``std_error``, ``robust_ci_low``,
``bandwidth_below``, ``n_below``, ...) so code can select columns. Every export for a reader --
LaTeX, Markdown, HTML, CSV, Word and the publication table -- goes through this module instead,
which renames the columns ("Std. error", "Bandwidth (below)", "Observations (below)"), joins a
pair of interval bounds into one "Robust 95% CI" column (kept as two labelled columns in CSV, so
the file still loads as numbers) and spells out coded values such as bandwidth rules.

A column without an entry here keeps its name with underscores turned into spaces and the first
letter capitalised; ``tests/export/test_labels.py`` checks that every column of every result
has an entry.
"""
from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any

import pandas as pd

from ..results.base import CAUTION
from .table_model import TableModel, from_dataframe

__all__ = [
    "COLUMN_LABELS",
    "INTERVAL_COLUMNS",
    "RESULT_LABELS",
    "ROW_LABELS",
    "VALUE_LABELS",
    "TABLE_FORMATS",
    "column_label",
    "export_table",
    "interval_label",
    "labelled_frame",
    "labelled_model",
    "result_model",
    "value_label",
]

#: Machine column name -> label a reader understands.
COLUMN_LABELS: Mapping[str, str] = {
    # estimates
    "estimator": "Estimator",
    "estimate": "Estimate",
    "std_error": "Std. error",
    "robust_estimate": "Bias-corrected estimate",
    "robust_std_error": "Robust std. error",
    "p_value": "p-value",
    "robust_p_value": "Robust p-value",
    "p_value_holm": "Holm-adjusted p-value",
    # bandwidths and specification
    "bandwidth": "Bandwidth",
    "bandwidth_below": "Bandwidth (below)",
    "bandwidth_above": "Bandwidth (above)",
    "pilot_below": "Pilot bandwidth (below)",
    "pilot_above": "Pilot bandwidth (above)",
    "rule": "Bandwidth rule",
    "label": "Specification",
    "kernel": "Kernel",
    "degree": "Degree",
    "item": "",
    "below": "Below the cutoff",
    "above": "Above the cutoff",
    # counts
    "n_used": "Observations used",
    "n_below": "Observations (below)",
    "n_above": "Observations (above)",
    "n_excluded": "Observations excluded",
    "observations": "Observations",
    "count": "Observations",
    # placebo, donut, balance
    "cutoff": "Cutoff",
    "side": "Side",
    "radius": "Donut radius",
    "cutoff_date": "Cutoff date",           # date scores: the placebo cutoff written as a date
    "radius_duration": "Donut radius (duration)",
    "covariate": "Covariate",
    "mean_below": "Mean (below)",
    "mean_above": "Mean (above)",
    # density and bins
    "density": "Density",
    "left": "Bin from",
    "right": "Bin to",
    "mean": "Mean",
    "score_mean": "Mean score",
    # score profile and checks
    "scope": "Scope",
    "distinct_values": "Distinct values",
    "mass_points": "Mass points",
    "share_at_mass_points": "Share at mass points",
    "largest_mass": "Largest mass point",
    "check": "Check",
    # several cutoffs, subgroups, power (seamline.results.designs, seamline.notebook.power_report)
    "group": "Group",
    "units_below": "Usable units (below)",
    "units_above": "Usable units (above)",
    "note": "Note",
    "component": "Component",
    "weight": "Weight",
    "effect": "Effect",
    "power": "Power",
    "value": "Value",
    "target_power": "Target power",
    "achieved_power": "Power at that size",
    "n_total": "Observations (total)",
    "n_window_below": "Inside the bandwidth (below)",
    "n_window_above": "Inside the bandwidth (above)",
    "status": "Status",
    "detail": "Detail",
    # bias-aware intervals, weak-IV-robust sets, local randomization (issue 9)
    "max_bias": "Worst-case bias",
    "smoothness": "Smoothness bound M",
    "smoothness_multiple": "Multiple of M",
    "critical_value": "Critical value",
    "set": "Confidence set",
    "inference": "Inference",
    "half_width": "Half-width",
    "balance_p_value": "Smallest balance p-value",
    "least_balanced": "Least balanced covariate",
    "chosen": "Chosen window",
}

#: Pairs of bound columns shown as one interval column; the label takes the confidence level.
INTERVAL_COLUMNS: Mapping[tuple[str, str], str] = {
    ("ci_low", "ci_high"): "{level} CI",
    ("robust_ci_low", "robust_ci_high"): "Robust {level} CI",
    ("ci_low_fixed_bandwidth", "ci_high_fixed_bandwidth"): "{level} CI at the chosen bandwidth",
    ("neyman_ci_low", "neyman_ci_high"): "Neyman {level} CI",
}

#: Coded cell values -> words (bandwidth rules in the sensitivity and bandwidth tables).
VALUE_LABELS: Mapping[str, str] = {
    "mse": "MSE-optimal",
    "mse-split": "MSE-optimal, per side",
    "coverage": "Coverage-error optimal",
    "ik": "Imbens-Kalyanaraman",
    "manual": "Fixed by the analyst",
    "local-cdf": "Local polynomial (CDF-based)",
    "binned": "Binned (McCrary)",
}

#: Rows of the publication table (``paper_table``): key -> label. The estimate row's standard
#: error is printed beneath it in parentheses, so "std_error" has no row label of its own.
ROW_LABELS: Mapping[str, str] = {
    "estimate": "Estimate",
    "std_error": "",
    "robust_ci": "Robust {level} CI",
    "robust_p_value": "Robust p-value",
    "bias_aware_ci": "Bias-aware {level} CI",
    "max_bias": "Worst-case bias",
    "bandwidth": "Bandwidth",
    "bandwidth_below": "Bandwidth (below)",
    "bandwidth_above": "Bandwidth (above)",
    "kernel": "Kernel",
    "degree": "Degree",
    "n_below": "Observations (below)",
    "n_above": "Observations (above)",
    "clusters": "Clusters",
    "first_stage": "First-stage estimate",
    "first_stage_std_error": "",
    "first_stage_f": "First-stage F",
}

#: Labels that differ for one kind of result (keyed by the result's class name): the balance
#: table's interval and p-value columns are the robust bias-corrected ones.
RESULT_LABELS: Mapping[str, Mapping[str, str]] = {
    "Balance": {"p_value": "Robust p-value", "ci_low": "Robust {level} CI"},
}

# Columns whose cells are coded values to spell out.
_CODED_COLUMNS = ("label", "rule")


def _level_text(level: float | None) -> str:
    return "" if level is None else f"{100 * float(level):g}%"


def interval_label(template: str, level: float | None) -> str:
    """An interval label with the confidence level filled in ("Robust 95% CI"; "Robust CI" without one)."""
    return " ".join(template.format(level=_level_text(level)).split())


def column_label(name: Any) -> str:
    """The reader's label of one machine column name (unknown names: underscores to spaces, capitalised)."""
    text = str(name)
    if text in COLUMN_LABELS:
        return COLUMN_LABELS[text]
    spaced = text.replace("_", " ").strip()
    return spaced[:1].upper() + spaced[1:]


def value_label(value: Any) -> Any:
    """A coded cell value in words; other values unchanged.

    Sensitivity rows named ``x0.5`` ... ``x2`` scale the selected bandwidth.
    """
    if not isinstance(value, str):
        return value
    if value in VALUE_LABELS:
        return VALUE_LABELS[value]
    if value.startswith("x"):
        try:
            factor = float(value[1:])
        except ValueError:
            return value
        return f"{factor:g} x selected"
    return value


def _is_missing(value: Any) -> bool:
    return value is None or (isinstance(value, float) and value != value)


def labelled_frame(df: pd.DataFrame, *, level: float | None = None, join_intervals: bool = True,
                   overrides: Mapping[str, str] | None = None) -> pd.DataFrame:
    """A copy of ``df`` with reader labels: renamed columns, joined intervals, coded values in words.

    Parameters
    ----------
    df : pandas.DataFrame
        A table with machine column names (as ``result.table()`` returns it).
    level : float, optional
        Confidence level of the intervals, named in their labels.
    join_intervals : bool, default True
        Show each pair of bounds as one interval column ("[low, high]"). False keeps two columns
        labelled "... (low)" and "... (high)" (for CSV, which must load back as numbers).
    overrides : mapping, optional
        Machine name -> label for this table only (an interval is named by its lower bound).

    Returns
    -------
    pandas.DataFrame
        The user's frame is not modified.
    """
    overrides = dict(overrides or {})
    out = pd.DataFrame(index=df.index)
    columns = [str(c) for c in df.columns]
    done: set[str] = set()
    for name in columns:
        if name in done:
            continue
        pair = next((p for p in INTERVAL_COLUMNS if name == p[0] and p[1] in columns), None)
        if pair is not None:
            label = interval_label(overrides.get(pair[0], INTERVAL_COLUMNS[pair]), level)
            low, high = df[pair[0]], df[pair[1]]
            if join_intervals:
                out[label] = [None if _is_missing(lo) and _is_missing(hi) else (lo, hi)
                              for lo, hi in zip(low, high)]
            else:
                out[f"{label} (low)"] = low.to_numpy()
                out[f"{label} (high)"] = high.to_numpy()
            done.update(pair)
            continue
        values = df[name]
        if name in _CODED_COLUMNS:
            values = values.map(value_label)
        out[overrides.get(name) or column_label(name)] = values.to_numpy()
        done.add(name)
    return out


def labelled_model(df: pd.DataFrame, *, title: str, notes: Iterable[str] = (), level: float | None = None,
                   join_intervals: bool = True, decimals: int = 3, label: str | None = None,
                   overrides: Mapping[str, str] | None = None) -> TableModel:
    """A :class:`TableModel` of ``df`` with reader labels (see :func:`labelled_frame`)."""
    frame = labelled_frame(df, level=level, join_intervals=join_intervals, overrides=overrides)
    return from_dataframe(frame, title=title, notes=notes, decimals=decimals, label=label,
                          index=False if df.index.name is None else None)


def _level_of(result: Any) -> float | None:
    level = getattr(result, "level", None)
    if level is None:
        fits = getattr(result, "fits", ()) or ()
        level = getattr(fits[0], "level", None) if fits else None
    return None if level is None else float(level)


def result_model(result: Any, *, join_intervals: bool = True, title: str | None = None,
                 decimals: int = 3, caution: bool = True) -> TableModel:
    """The export model of any result (``table()``, ``title()``, ``notes()``, ``warnings``), labelled.

    Parameters
    ----------
    result : a seamline result (Fit, Sensitivity, Balance, DensityTest, Placebo, Donut, Bins,
        ScoreProfile, Checks) or anything with the same four members
    join_intervals : bool, default True
        False for CSV (two labelled bound columns).
    title : str, optional
        Replaces the result's own title.
    decimals : int, default 3
    caution : bool, default True
        False on a board, which states the caution once (header and methods paragraph), not
        under every table.

    Returns
    -------
    TableModel
    """
    notes = [str(n) for n in result.notes()]
    if not caution:
        notes = [n for n in (n.replace(CAUTION, "").strip() for n in notes) if n]
    notes += [f"Warning: {w}" for w in (getattr(result, "warnings", ()) or ())]
    return labelled_model(result.table(), title=result.title() if title is None else title, notes=notes,
                          level=_level_of(result), join_intervals=join_intervals, decimals=decimals,
                          overrides=RESULT_LABELS.get(type(result).__name__))


#: Formats of :func:`export_table`.
TABLE_FORMATS = ("latex", "markdown", "html", "csv", "text")


def export_table(result: Any, fmt: str, *, title: str | None = None) -> str:
    """Any result (or a plain DataFrame such as the bandwidth rules) rendered for a reader.

    The one entry point for a board's table exports and panel tables: reader labels, notes and
    warnings under the table, full precision in CSV.

    Parameters
    ----------
    result : a seamline result or a pandas DataFrame with machine column names
    fmt : "latex", "markdown", "html", "csv" or "text"
    title : str, optional
        The caption (default: the result's own title; required wording for a DataFrame).

    Returns
    -------
    str
    """
    from ..options import check_option
    from .render import to_csv, to_html, to_latex, to_markdown

    fmt = check_option("fmt", fmt, TABLE_FORMATS)
    join = fmt != "csv"
    if isinstance(result, pd.DataFrame):
        model = labelled_model(result, title=title or "", join_intervals=join)
    else:
        model = result_model(result, join_intervals=join, title=title, caution=False)
    if fmt == "text":
        grid = [[model.display(i, j) for j in range(len(model.columns))] for i in range(len(model.rows))]
        lines = [model.title] if model.title else []
        lines += [pd.DataFrame(grid, columns=list(model.columns)).to_string(index=False), *model.notes]
        return "\n".join(lines) + "\n"
    return {"latex": to_latex, "markdown": to_markdown, "html": to_html, "csv": to_csv}[fmt](model)
