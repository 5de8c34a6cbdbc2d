"""Results re-reported at another confidence level, from their stored estimates and standard errors.

A board computes every result once, at the reference level 0.95, and shows it at the level the
user picked. The level changes only the width of normal intervals (estimate +/- z * standard
error, z the normal quantile at 0.5 + level / 2); estimates, standard errors, p-values and test
statistics do not move. So a level change costs no fit, no density test and no bandwidth
selection: ``at_level`` rebuilds each interval from the stored centre and half-width. A fit is
re-reported by ``Fit.with_level``; rows built from fits (sensitivity, placebo, donut, balance) are
rebuilt from the re-reported fits.

Nothing here imports IPython, widgets or charts.
"""
from __future__ import annotations

from dataclasses import replace
from typing import Any

import numpy as np
from scipy import special

from ..results.diagnostics import Balance, Bins, DensityTest, Donut, Placebo, Sensitivity, fit_row
from ..results.fit import Fit

__all__ = ["REFERENCE_LEVEL", "at_level"]

#: Every board result is computed at this level and re-reported at the board's level.
REFERENCE_LEVEL = 0.95


def _z(level: float) -> float:
    # special.ndtri is what stats.norm.ppf computes, without the distribution machinery's checks
    # (about 0.5 ms a call: a level change re-reports dozens of intervals)
    return float(special.ndtri(0.5 + level / 2.0))


def _widen(low, high, ratio: float):
    """A symmetric interval (centre +/- half-width) with its half-width scaled by ``ratio``."""
    low, high = np.asarray(low, dtype=float), np.asarray(high, dtype=float)
    centre, half = (low + high) / 2.0, (high - low) / 2.0
    return centre - ratio * half, centre + ratio * half


def _pair(interval, ratio: float) -> tuple[float, float]:
    low, high = _widen(interval[0], interval[1], ratio)
    return (float(low), float(high))


def _density(result: DensityTest, level: float, ratio: float) -> DensityTest:
    est = result.estimate
    grid = est.grid
    low, high = _widen(grid.ci_low, grid.ci_high, ratio)
    for band in (low, high):
        band.setflags(write=False)
    new_grid = replace(grid, ci_low=low, ci_high=high)
    new_est = replace(est, level=level, ci_below=_pair(est.ci_below, ratio), ci_above=_pair(est.ci_above, ratio),
                      grid=new_grid)
    return replace(result, level=level, ci_below=_pair(result.ci_below, ratio),
                   ci_above=_pair(result.ci_above, ratio), estimate=new_est)


def _bins(result: Bins, level: float, ratio: float) -> Bins:
    binned = result.binned
    z = _z(level)
    mean, se = np.asarray(binned.mean), np.asarray(binned.std_error)
    new_binned = replace(binned, level=level, ci_low=mean - z * se, ci_high=mean + z * se)
    curve = result.curve_frame.copy()
    curve["ci_low"], curve["ci_high"] = _widen(curve["ci_low"].to_numpy(), curve["ci_high"].to_numpy(), ratio)
    fit = None if result.fit is None else result.fit.with_level(level)
    return replace(result, level=level, binned=new_binned, curve_frame=curve, fit=fit)


def _rows_from_fits(rows, fits, level: float) -> tuple[tuple[dict, ...], tuple[Fit, ...]]:
    new_fits = tuple(f.with_level(level) for f in fits)
    return tuple({**row, **fit_row(f)} for row, f in zip(rows, new_fits)), new_fits


def _balance(result: Balance, level: float) -> Balance:
    fits = tuple(f.with_level(level) for f in result.fits)
    rows = []
    for row, f in zip(result.rows, fits):
        low, high = f.robust_conf_int
        rows.append({**row, "ci_low": low, "ci_high": high})
    return replace(result, rows=tuple(rows), fits=fits, level=level)


def at_level(result: Any, level: float) -> Any:
    """``result`` (computed at ``REFERENCE_LEVEL``) as reported at ``level``.

    Parameters
    ----------
    result : a Fit, DensityTest, Bins, Balance, Sensitivity, Placebo or Donut; anything else
        (score profile, checks, tables of bandwidths, non-results) has no interval and is returned
        as it is.
    level : confidence level in (0, 1)

    Returns
    -------
    The same kind of object; equal to the result computed at ``level`` directly, up to rounding.
    """
    if level == REFERENCE_LEVEL:
        return result
    ratio = _z(level) / _z(REFERENCE_LEVEL)
    if isinstance(result, Fit):
        return result.with_level(level)
    if isinstance(result, DensityTest):
        return _density(result, level, ratio)
    if isinstance(result, Bins):
        return _bins(result, level, ratio)
    if isinstance(result, Balance):
        return _balance(result, level)
    if isinstance(result, (Sensitivity, Placebo, Donut)):
        rows, fits = _rows_from_fits(result.rows, result.fits, level)
        return replace(result, rows=rows, fits=fits)
    return result
