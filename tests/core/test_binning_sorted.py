"""Binning with a sort the caller already made equals binning that sorts for itself.

Reference: first principles in the test (numpy searchsorted of each score among the bin edges, a
stable numpy sort for the spacings sums) and the same core call without the ``order`` argument.
"""
from __future__ import annotations

import numpy as np
import pytest

from seamline.core.binning import _side_bins, _side_constants, binned_means

RTOL = 1e-12


@pytest.mark.parametrize("tied", [False, True])
@pytest.mark.parametrize("method", ["equal-width", "equal-count"])
def test_order_argument_changes_nothing(tied, method):
    rng = np.random.default_rng(4)
    x = rng.normal(size=5000)
    x = np.round(x, 1) if tied else x
    y = np.cos(x) + rng.normal(0, 0.2, x.size)
    w = rng.uniform(0.5, 2.0, x.size)
    order = np.argsort(x)                      # ties in whatever order quicksort leaves them
    a = binned_means(x, y, 0.0, method=method, weights=w)
    b = binned_means(x, y, 0.0, method=method, weights=w, order=order)
    assert a.number == b.number
    np.testing.assert_array_equal(a.assignment, b.assignment)
    np.testing.assert_allclose(b.mean, a.mean, rtol=RTOL)
    for side in ("below", "above"):
        ka, kb = getattr(a.selection, side), getattr(b.selection, side)
        np.testing.assert_allclose([kb.bias_equal_width, kb.variance_equal_width, kb.bias_equal_count],
                                   [ka.bias_equal_width, ka.variance_equal_width, ka.bias_equal_count],
                                   rtol=RTOL)


def test_equal_width_ranges_equal_a_search_per_score():
    rng = np.random.default_rng(8)
    x = np.round(rng.uniform(0, 1, 3000), 2)
    idx, edges = _side_bins(x, 0.0, "above", "equal-width", 17, np.argsort(x))
    # Reference: numpy searchsorted of every score among the edges, clipped to the bins
    np.testing.assert_array_equal(idx, np.clip(np.searchsorted(edges, x, side="right") - 1, 0, 16))


def test_spacings_sums_follow_a_stable_sort():
    # The trapezoid of squared residuals pairs the last of each run of ties with the first of the
    # next in a stable sort (input order within ties): recomputed here from numpy's stable sort.
    rng = np.random.default_rng(2)
    x = np.round(rng.uniform(-1, 0, 400), 1)
    y = rng.normal(size=x.size)
    k = _side_constants(x, y, None, 0.0, "below", 0)       # degree 0: residuals are y - mean(y)
    stable = np.argsort(x, kind="stable")
    xs, s2 = x[stable], ((y - y.mean()) ** 2)[stable]
    span = -xs[0]
    trapezoid = np.sum(0.5 * (s2[:-1] + s2[1:]) * np.diff(xs)) + s2[-1] * (0.0 - xs[-1])
    assert k.variance_equal_width == pytest.approx(trapezoid / span, rel=RTOL)
