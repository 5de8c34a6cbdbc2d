"""Rows of effects from designs on subsets of the user's rows (cutoff groups, cumulative windows,
subgroups): one default fit per row, a not-fitted row with a note when that fails, and the test of
equal effects across the rows (with their covariance when they share observations or clusters)."""
from __future__ import annotations

import numpy as np
import pandas as pd

from ..core.heterogeneity import equal_effects_test, wald_equal_effects
from ..errors import SeamlineError
from ..results.designs import EffectRow, EqualityTest
from .stacked_covariance import cluster_covariance

MIN_UNITS_PER_SIDE = 20     # convention: observations needed on each side before a row is fitted
SHARED_CLUSTERS_ACCOUNTED = ("Some clusters hold units of several rows, so the estimates are correlated; the test "
                             "uses their stacked cluster-robust covariance.")


def units_per_side(design, outcome: str | None) -> tuple[int, int]:
    """Usable observations (score and outcome present) on each side of a single-cutoff design."""
    x = design._data.arrays[design.score]
    ok = ~np.isnan(x)
    name = outcome or design.outcomes[0]
    if name in design._data.arrays:
        ok &= ~np.isnan(design._data.arrays[name])
    return int(np.sum(ok & (x < design.cutoff))), int(np.sum(ok & (x >= design.cutoff)))


def fit_row(label, make_design, fit_options: dict) -> EffectRow:
    """The default fit of one cutoff's or group's design, or a not-fitted row saying why."""
    try:
        sub = make_design()
    except SeamlineError as exc:
        return EffectRow.not_fitted(label, (0, 0), str(exc))
    units = units_per_side(sub, fit_options.get("outcome"))
    if min(units) < MIN_UNITS_PER_SIDE:
        return EffectRow.not_fitted(label, units, f"too few units on one side ({units[0]} below, {units[1]} above; "
                                                  f"at least {MIN_UNITS_PER_SIDE} each are needed): not fitted. "
                                                  "Merge it with a neighbouring cutoff or group, or collect more data.")
    try:
        return EffectRow.from_fit(label, sub.fit(**fit_options))
    except SeamlineError as exc:
        return EffectRow.not_fitted(label, units, f"not fitted: {exc}")


def usable_rows(rows: tuple[EffectRow, ...]) -> list[int]:
    return [i for i, r in enumerate(rows) if r.fitted and np.isfinite(r.robust_estimate) and r.robust_std_error > 0]


def equality_test(rows: tuple[EffectRow, ...], assumption: str, covariance: np.ndarray | None = None) -> EqualityTest:
    """Chi-square test of equal effects over the fitted rows (with their covariance when given)."""
    use = usable_rows(rows)
    usable = [rows[i] for i in use]
    if len(usable) < 2:
        nan = float("nan")
        return EqualityTest(nan, max(len(usable) - 1, 0), nan, nan, nan, tuple(r.label for r in usable), assumption,
                            reason=f"{len(usable)} row(s) fitted; at least two are needed")
    estimates = np.array([r.robust_estimate for r in usable])
    if covariance is None:
        res = equal_effects_test(estimates, np.array([r.robust_std_error for r in usable]))
    else:
        res = wald_equal_effects(estimates, covariance[np.ix_(use, use)])
    return EqualityTest(res.statistic, res.df, res.p_value, res.common_estimate, res.common_std_error,
                        tuple(r.label for r in usable), assumption)


def row_warnings(rows: tuple[EffectRow, ...], what: str) -> list[str]:
    return [f"{what} {r.label if isinstance(r.label, str) else format(r.label, 'g')}: {r.note}"
            for r in rows if r.note]


def clustered_covariance(rows: tuple[EffectRow, ...], designs: list, fit_options: dict) -> np.ndarray | None:
    """Stacked cluster-robust covariance of the fitted rows (NaN for the others), or None."""
    use = [i for i, r in enumerate(rows) if r.fitted]
    cov = cluster_covariance([designs[i] for i in use], fit_options) if len(use) > 1 else None
    if cov is None:
        return None
    # The stacked sums give the correlations across rows (classic CR1 sums); each row keeps its own
    # variance, which is the bias-reduced CR2 one by default (Bell and McCaffrey 2002).
    sd = np.sqrt(np.diag(cov))
    own = np.array([rows[i].robust_std_error for i in use])
    cov = cov / np.outer(sd, sd) * np.outer(own, own)
    cov = (cov + cov.T) / 2.0
    full = np.full((len(rows), len(rows)), np.nan)
    full[np.ix_(use, use)] = cov
    full.setflags(write=False)
    return full


def shared_clusters(design, labels: np.ndarray) -> bool:
    """Whether some cluster holds rows with different labels (cutoffs or groups)."""
    codes, _ = pd.factorize(design._frame[design.cluster], use_na_sentinel=True)
    keep = codes >= 0
    pairs = pd.DataFrame({"cluster": codes[keep], "label": np.asarray(labels)[keep]}).dropna()
    return bool((pairs.groupby("cluster")["label"].nunique() > 1).any())
