"""Density (manipulation) tests at the cutoff: the front door of the pure numerical cores.

Two published methods, each in its own module, both on the score prepared once as each side's
sorted scores (``density_sample.SortedScores``, read in place):

* "local-cdf" (``density_local_cdf``): the local polynomial density estimator built on the
  empirical distribution function (Cattaneo, Jansson & Ma 2020, JASA 115(531): 1449-1455;
  METHODS section 8.2);
* "binned" (``density_binned``): the binned log-difference test (McCrary 2008, Journal of
  Econometrics 142(2): 698-714; METHODS section 8.1).

``density_test(score, cutoff, method=...)`` takes a score array in any order;
``density_test_sorted(below, above, cutoff, method=...)`` takes each side's scores already in
ascending order (a design's kept sorted score, or a partitioned dataset sorted side by side) and
copies nothing. Results (``density_results``) are frozen dataclasses; nothing is printed here.
Sides: "below" is X < c and "above" is X >= c (METHODS 0.2).
"""
from __future__ import annotations

import inspect

from ..errors import InvalidOptionError, shown
from ..options import DENSITY_METHODS, check_option
from .density_binned import (  # noqa: F401  (public names of the binned test, importable from here)
    MCCRARY_KAPPA,
    MCCRARY_R_STAR,
    binned_bandwidth,
    binned_bin_width,
    binned_density_test,
    binned_test_sorted,
)
from .density_local_cdf import (  # noqa: F401  (the tests reach _Sample, _cdf_fit, _density_var here)
    _cdf_fit,
    _density_var,
    _Sample,
    local_cdf_bandwidth,
    local_cdf_density_test,
    local_cdf_test_sorted,
)
from .density_results import DensityEstimate, DensityGrid, DensityHistogram, with_level
from .density_sample import SortedScores, sorted_sides, tie_share

__all__ = [
    "DensityEstimate",
    "DensityGrid",
    "DensityHistogram",
    "SortedScores",
    "binned_bandwidth",
    "binned_bin_width",
    "binned_density_test",
    "density_test",
    "density_test_sorted",
    "local_cdf_bandwidth",
    "local_cdf_density_test",
    "tie_share",
    "with_level",
]


def _checked_options(method: str, func, options: dict) -> str:
    method = check_option("method", method, DENSITY_METHODS)
    allowed = [name for name, par in inspect.signature(func).parameters.items()
               if par.kind is inspect.Parameter.KEYWORD_ONLY]
    unknown = sorted(set(options) - set(allowed))
    if unknown:
        raise InvalidOptionError(
            f"`{unknown[0]}` must be an option of the {shown(method)} density method; got {unknown}. "
            f"Use only {', '.join(allowed)}.")
    return method


def density_test(score, cutoff: float, *, method: str = "local-cdf", **options) -> DensityEstimate:
    """Density test at the cutoff by ``method`` ("local-cdf" or "binned"); options pass through.

    See :func:`local_cdf_density_test` and :func:`binned_density_test` for the options of each.
    """
    method = check_option("method", method, DENSITY_METHODS)
    func = local_cdf_density_test if method == "local-cdf" else binned_density_test
    _checked_options(method, func, options)
    return func(score, cutoff, **options)


def density_test_sorted(below, above, cutoff: float, *, method: str = "local-cdf",
                        **options) -> DensityEstimate:
    """Density test at the cutoff from each side's scores already in ascending order.

    Parameters
    ----------
    below : 1-D float64 array, the scores < ``cutoff`` in ascending order (finite).
    above : 1-D float64 array, the scores >= ``cutoff`` in ascending order (finite).
    cutoff : the cutoff c.
    method : "local-cdf" or "binned"; the other options are those of
        :func:`local_cdf_density_test` / :func:`binned_density_test`.

    Returns
    -------
    DensityEstimate
        For "local-cdf", equal bit for bit to ``density_test(np.concatenate((below, above)),
        cutoff)``. For "binned" with the default bin width, the sd behind it is summed over the
        sorted scores, so it can differ from the input order's in the last digits (pass
        ``bin_width=binned_bin_width(score)`` for the same number).

    Notes
    -----
    The arrays are read in place, never copied or written (float64 arrays are used as they are;
    others are converted once). Working memory beyond them: the local-CDF window engines' block
    tables, about 60 numbers per 512 rows (under one byte per row), and chunks of 65536 rows.
    Checks read each array once (ascending, finite at the ends, on the right side of the cutoff).
    """
    func = local_cdf_test_sorted if check_option("method", method, DENSITY_METHODS) == "local-cdf" \
        else binned_test_sorted
    _checked_options(method, func, options)
    sample = sorted_sides(below, above, float(cutoff))
    return func(sample, **options)
