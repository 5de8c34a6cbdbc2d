"""Binning with a sort the caller already made equals binning that sorts for itself.

Reference: first principles in the test (numpy searchsorted of each score among the bin edges, a
stable numpy sort for the spacings sums, numpy least squares for the quartic pilot) and the same
core call without the ``order`` argument.
"""
from __future__ import annotations

import numpy as np
import pytest

from seamline.core.binning import _side_bins, _side_constants, binned_means
from seamline.errors import InvalidOptionError

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


@pytest.mark.parametrize("side", ["below", "above"])
@pytest.mark.parametrize("weighted", [False, True])
@pytest.mark.parametrize("tied", [False, True])
def test_constants_equal_a_least_squares_quartic(side, weighted, tied):
    # Reference: numpy least squares of the outcome on powers of (x - c)/span (degree 4), the
    # residuals and derivative from numpy's polynomial module, and the spacings sums written out
    # over a stable numpy sort (ties in input order).
    rng = np.random.default_rng(12)
    x = rng.uniform(-1, 0, 3000) if side == "below" else rng.uniform(0, 1, 3000)
    x = np.round(x, 2) if tied else x
    y = np.exp(x) + 0.5 * x ** 3 + rng.normal(0, 0.1, x.size)
    w = rng.uniform(0.5, 2.0, x.size) if weighted else None
    k = _side_constants(x, y, w, 0.0, side, 4)
    xs_order = np.argsort(x, kind="stable")
    xs, ys = x[xs_order], y[xs_order]
    span = abs((xs[0] if side == "below" else xs[-1]) - 0.0)
    u = xs / span
    sw = np.ones(x.size) if w is None else np.sqrt(w[xs_order])
    coef = np.linalg.lstsq(np.vander(u, 5, increasing=True) * sw[:, None], ys * sw, rcond=None)[0]
    resid = ys - np.polynomial.polynomial.polyval(u, coef)
    slope = np.polynomial.polynomial.polyval(u, np.polynomial.polynomial.polyder(coef)) / span
    s2, d = resid ** 2, np.diff(xs)
    trapezoid = np.sum(0.5 * (s2[:-1] + s2[1:]) * d)
    trapezoid += s2[-1] * (0.0 - xs[-1]) if side == "below" else s2[0] * (xs[0] - 0.0)
    assert k.pilot_degree == 4
    np.testing.assert_allclose(
        [k.bias_equal_width, k.variance_equal_width, k.bias_equal_count, k.average_variance],
        [span ** 2 / 12 * np.mean(slope ** 2), trapezoid / span,
         x.size * np.sum(slope[1:-1] ** 2 * d[:-1] * d[1:]) / 12, np.mean(s2)], rtol=1e-9)


def test_an_order_that_does_not_sort_is_refused():
    rng = np.random.default_rng(3)
    x = rng.normal(size=200)
    y = rng.normal(size=200)
    with pytest.raises(InvalidOptionError, match="`order` must sort `score` ascending"):
        binned_means(x, y, 0.0, order=np.arange(200))
    with pytest.raises(InvalidOptionError, match="`order` must hold one integer position"):
        binned_means(x, y, 0.0, order=np.argsort(x)[:-1])


def test_assignment_built_on_first_use_equals_a_search_per_score():
    # Reference: numpy searchsorted of each score among the reported edges of its side
    rng = np.random.default_rng(5)
    x = rng.uniform(-1, 1, 4000)
    y = x + rng.normal(0, 0.3, x.size)
    res = binned_means(x, y, 0.2, number=(9, 6), order=np.argsort(x))
    below = x < 0.2
    edges_below = np.r_[res.left[:9], res.right[8]]
    edges_above = np.r_[res.left[9:], res.right[-1]]
    expected = np.where(below, np.clip(np.searchsorted(edges_below, x, side="right") - 1, 0, 8),
                        9 + np.clip(np.searchsorted(edges_above, x, side="right") - 1, 0, 5))
    np.testing.assert_array_equal(res.assignment, expected)
    assert not res.assignment.flags.writeable


@pytest.mark.parametrize("number", [(12, 9), (2500, 2600)])
def test_standard_errors_equal_a_groupby_with_few_or_many_bins(number):
    # Reference: pandas groupby of the outcome by the reported assignment (standard error of the
    # mean, ddof 1); few bins are summed bin by bin, many through one repeat of the means.
    import pandas as pd
    rng = np.random.default_rng(6)
    x = rng.uniform(-1, 1, 12000)
    y = np.sin(3 * x) + rng.normal(0, 0.2, x.size)
    res = binned_means(x, y, 0.0, number=number, method="equal-count", order=np.argsort(x))
    grouped = pd.Series(y).groupby(res.assignment).agg(["mean", "sem", "size"])
    np.testing.assert_array_equal(res.count, grouped["size"])
    np.testing.assert_allclose(res.mean, grouped["mean"], rtol=RTOL)
    np.testing.assert_allclose(res.std_error, grouped["sem"], rtol=1e-10)
