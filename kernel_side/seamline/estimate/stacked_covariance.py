"""Covariance between the estimates of designs that share observations or clusters.

Each bias-corrected estimate is a linear smoother sum_i a_i Y_i, and its robust variance is a sum
of squared contributions a_i e_i (e_i the residual its variance uses), summed by cluster when the
design has clusters. The stacked sandwich pairs the contributions of two designs:

* adjacent cumulative cutoffs c_k < c_{k+1} share the observations in (c_k, c_{k+1}) (the treated
  side of the first, the untreated side of the second):
  Cov(t_k, t_{k+1}) = sum over shared i of (a_{k,i} e_{k,i}) (a_{k+1,i} e_{k+1,i}), zero when the
  robust windows do not overlap; observations are matched by score and outcome (ties in both are
  interchangeable);
* designs on disjoint rows whose clusters overlap (subgroups, cutoff groups):
  Cov(t_g, t_k) = f sum over clusters c of U_{g,c} U_{k,c}, U_{g,c} the sum of design g's
  contributions in cluster c and f = sqrt(f_g f_k) the geometric mean of the two designs'
  small-sample factors, so that the diagonal is each design's own cluster-robust variance.

Computed for sharp designs without covariate adjustment; otherwise ``None`` and the caller treats
the estimates as independent.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from .options import FitSpec

HC_POWER = {"hc0": 0, "hc1": 0, "hc2": 1, "hc3": 2, "bias-reduced": 1}   # bias-reduced: its HC2 part


def _spec(design, fit_options: dict) -> FitSpec | None:
    """The resolved specification of ``design.fit(**fit_options)``: the key of that fit in the cache
    (None if the cache no longer holds it; callers then fall back to independence)."""
    fit = design.fit(**{k: v for k, v in fit_options.items() if k != "level"})
    return next((spec for spec, cached in design._fits.items() if cached is fit), None)


def _terms(design, spec: FitSpec, which: int):
    """Score, outcome and a_i e_i (signed as in the jump) on one side (0 below, 1 above), in score order."""
    engine, fuzzy, _, _ = design._engine(spec)
    side, fit, wa = engine.sides[which], engine.fits[which], engine.arrays()[which]
    if spec.variance == "neighbors":
        e = side.nn_residuals()[: wa.rows, 0]
    else:
        e = wa.resid_b[:, 0] / (1.0 - np.minimum(wa.lev_b, 1 - 1e-12)) ** (HC_POWER[spec.variance] / 2)
    u = np.zeros(side.n)
    u[: wa.rows] = engine.sign * side.sign * wa.abc * e
    x = design.cutoff + side.sign * side.distance
    y = side.values[:, 0] + side.offsets[0]
    order = np.lexsort((y, x))
    factor = 1.0
    if spec.variance == "hc1":
        n, k = engine.dof(True)
        factor = n / (n - k)
    return x[order], u[order], factor


def adjacent_covariance(left, right, fit_options: dict) -> float | None:
    """Estimated covariance of the robust estimates of two adjacent cumulative-cutoff designs."""
    if left.cluster is not None or left.takeup is not None:
        return None
    spec_l, spec_r = _spec(left, fit_options), _spec(right, fit_options)
    if spec_l is None or spec_r is None or spec_l.adjust:
        return None
    x_l, u_l, f_l = _terms(left, spec_l, 1)      # the left design's treated (above) side
    x_r, u_r, f_r = _terms(right, spec_r, 0)     # the right design's untreated (below) side
    # the shared observations: the range both sides cover (strictly above c_k, outside any donut)
    lo, hi = max(x_l[0], x_r[0]), min(x_l[-1], x_r[-1])
    if lo > hi:
        return 0.0
    keep_l, keep_r = (x_l >= lo) & (x_l <= hi), (x_r >= lo) & (x_r <= hi)
    x_l, u_l, x_r, u_r = x_l[keep_l], u_l[keep_l], x_r[keep_r], u_r[keep_r]
    if len(x_l) != len(x_r) or not np.array_equal(x_l, x_r):
        return None
    return float(np.sqrt(f_l * f_r) * np.sum(u_l * u_r))


def _cluster_scores(design, spec: FitSpec) -> tuple[pd.Series, float]:
    """Design's robust contributions summed by cluster label, and its small-sample factor."""
    engine, _, _, _ = design._engine(spec)
    _, labels = pd.factorize(design._plan.frame[design.cluster], use_na_sentinel=True)
    parts, codes = [], []
    for side, wa in zip(engine.sides, engine.arrays()):
        weight = engine.sign * side.sign * wa.abc
        inside = weight != 0
        parts.append((weight * wa.resid_b[:, 0])[inside])
        codes.append(side.clusters[: wa.rows][inside])
    sums = pd.Series(np.concatenate(parts)).groupby(np.asarray(labels)[np.concatenate(codes)]).sum()
    n, k = engine.dof(True)
    g = len(sums)
    return sums, g / (g - 1) * (n - 1) / (n - k)


def cluster_covariance(designs: list, fit_options: dict) -> np.ndarray | None:
    """Stacked cluster-robust covariance of the robust estimates of designs on disjoint rows."""
    if any(d.takeup is not None for d in designs):
        return None
    specs = [_spec(d, fit_options) for d in designs]
    if any(s is None or s.adjust for s in specs):
        return None
    scores = [_cluster_scores(d, s) for d, s in zip(designs, specs)]
    k = len(designs)
    cov = np.empty((k, k))
    for i, (u_i, f_i) in enumerate(scores):
        for j, (u_j, f_j) in enumerate(scores[: i + 1]):
            shared = u_i.index.intersection(u_j.index)
            cov[i, j] = cov[j, i] = np.sqrt(f_i * f_j) * float(u_i[shared] @ u_j[shared])
    return cov
