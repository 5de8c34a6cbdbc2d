"""The joint test of balance: no jump in any covariate, a Wald test on the stacked robust estimates.

Each covariate keeps its own bandwidths. The estimates are linear smoothers on the same
observations (complete cases in all covariates), so their covariance is the sum over observations
of products of their influence terms a_ki e_ki: the bias-corrected smoother weights times
neighbour residuals (or the order-q fit's residuals for HC variances), or those products summed
within clusters first.

When every covariate's own preparation (made for its balance fit) holds the joint one's rows, each
covariate's side fits are its own, through the moment tables the fit already built, and its
residuals are its own side's; otherwise the joint preparation is fitted directly. Either way the
per-row terms are made ROW_BLOCK rows at a time, so that at 1e7 rows no window-long temporary is
made (fresh arrays of that size cost a page fault every 4 KB and leave the cache).
"""
from __future__ import annotations

import numpy as np
from numpy.polynomial import polynomial as P
from scipy import stats

from ..core.kernels import kernel_weights
from ..core.locpoly import SideFit
from .engine import JumpEngine

ROW_BLOCK = 1 << 16


def joint_test(design, names, fits) -> tuple[float, int, float, int]:
    """(statistic, degrees of freedom, p-value, rows used) of the joint test of ``fits``."""
    k = len(names)
    first = fits[0]
    own = _own_fits(design, names, fits, first.donut)
    if own is None:
        prep = design._data.prepare(tuple(names), first.donut)
        engines = [JumpEngine(prep, h=f.bandwidth, b=f.pilot_bandwidth, p=f.degree, q=f.bias_degree,
                              nu=f.derivative, kernel=f.kernel, treated_sign=design.treated_sign, n_main=k,
                              direct=True) for f in fits]
        tau = np.array([eng.jump(np.eye(k)[j], robust=True) for j, eng in enumerate(engines)])
        columns = [[(eng.fits[s], j) for j, eng in enumerate(engines)] for s in range(2)]
    else:
        prep = own[0][1]
        tau = np.array([engine.jump(np.ones(1), robust=True) for engine, _ in own])
        columns = [[(engine.fits[s], 0) for engine, _ in own] for s in range(2)]
    clustered = design.cluster is not None
    cov = np.zeros((k, k))
    cluster_codes, cluster_sums = [], []
    for s_index, side in enumerate((prep.below, prep.above)):
        terms = columns[s_index]
        rows = max(sf.side.count_positive(max(sf.h, sf.b), sf.kernel) for sf, _ in terms)
        sign = design.treated_sign * side.sign
        neighbors = first.variance == "neighbors" and not clustered
        blocks = (_contributions(terms, slice(a, min(a + ROW_BLOCK, rows)), sign, neighbors)
                  for a in range(0, rows, ROW_BLOCK))
        if clustered:
            cluster_codes.append(side.clusters[:rows])
            cluster_sums.append(np.concatenate(list(blocks), axis=1) if rows else np.zeros((k, 0)))
        else:
            for contrib in blocks:
                cov += contrib @ contrib.T
    if clustered:
        _, inv = np.unique(np.concatenate(cluster_codes), return_inverse=True)
        contrib = np.concatenate(cluster_sums, axis=1)
        sums = np.stack([np.bincount(inv, weights=contrib[j]) for j in range(k)])
        g = sums.shape[1]
        cov = g / (g - 1) * (sums @ sums.T)
    try:
        stat = float(tau @ np.linalg.solve(cov, tau))
    except np.linalg.LinAlgError:
        return float("nan"), k, float("nan"), prep.n_total
    return stat, k, float(stats.chi2.sf(stat, k)), prep.n_total


def variance_option(fit) -> str:
    return "neighbors" if fit.variance in ("neighbors", "cluster") else fit.variance


def _own_fits(design, names, fits, donut: float) -> list[tuple[JumpEngine, object]] | None:
    """Per covariate, (its engine on its own preparation, that preparation), when every one is
    made on the joint test's rows (no covariate drops a row the others keep); None otherwise."""
    data = design._data
    rows = data.sorted_rows(tuple(names))[0]
    if any(data.sorted_rows((name,))[0] is not rows for name in names):
        return None
    out = []
    for name, f in zip(names, fits):
        own = data.prepare((name,), donut)
        engine = JumpEngine(own, h=f.bandwidth, b=f.pilot_bandwidth, p=f.degree, q=f.bias_degree, nu=f.derivative,
                            kernel=f.kernel, treated_sign=design.treated_sign, n_main=1)
        out.append((engine, own))
    return out


def _contributions(terms: list[tuple[SideFit, int]], rows: slice, sign: float, neighbors: bool) -> np.ndarray:
    """(k, rows) influence terms a_ki e_ki of one block of rows of one side: per covariate, its
    side fit and its column in that fit's side."""
    out = np.empty((len(terms), rows.stop - rows.start))
    for j, (sf, column) in enumerate(terms):
        side = sf.side
        if neighbors:
            e = side.nn_residuals()[rows, column]
        else:
            e = side.values[rows, column] - P.polyval(side.sign * side.distance[rows] / sf.b, sf.beta_b[:, column])
        out[j] = sign * robust_weights(sf, rows) * e
    return out


def robust_weights(sf: SideFit, rows: slice) -> np.ndarray:
    """Bias-corrected smoother weights of one side's fit on a block of its rows (the ``abc`` of
    seamline.core.locpoly.window_arrays; zero past the fit's window)."""
    side, s = sf.side, float(sf.side.sign)
    d = side.distance[rows]
    w = side.w(rows)
    a = w * kernel_weights(sf.kernel, d / sf.h) * P.polyval(s * d / sf.h, sf.c_h)
    return a - w * kernel_weights(sf.kernel, d / sf.b) * P.polyval(s * d / sf.b, sf.c_b)
