"""Binned means from sorted scores and streamed outcome sums equal the binned means in memory.

Reference: ``seamline.core.binning.binned_means`` on the same rows, itself checked against first
principles in tests/core/test_binning*.py. The streamed route sums in another order, so numbers
agree to 1e-10 relative (counts, edges and numbers of bins exactly); the chunks are uneven and
folded in reverse order, to show that neither the chunking nor the order of the fold matters.
"""
from __future__ import annotations

import numpy as np
import pytest

from seamline.core.binning import binned_means
from seamline.core.bins_streamed import array_passes, binned_means_streamed, combine
from seamline.errors import InvalidOptionError

RTOL = 1e-10


def reversed_passes(x, y, w, cuts):
    """passes over uneven chunks, folded from the last chunk to the first."""
    def passes(chunk, fold):
        edges = [0, *cuts, x.size]
        parts = [chunk(x[a:b], y[a:b], None if w is None else w[a:b], a) for a, b in zip(edges[:-1], edges[1:])]
        result = parts[-1]
        for part in parts[-2::-1]:
            result = fold(part, result)
        return result
    return passes


def sides(x, cutoff):
    xs = np.sort(x)
    k = int(np.searchsorted(xs, cutoff))
    return xs[:k], xs[k:]


def compare(x, y, cutoff, w=None, **options):
    want = binned_means(x, y, cutoff, weights=w, **options)
    below, above = sides(x, cutoff)
    passes = reversed_passes(x, y, w, [7, x.size // 3, x.size // 3 + 1, x.size - 1000])
    got = binned_means_streamed(below, above, cutoff, passes, weighted=w is not None, **options)
    assert got.number == want.number
    assert np.array_equal(got.count, want.count)
    assert np.array_equal(got.left, want.left) and np.array_equal(got.right, want.right)
    for field in ("weight_sum", "mean", "score_mean", "std_error", "ci_low"):
        a, b = getattr(got, field), getattr(want, field)
        assert np.array_equal(np.isnan(a), np.isnan(b)), field
        np.testing.assert_allclose(a[~np.isnan(b)], b[~np.isnan(b)], rtol=RTOL, atol=0, err_msg=field)
    for side in ("below", "above"):
        g, e = getattr(got.selection, side), getattr(want.selection, side)
        assert (g.n, g.pilot_degree, g.support) == (e.n, e.pilot_degree, e.support)
        for field in ("bias_equal_width", "variance_equal_width", "bias_equal_count", "variance_equal_count"):
            assert getattr(g, field) == pytest.approx(getattr(e, field), rel=RTOL), (side, field)
    return got


@pytest.mark.parametrize("method", ["equal-width", "equal-count"])
@pytest.mark.parametrize("rule", ["imse", "mimic-variance"])
@pytest.mark.parametrize("weighted", [False, True])
def test_continuous_score(method, rule, weighted):
    rng = np.random.default_rng(11)
    x = rng.uniform(-1, 2, 30_000)
    y = np.sin(2 * x) + 0.4 * (x >= 0.5) + rng.normal(0, 0.3 + 0.1 * np.abs(x), x.size)
    w = rng.uniform(0.2, 3.0, x.size) if weighted else None
    compare(x, y, 0.5, w, method=method, rule=rule)


@pytest.mark.parametrize("weighted", [False, True])
def test_tied_score_equal_width(weighted):
    rng = np.random.default_rng(12)
    x = np.round(rng.normal(0, 1, 20_000), 2)
    y = x ** 2 + rng.normal(0, 1, x.size)
    w = rng.uniform(0.2, 3.0, x.size) if weighted else None
    compare(x, y, 0.1, w, method="equal-width")
    compare(x, y, 0.1, w, method="equal-width", number=(15, 4000))       # many small bins, some empty


def test_equal_count_bins_across_a_run_of_ties_are_refused():
    rng = np.random.default_rng(13)
    x = np.round(rng.normal(0, 1, 5000), 1)
    below, above = sides(x, 0.0)
    with pytest.raises(InvalidOptionError, match="inside a run of tied scores"):
        binned_means_streamed(below, above, 0.0, array_passes(x, x), method="equal-count")


def test_passes_over_other_rows_are_refused():
    rng = np.random.default_rng(14)
    x = rng.normal(size=3000)
    below, above = sides(x, 0.0)
    other = x[:-10]
    with pytest.raises(InvalidOptionError, match="`passes` must run over the rows"):
        binned_means_streamed(below, above, 0.0, array_passes(other, other))


def test_assignment_needs_the_rows():
    rng = np.random.default_rng(15)
    x = rng.normal(size=2000)
    below, above = sides(x, 0.0)
    got = binned_means_streamed(below, above, 0.0, array_passes(x, x + 1.0))
    with pytest.raises(InvalidOptionError, match="`assignment` must come from bins computed on the rows"):
        got.assignment


def test_combine_keeps_the_least_and_greatest_input_positions():
    a = {"below.sigma2": np.array([1.0]), "below.first_pos": np.array([5.0, np.nan]),
         "below.first": np.array([10.0, np.nan]), "below.last_pos": np.array([5.0, np.nan]),
         "below.last": np.array([10.0, np.nan])}
    b = {"below.sigma2": np.array([2.0]), "below.first_pos": np.array([2.0, 7.0]),
         "below.first": np.array([20.0, 30.0]), "below.last_pos": np.array([2.0, 7.0]),
         "below.last": np.array([20.0, 30.0])}
    out = combine(a, b)
    assert out["below.sigma2"][0] == 3.0
    assert out["below.first"].tolist() == [20.0, 30.0]       # position 2 comes before 5
    assert out["below.last"].tolist() == [10.0, 30.0]        # position 5 comes after 2
