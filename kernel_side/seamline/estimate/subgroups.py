"""Subgroup effects: the design's default fit within each value of a pre-treatment column, and a
chi-square test of equal effects across groups (precision weights, G - 1 degrees of freedom)."""
from __future__ import annotations

import numpy as np
import pandas as pd

from ..errors import ColumnNotFoundError, CutoffChoiceError, InvalidOptionError, shown
from ..results.designs import GroupEffects
from .effect_rows import (SHARED_CLUSTERS_ACCOUNTED, clustered_covariance, equality_test, fit_row, row_warnings,
                          shared_clusters)

MAX_GROUPS = 50     # convention: more distinct values than this is a continuous column, not groups
INDEPENDENT = "The groups are disjoint samples, so their estimates are treated as independent."
SHARED = ("Some clusters hold members of several groups, so the group estimates are correlated; this test "
          "assumes independence (conservative when the correlation is positive, not otherwise).")


def by_group(design, column: str, **fit_options) -> GroupEffects:
    """One default fit per group of ``column`` (rows with a missing group are left out)."""
    if design.cutoff_layout == "cumulative":
        c = design.cutoffs
        raise CutoffChoiceError(f"`cutoff` must be chosen first on a design with cumulative cutoffs {shown(list(c))}; got "
                                f"by_group({shown(column)}). Use design.at({c[0]:g}).by_group({shown(column)}).")
    frame = design._frame_with(column) if isinstance(column, str) else design._frame
    if not isinstance(column, str) or column not in frame.columns:
        raise ColumnNotFoundError(f"`column` must name a column of the data; got {shown(column)}. "
                                  "Check the spelling against data.columns.")
    labels = frame[column]
    groups = pd.unique(labels.dropna())
    if len(groups) > MAX_GROUPS:
        raise InvalidOptionError(f"`column` must have at most {MAX_GROUPS} groups; got {len(groups)} distinct values "
                                 f"in {shown(column)}. Group a continuous column first, e.g. with pandas.cut.")
    if len(groups) < 2:
        raise InvalidOptionError(f"`column` must have at least two groups; got {shown(list(groups))} in {shown(column)}. "
                                 "Choose a column that splits the units.")
    groups = [g.item() if hasattr(g, "item") else g for g in groups]     # plain Python labels
    try:
        groups = sorted(groups)
    except TypeError:       # mixed types: keep the order of first appearance
        pass
    values = labels.to_numpy()

    def group_design(g):
        key = ("group", column, g)
        if key not in design._subsets:
            rows = values == g
            cutoff = design._declared["cutoff"]
            if design.cutoff_layout == "column":
                # a group inside one cutoff group (a district with its own threshold) is a single-cutoff design
                own = np.unique(design._plan.per_row[rows & ~np.isnan(design._plan.per_row)])
                cutoff = float(own[0]) if len(own) == 1 else cutoff
            design._subsets[key] = design._subset(rows, cutoff)
        return design._subsets[key]

    rows = tuple(fit_row(g, lambda g=g: group_design(g), fit_options) for g in groups)
    warnings = row_warnings(rows, "group")
    missing = int(labels.isna().sum())
    if missing:
        warnings.append(f"{missing} rows with a missing {column!r} are left out of every group.")
    assumption, covariance = INDEPENDENT, None
    if design.cluster is not None and shared_clusters(design, labels.to_numpy(dtype=object)):
        covariance = clustered_covariance(rows, [group_design(g) if r.fitted else None
                                                 for g, r in zip(groups, rows)], fit_options)
        if covariance is None:
            assumption = SHARED
            warnings.append(SHARED)
        else:
            assumption = SHARED_CLUSTERS_ACCOUNTED
    outcome = next((r.fit.outcome for r in rows if r.fitted), design._outcome(fit_options.get("outcome")))
    return GroupEffects(rows=rows, equality=equality_test(rows, assumption, covariance), outcome=outcome,
                        level=fit_options.get("level", 0.95), warnings=tuple(warnings), covariance=covariance,
                        column=column)
