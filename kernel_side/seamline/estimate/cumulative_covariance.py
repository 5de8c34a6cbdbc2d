"""Covariance of the estimates at adjacent cumulative cutoffs, which share observations.

The design at c_k uses the observations in (c_{k-1}, c_{k+1}) and the one at c_{k+1} those in
(c_k, c_{k+2}); both use the observations in (c_k, c_{k+1}), the first as its treated side and the
second as its untreated side. Each bias-corrected estimate is a linear smoother sum_i a_i Y_i, and
its robust variance is sum_i (a_i e_i)^2 with e_i the residual its variance uses (nearest-neighbour
or HC). The stacked sandwich estimates

    Cov(t_k, t_{k+1}) = sum over shared i of (a_{k,i} e_{k,i}) (a_{k+1,i} e_{k+1,i}),

which is zero when the two robust windows do not overlap. Observations are matched by their score
and outcome values (ties in both are interchangeable). Computed for sharp designs without
covariate adjustment or clusters; otherwise ``None`` and the caller treats the estimates as
independent.
"""
from __future__ import annotations

import numpy as np

from .options import FitSpec

HC_POWER = {"hc0": 0, "hc1": 0, "hc2": 1, "hc3": 2}


def _spec(design, fit_options: dict) -> FitSpec:
    """The resolved specification of ``design.fit(**fit_options)``: the key of that fit in the cache."""
    fit = design.fit(**{k: v for k, v in fit_options.items() if k != "level"})
    return next(spec for spec, cached in design._fits.items() if cached is fit)


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
    if spec_l.adjust:
        return None
    x_l, u_l, f_l = _terms(left, spec_l, 1)      # the left design's treated (above) side
    x_r, u_r, f_r = _terms(right, spec_r, 0)     # the right design's untreated (below) side
    keep = x_l > left.cutoff                     # the right design starts strictly above c_k
    x_l, u_l = x_l[keep], u_l[keep]
    if len(x_l) != len(x_r) or not np.array_equal(x_l, x_r):
        return None
    return float(np.sqrt(f_l * f_r) * np.sum(u_l * u_r))
