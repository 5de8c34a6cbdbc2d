"""How many passes the streamed route makes, and that the fused passes keep the in-memory numbers.

Reference: the in-memory ``seamline.Design`` / ``binning.binned_means`` on the same rows (itself
checked against first principles in tests/core/test_binning*.py). The streamed bins merge per-chunk
sums of squares (Chan, Golub and LeVeque's pairwise update, common practice) instead of a second
pass over the deviations: equal up to rounding (rtol 1e-10), and exactly 0 where an outcome is
constant within a bin, as in memory.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import seamline
from seamline.core.binning import binned_means
from seamline.core.bins_streamed import array_passes, binned_means_streamed, combine, pilot_chunk

RTOL = 1e-10
KWARGS = dict(score="x", cutoff=0.0, outcome="y")
SIZES = (900, 1400, 300, 1100)


def rows(n: int, seed: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = rng.uniform(-1.0, 1.0, n)
    y = 0.4 + 0.7 * x - 0.3 * x ** 2 + 0.25 * (x >= 0) + rng.normal(0.0, 0.3, n)
    return pd.DataFrame({"x": x, "y": y})


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    path = tmp_path_factory.mktemp("passes")
    for k, n in enumerate(SIZES):
        pq.write_table(pa.Table.from_pandas(rows(n, 40 + k), preserve_index=False), path / f"part-{k}.parquet")
    return path


def counting(passes):
    calls = []

    def counted(chunk, fold):
        calls.append(chunk)
        return passes(chunk, fold)
    return counted, calls


def sides(x, cutoff):
    xs = np.sort(x)
    k = int(np.searchsorted(xs, cutoff))
    return xs[:k], xs[k:]


def close(a, b):
    assert np.array_equal(np.isnan(a), np.isnan(b))
    np.testing.assert_allclose(a[~np.isnan(b)], b[~np.isnan(b)], rtol=RTOL, atol=0)


@pytest.mark.parametrize("weighted", [False, True])
def test_pilot_sums_from_the_caller_save_a_pass(weighted):
    rng = np.random.default_rng(3)
    x = rng.uniform(-1.0, 2.0, 20_000)
    y = np.cos(x) + 0.3 * (x >= 0) + rng.normal(0.0, 0.2, x.size)
    w = rng.uniform(0.5, 2.0, x.size) if weighted else None
    below, above = sides(x, 0.0)
    chunk = pilot_chunk(0.0, abs(below[0]), above[-1])
    sums = combine(chunk(x[:7000], y[:7000], None if w is None else w[:7000], 0),
                   chunk(x[7000:], y[7000:], None if w is None else w[7000:], 7000))
    passes, calls = counting(array_passes(x, y, w, chunk_rows=4096))
    got = binned_means_streamed(below, above, 0.0, passes, weighted=weighted, pilot=(abs(below[0]), above[-1], sums))
    assert len(calls) == 2                                     # residuals and bin sums only
    alone, calls = counting(array_passes(x, y, w, chunk_rows=4096))
    plain = binned_means_streamed(below, above, 0.0, alone, weighted=weighted)
    assert len(calls) == 3
    want = binned_means(x, y, 0.0, weights=w)
    assert got.number == plain.number == want.number
    for field in ("mean", "std_error", "score_mean", "weight_sum"):
        close(getattr(got, field), getattr(want, field))
        close(getattr(plain, field), getattr(want, field))
    # spans that do not match the sorted scores: the pilot is refitted, not trusted
    passes, calls = counting(array_passes(x, y, w))
    binned_means_streamed(below, above, 0.0, passes, weighted=weighted, pilot=(1.0, 1.0, sums))
    assert len(calls) == 3


def test_constant_outcome_in_a_bin_has_zero_spread_as_in_memory():
    x = np.repeat(np.linspace(-1.0, 1.0, 41), 30)
    y = (x >= 0).astype(float)                             # a 0/1 outcome, constant on each side
    below, above = sides(x, 0.0)
    got = binned_means_streamed(below, above, 0.0, array_passes(x, y, chunk_rows=97), number=(4, 4))
    want = binned_means(x, y, 0.0, number=(4, 4))
    assert np.array_equal(got.std_error, want.std_error)   # exactly 0 in every bin
    assert np.all(want.std_error == 0.0)


def test_the_workload_passes_and_equals_memory(folder):
    """default fit + density test + bins: the bins' pilot rides on the score pass (2 bins passes)."""
    memory = seamline.Design(pd.concat([rows(n, 40 + k) for k, n in enumerate(SIZES)], ignore_index=True),
                             **KWARGS)
    design = seamline.Design(folder, reading="streamed", **KWARGS)
    fit = design.fit()
    before = design._data.passes
    density = design.density_test()
    assert design._data.passes == before + 1                 # the score pass (with the bins' pilot sums)
    bins = design.bins()
    assert design._data.passes == before + 3                 # the residual pass and the bin sums
    want = memory.fit()
    np.testing.assert_allclose(fit.estimate, want.estimate, rtol=1e-8, atol=0)
    np.testing.assert_allclose(fit.bandwidth, want.bandwidth, rtol=1e-8, atol=0)
    assert fit.n_used == want.n_used
    assert density.statistic == memory.density_test().statistic
    expected = memory.bins()
    a, b = bins.binned, expected.binned
    assert np.array_equal(a.count, b.count) and bins.number == expected.number
    assert np.array_equal(a.left, b.left)
    for field in ("mean", "std_error", "score_mean"):
        close(getattr(a, field), getattr(b, field))
    assert design._data._gathered is None


@pytest.mark.parametrize("tied", [False, True])
def test_blocked_ranks_equal_a_plain_search(tied):
    # numpy.searchsorted (side="left") is the reference for the blocked search of the residual pass
    from seamline.core.bins_streamed import _Side
    rng = np.random.default_rng(8)
    for n in (1, 255, 256, 257, 5000):
        xs = np.sort(rng.integers(0, max(n // 3, 1), n).astype(float) if tied else rng.uniform(0, 1, n))
        side = _Side(xs, -1.0, "above")
        for m in (0, 1, 700):
            q = np.sort(np.concatenate([rng.choice(xs, m), [-5.0, 5.0, xs[0], xs[-1]]]))
            assert np.array_equal(side.ranks(q), np.searchsorted(xs, q, side="left")), (n, m)


def test_bins_in_row_blocks_within_a_partition(monkeypatch):
    """Partitions split into blocks of kept rows for the chunk functions: a tied score with zero
    and missing weights gives the in-memory bins (the ties' input order survives the blocks)."""
    import dask.dataframe as dd
    import seamline.streaming_diagnostics as streamed
    monkeypatch.setattr(streamed, "BINS_ROWS", 97)
    rng = np.random.default_rng(31)
    n = 6000
    x = np.round(rng.uniform(-1.0, 1.0, n), 2)
    frame = pd.DataFrame({"x": x, "y": x ** 2 + 0.3 * (x >= 0) + rng.normal(0.0, 0.4, n),
                          "w": np.where(rng.uniform(size=n) < 0.05, 0.0, rng.uniform(0.5, 2.0, n))})
    frame.loc[::211, "w"] = np.nan
    options = dict(score="x", cutoff=0.0, outcome="y", weights="w")
    design = seamline.Design(dd.from_pandas(frame, npartitions=3), reading="streamed", **options)
    memory = seamline.Design(frame, **options)
    for method in ("equal-width", None):
        got, want = (d.bins(method=method).binned if method else d.bins(number=(9, 13)).binned
                     for d in (design, memory))
        assert np.array_equal(got.count, want.count) and np.array_equal(got.left, want.left)
        for field in ("mean", "std_error", "score_mean", "weight_sum"):
            close(getattr(got, field), getattr(want, field))
    assert design._data._gathered is None


@pytest.mark.parametrize("weighted", [False, True])
def test_a_nearly_continuous_side_with_a_few_tied_scores(weighted):
    """A few repeated values on a continuous side (as 1e8 uniform draws give): the tied runs are
    kept per tied value, and the bins equal binned_means (reference, as above)."""
    rng = np.random.default_rng(9)
    x = rng.uniform(-1.0, 1.0, 30_000)
    x[100:140] = x[5]                      # one run of 41 equal scores
    x[200:203] = x[7]                      # and one of 4
    x[300] = x[9]                          # and a pair
    y = np.sin(3 * x) + 0.2 * (x >= 0) + rng.normal(0.0, 0.3, x.size)
    w = rng.uniform(0.5, 2.0, x.size) if weighted else None
    below, above = sides(x, 0.0)
    got = binned_means_streamed(below, above, 0.0, array_passes(x, y, w, chunk_rows=1000), weighted=weighted)
    want = binned_means(x, y, 0.0, weights=w)
    assert got.number == want.number and np.array_equal(got.count, want.count)
    for field in ("mean", "std_error", "score_mean"):
        close(getattr(got, field), getattr(want, field))
    for side in ("below", "above"):
        assert getattr(got.selection, side).variance_equal_width == pytest.approx(
            getattr(want.selection, side).variance_equal_width, rel=RTOL)


def test_window_and_score_passes_in_row_blocks(folder, monkeypatch):
    """The window pass and the score pass read each partition in blocks of rows (their pilot sums
    added block by block, the window's rows one sorted piece per block): fits, the density test and
    the bins equal the in-memory design on the same rows (uneven files; ties broken in input order
    by the stable sort of the pieces)."""
    import seamline.streaming as streaming
    monkeypatch.setattr(streaming, "PART_ROWS", 113)
    memory = seamline.Design(pd.concat([pd.read_parquet(folder / f"part-{k}.parquet") for k in range(len(SIZES))],
                                       ignore_index=True), **KWARGS)
    design = seamline.Design(folder, reading="streamed", **KWARGS)
    for options in ({}, dict(bandwidth="ik"), dict(pilot_bandwidth="two-step"), dict(bandwidth=0.9)):
        got, want = design.fit(**options), memory.fit(**options)
        assert got.n_used == want.n_used
        np.testing.assert_allclose([got.estimate, got.robust_std_error, *got.bandwidth],
                                   [want.estimate, want.robust_std_error, *want.bandwidth], rtol=RTOL)
    got, want = design.density_test(), memory.density_test()
    assert got.n_used == want.n_used and got.statistic == want.statistic and got.p_value == want.p_value
    got, want = design.bins(), memory.bins()
    assert np.array_equal(got.binned.count, want.binned.count)
    close(got.binned.mean, want.binned.mean)
    assert design._data._gathered is None


def test_both_sides_sorted_at_once_equal_one_after_the_other(monkeypatch):
    """The two sides' scores sorted in two threads are numpy's sort of each (common practice: a
    sort's result does not depend on the thread it runs in); a failure in the other thread is raised."""
    import seamline.streaming_diagnostics as sd
    rng = np.random.default_rng(4)
    below, above = rng.normal(size=3000), rng.integers(0, 50, 2500).astype(float)   # ties on one side
    want = np.sort(below), np.sort(above)
    monkeypatch.setattr(sd, "SORT_APART_FROM", 1)
    sd._sort_both(below, above)
    assert np.array_equal(below, want[0]) and np.array_equal(above, want[1])

    class Broken(np.ndarray):
        def sort(self, *args, **kwargs):
            raise MemoryError("no room to sort")
    with pytest.raises(MemoryError, match="no room"):
        sd._sort_both(rng.normal(size=10), rng.normal(size=10).view(Broken))
