"""The bounded-memory route for partitioned inputs (``Design(..., reading="streamed")``).

Reference: the in-memory pandas path on the same rows (``pandas.concat`` of the pieces written to
Parquet). Streamed results agree to a relative difference below 1e-8 with identical counts (they
differ from in memory only in the order of floating-point sums); results off the streamed route are
computed on the gathered columns and agree as well.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import dask.dataframe as dd

import seamline
from seamline.errors import CutoffOutOfRangeError, InvalidOptionError, NonFiniteValueError, OneSidedDataError
from seamline.streaming import GATHER_LIMIT, sort_keys

from _partitioned_data import KWARGS, REL, SIZES, assert_same, pieces, results

STREAMED_FITS = {
    "default": {},
    "manual": dict(bandwidth=(0.3, 0.4), pilot_bandwidth=0.6, variance="hc2"),
    "manual one number": dict(bandwidth=0.25, kernel="uniform"),
    "manual with selected pilot": dict(bandwidth=0.3),
    "mse-split": dict(bandwidth="mse-split"),
    "coverage": dict(bandwidth="coverage", outcome="z"),
    "two-step pilot": dict(pilot_bandwidth="two-step"),
    "ik": dict(bandwidth="ik"), "ik uniform": dict(bandwidth="ik", kernel="uniform"),
    "epanechnikov quadratic": dict(kernel="epanechnikov", degree=2),
    "hc0": dict(variance="hc0"), "hc1": dict(variance="hc1"), "hc3": dict(variance="hc3"),
    "adjusted": dict(adjust=True, variance="hc1"),
    "kink": dict(derivative=1, degree=2),
}


def same_fit(got, want, name=""):
    assert got.n_used == want.n_used and got.n_total == want.n_total, name
    assert got.n_dropped == want.n_dropped and got.n_effective_robust == want.n_effective_robust, name
    for field in ("estimate", "std_error", "bias_corrected_estimate", "robust_std_error"):
        np.testing.assert_allclose(getattr(got, field), getattr(want, field), rtol=REL, atol=0, err_msg=f"{name} {field}")
    np.testing.assert_allclose(got.bandwidth, want.bandwidth, rtol=REL, atol=0, err_msg=name)
    np.testing.assert_allclose(got.pilot_bandwidth, want.pilot_bandwidth, rtol=REL, atol=0, err_msg=name)
    np.testing.assert_allclose(got.robust_conf_int, want.robust_conf_int, rtol=REL, atol=0, err_msg=name)
    np.testing.assert_allclose(got.limits, want.limits, rtol=REL, atol=0, err_msg=name)
    assert got.warnings == want.warnings, name


def test_streamed_fits_equal_memory_without_gathering(parquet_folder, memory_design):
    design = seamline.Design(parquet_folder, reading="streamed", **KWARGS)
    assert design.streamed
    for name, options in STREAMED_FITS.items():
        options = dict(options)
        same_fit(design.fit(options.pop("outcome", None), **options),
                 memory_design.fit(STREAMED_FITS[name].get("outcome"), **options), name)
    assert design._data._gathered is None           # no fit above needed the gathered columns


DENSITY_FIELDS = ("statistic", "p_value", "density_below", "density_above", "ci_below", "ci_above", "bandwidth",
                  "tie_share")
BINNED_FIELDS = ("weight_sum", "mean", "score_mean", "std_error", "ci_low", "ci_high")


def same_density(got, want, name="", exact=False):
    assert got.n_used == want.n_used and got.n_total == want.n_total, name
    for field in DENSITY_FIELDS:
        if exact:     # local-CDF: the same arithmetic on the same sorted scores
            assert np.array_equal(getattr(got, field), getattr(want, field)), f"{name} {field}"
        else:
            np.testing.assert_allclose(getattr(got, field), getattr(want, field), rtol=REL, atol=0,
                                       err_msg=f"{name} {field}")
    assert got.warnings == want.warnings, name


def same_bins(got, want, name=""):
    a, b = got.binned, want.binned
    assert got.number == want.number and a.rule == b.rule, name
    assert np.array_equal(a.count, b.count) and list(a.side) == list(b.side), name        # counts identical
    assert np.array_equal(a.left, b.left) and np.array_equal(a.right, b.right), name      # edges exact
    for field in BINNED_FIELDS:
        np.testing.assert_allclose(getattr(a, field), getattr(b, field), rtol=REL, atol=0, equal_nan=True,
                                   err_msg=f"{name} {field}")
    for column in ("x", "fit", "ci_low", "ci_high"):
        np.testing.assert_allclose(got.curve_frame[column], want.curve_frame[column], rtol=REL, atol=0,
                                   err_msg=f"{name} curve {column}")


BIN_OPTIONS = {"default": ((), {}), "z equal-count": (("z", "equal-count"), {}),
               "numbers": ((None, "equal-width", (5, 7)), {}), "mimicking": ((), dict(rule="mimic-variance")),
               "equal-count scaled": ((None, "equal-count"), dict(scale=2.0))}


def test_density_tests_and_bins_read_only_the_sorted_score(parquet_folder, memory_design):
    """Streamed: the score gathered and sorted per side, the outcome summed in passes; nothing else
    gathered. Missing scores and outcomes, uneven files, a file with no rows near the cutoff."""
    design = seamline.Design(parquet_folder, reading="streamed", **KWARGS)
    same_density(design.density_test(), memory_design.density_test(), "local-cdf", exact=True)
    same_density(design.density_test(level=0.9), memory_design.density_test(level=0.9), "level 0.9", exact=True)
    same_density(design.density_test(degree=3, kernel="epanechnikov"),
                 memory_design.density_test(degree=3, kernel="epanechnikov"), "local-cdf cubic", exact=True)
    same_density(design.density_test("binned"), memory_design.density_test("binned"), "binned")
    same_density(design.density_test("binned", bin_width=0.01), memory_design.density_test("binned", bin_width=0.01),
                 "binned width", exact=True)
    for name, (args, options) in BIN_OPTIONS.items():
        same_bins(design.bins(*args, **options), memory_design.bins(*args, **options), name)
    assert design._data._gathered is None           # no result above gathered the design's columns
    # the density test's rows (a score) and z's bins rows (z has no missing value) are one array;
    # y drops rows of its own, so its bins sort their own scores
    assert len(design._data._scores) == 2
    below, above, _ = design._data._scores[None]
    assert len(below) + len(above) == memory_design.density_test().n_total[0] + memory_design.density_test().n_total[1]


def test_streamed_bins_with_weights_and_ties():
    """Weights (zero and missing ones), a tied score (equal-width exact; equal-count bounds inside a
    run of ties fall back to the gathered columns), on many dask partitions."""
    rng = np.random.default_rng(21)
    n = 20_000
    x = np.round(rng.normal(0.1, 1.0, n), 2)                 # ties
    w = rng.uniform(0.2, 3.0, n)
    w[::97] = 0.0
    w[5::211] = np.nan
    y = np.cos(x) + 0.3 * (x >= 0.1) + rng.normal(0, 0.5, n)
    y[3::157] = np.nan
    frame = pd.DataFrame({"x": x, "y": y, "w": w})
    kwargs = dict(score="x", cutoff=0.1, outcome="y", weights="w")
    got = seamline.Design(dd.from_pandas(frame, npartitions=7), reading="streamed", **kwargs)
    want = seamline.Design(frame, **kwargs)
    same_density(got.density_test(), want.density_test(), "weighted design, tied score", exact=True)
    same_bins(got.bins(), want.bins(), "weighted, tied")
    same_bins(got.bins(number=(20, 30)), want.bins(number=(20, 30)), "weighted, tied, numbers")
    assert got._data._gathered is None
    same_bins(got.bins(method="equal-count", number=(20, 30)), want.bins(method="equal-count", number=(20, 30)),
              "equal-count inside ties")
    assert got._data._gathered is not None          # that one needed the input order of tied rows


def test_every_result_equals_memory_on_the_streamed_route(parquet_folder, memory_design):
    """Results off the streamed route (donuts, density tests, bins, donut ...) use the gathered columns."""
    assert_same(results(seamline.Design(parquet_folder, reading="streamed", **KWARGS)), results(memory_design))


def test_a_dask_frame_with_weights_and_many_partitions():
    rng = np.random.default_rng(3)
    n = 30_000
    x = rng.normal(0.2, 1.0, n)
    w = rng.uniform(0.2, 3.0, n)
    w[::97] = 0.0                                   # zero weights: excluded, not dropped
    w[5::211] = np.nan                              # missing weights: dropped and counted
    y = np.sin(x) + 0.4 * (x >= 0.1) + rng.normal(0, 0.5, n)
    frame = pd.DataFrame({"x": x, "y": y, "w": w})
    kwargs = dict(score="x", cutoff=0.1, outcome="y", weights="w")
    lazy = dd.from_pandas(frame, npartitions=13)
    got, want = seamline.Design(lazy, reading="streamed", **kwargs), seamline.Design(frame, **kwargs)
    for options in ({}, dict(bandwidth="mse-split"), dict(bandwidth=0.5, variance="hc3"), dict(bandwidth="ik")):
        same_fit(got.fit(**options), want.fit(**options), str(options))
    assert got._data._gathered is None
    # the window holds a part of each side only: the other rows were summarised, never held
    prep = got._data.window(("y",))
    assert prep.below.n_window < prep.below.n and prep.above.n_window < prep.above.n


def test_a_window_that_widens_and_a_side_held_whole():
    """A first window too narrow for the selected bandwidths is widened, one pass at a time; a
    bandwidth past the data (a manual one) makes the window hold the whole side: still exact."""
    rng = np.random.default_rng(8)
    n = 6000
    x = rng.uniform(-1, 1, n)
    y = 2.0 * x + 0.5 * (x >= 0) + rng.normal(0, 0.2, n)     # no curvature: wide bandwidths
    frame = pd.DataFrame({"x": x, "y": y})
    lazy = dd.from_pandas(frame, npartitions=4)
    got, want = seamline.Design(lazy, reading="streamed", score="x", cutoff=0, outcome="y"), \
        seamline.Design(frame, score="x", cutoff=0, outcome="y")
    same_fit(got.fit(), want.fit(), "default")
    same_fit(got.fit(bandwidth=5.0), want.fit(bandwidth=5.0), "past the data")
    prep = got._data.window(("y",))
    assert prep.below.complete and prep.below.n_window == prep.below.n


def test_order_statistics_are_exact_with_refinement(monkeypatch):
    """Many values in one histogram bin (a discrete score) are refined on further key bits."""
    import seamline.streaming as streaming
    monkeypatch.setattr(streaming, "GATHER_LIMIT", 50)
    rng = np.random.default_rng(5)
    x = np.round(rng.normal(0, 1, 4000), 3)       # many ties, values crowd each 16-bit bin
    y = x + (x >= 0) + rng.normal(0, 1, 4000)
    frame = pd.DataFrame({"x": x, "y": y})
    got = seamline.Design(dd.from_pandas(frame, npartitions=3), reading="streamed", score="x", cutoff=0, outcome="y")
    want = seamline.Design(frame, score="x", cutoff=0, outcome="y")
    same_fit(got.fit(), want.fit(), "discrete")
    same_fit(got.fit(bandwidth="ik"), want.fit(bandwidth="ik"), "discrete ik")     # ties at the medians
    ranks = [0, 999, 1000, 2999, 3999]
    stats = got._data._order_statistics(("y",), [("score", r) for r in ranks] + [("below", 7), ("above", 1500)])
    # First principles: the order statistics of the sorted sample, bit for bit.
    assert [stats[("score", r)] for r in ranks] == [float(v) for v in np.sort(x)[ranks]]
    assert stats[("below", 7)] == float(np.sort(-x[x < 0])[7])
    assert stats[("above", 1500)] == float(np.sort(x[x >= 0])[1500])
    assert GATHER_LIMIT > 50


def test_sort_keys_keep_the_order():
    # First principles: the keys order as the floats do (negative, zero, positive, tiny and huge values).
    values = np.array([-np.inf, -1e300, -2.5, -1e-310, -0.0, 0.0, 1e-310, 3.0, 1e300, np.inf])
    keys = sort_keys(values)
    assert np.all(np.diff(keys.astype(object)) >= 0)


def test_two_worker_processes_streamed(parquet_folder, memory_design):
    import dask.distributed as distributed
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster, distributed.Client(cluster) as client:
        with distributed.get_task_stream(client) as stream:
            design = seamline.Design(parquet_folder, reading="streamed", **KWARGS)
            fit = design.fit()
            density, bins = design.density_test(), design.bins()
        assert len(client.scheduler_info()["workers"]) == 2
        ran = [str(task["key"]) for task in stream.data]
        assert sum("_summary_part" in key for key in ran) == len(SIZES)     # passes ran on the workers
        assert any("_window_part" in key for key in ran)
        assert sum("_score_part" in key for key in ran) == 2 * len(SIZES)   # density test's rows, then y's
        assert sum("_bins_part" in key for key in ran) == 2 * len(SIZES)    # the bins: residuals, bin sums
    same_fit(fit, memory_design.fit(), "cluster")
    same_density(density, memory_design.density_test(), "cluster", exact=True)
    same_bins(bins, memory_design.bins(), "cluster")
    assert design._data._gathered is None


def test_automatic_reading_streams_only_large_inputs(parquet_folder, monkeypatch):
    import seamline.streaming_route as route
    assert not seamline.Design(parquet_folder, **KWARGS).streamed           # 4960 rows: gathered
    monkeypatch.setattr(route, "STREAM_ABOVE_ROWS", 1000)
    assert seamline.Design(parquet_folder, **KWARGS).streamed
    assert not seamline.Design(parquet_folder, reading="gathered", **KWARGS).streamed


# ---- bad input ----------------------------------------------------------------------------------
def test_streamed_reading_names_what_stops_it(parquet_folder):
    with pytest.raises(InvalidOptionError, match=r"`reading` \"streamed\" needs numeric columns, one numeric cutoff "
                                                 r"and no take-up or cluster; got a cluster variable\. Use "
                                                 r"reading=\"gathered\""):
        seamline.Design(parquet_folder, reading="streamed", cluster="z", **KWARGS)
    with pytest.raises(InvalidOptionError, match=r"`reading` must be one of \"automatic\", \"streamed\", \"gathered\"; "
                                                 r"got 'stream'"):
        seamline.Design(parquet_folder, reading="stream", **KWARGS)


def test_streamed_checks_match_memory(tmp_path):
    frame = pieces()[0]
    bad = frame.assign(y=frame["y"].where(frame.index != 40, np.inf))
    pq.write_table(pa.Table.from_pandas(bad, preserve_index=False), tmp_path / "a.parquet")
    with pytest.raises(NonFiniteValueError, match=r"`outcome` column 'y' must be finite; got infinite values "
                                                  r"\(first at row 40\)"):
        seamline.Design(tmp_path, reading="streamed", **KWARGS)
    lazy = dd.from_pandas(frame, npartitions=3)
    with pytest.raises(CutoffOutOfRangeError, match=r"`cutoff` must lie within the range of score 'x'"):
        seamline.Design(lazy, reading="streamed", **{**KWARGS, "cutoff": 5.0})
    above = dd.from_pandas(frame.assign(x=frame["x"].abs()), npartitions=2)
    design = seamline.Design(above, reading="streamed", **{**KWARGS, "cutoff": float(frame["x"].abs().min())})
    with pytest.raises(OneSidedDataError, match=r"must have observations below the cutoff; got none"):
        design.fit()


def test_progress_of_the_streamed_passes(parquet_folder):
    from seamline.partitioned import reading_progress
    seen = []
    with reading_progress(lambda done, total: seen.append((done, total))):
        seamline.Design(parquet_folder, reading="streamed", **KWARGS)       # the summary pass, one task per file
    assert seen == [(k, len(SIZES)) for k in range(1, len(SIZES) + 1)]


def test_progress_of_the_score_pass_over_batches(parquet_folder, monkeypatch):
    """The score pass computes a few partitions at a time; progress counts over the whole pass."""
    import seamline.streaming_diagnostics as streamed
    from seamline.partitioned import reading_progress
    monkeypatch.setattr(streamed, "_in_flight", lambda: 3)           # batches of 3 and 1 files
    design = seamline.Design(parquet_folder, reading="streamed", **KWARGS)
    seen = []
    with reading_progress(lambda done, total: seen.append((done, total))):
        design.density_test()
    assert seen == [(k, len(SIZES)) for k in range(1, len(SIZES) + 1)]
    below, above, lengths = design._data._scores[None]
    assert list(lengths) == list(SIZES)                               # rows read per file, in order
    assert np.all(np.diff(below) >= 0) and np.all(np.diff(above) >= 0)


def test_bias_reduced_default_from_binned_moments_of_a_window(monkeypatch):
    """The default variance on wide windows sums binned moments (``core.single_row_binned``): a
    window side holds only its nearer rows, so its bins stop there (the bins past the rows a sum
    reads are never used), while the bin size follows the whole side, as in memory."""
    from seamline.core import single_row_binned
    monkeypatch.setattr(single_row_binned, "MIN_ROWS", 2_000)     # the path of windows above 30 000 rows
    rng = np.random.default_rng(17)
    n = 120_000
    x = rng.uniform(-1.0, 1.0, n)
    y = 0.5 + 0.8 * x + (3.0 * x ** 2 + 4.0 * x ** 3) * (x >= 0) + 0.2 * (x >= 0) + rng.normal(0.0, 0.3, n)
    frame = pd.DataFrame({"x": x, "y": y})
    kwargs = dict(score="x", cutoff=0.0, outcome="y")
    got = seamline.Design(dd.from_pandas(frame, npartitions=5), reading="streamed", **kwargs)
    want = seamline.Design(frame, **kwargs)
    for options in ({}, dict(bandwidth=0.2), dict(bandwidth=(0.1, 0.3))):
        same_fit(got.fit(**options), want.fit(**options), str(options))
    prep = got._data.window(("y",))
    assert prep.below.n_window < prep.below.n and prep.above.n_window < prep.above.n
    assert got._data._gathered is None
    # a wider sum after a narrower one doubles the bins; on a window they stop at its rows, and
    # they are the in-memory side's bins (first principles: the same rows in the same order)
    window, side = prep.above, want._data.prepare(("y",)).above
    single_row_binned.side_bins(window, 1, int(0.6 * window.n_window))
    bins = single_row_binned.side_bins(window, 1, window.n_window - 10)
    assert bins.starts[-1] <= window.n_window
    full = single_row_binned.side_bins(side, 1, window.n_window)
    g = len(bins.centre)
    assert np.array_equal(bins.starts, full.starts[:g + 1]) and np.array_equal(bins.centre, full.centre[:g])
    np.testing.assert_allclose(bins.moments, full.moments[:, :g], rtol=1e-9, atol=1e-9)


def test_a_fitted_window_holds_no_per_row_residuals_or_group_starts():
    """The moment tables read each slice's neighbour residuals (with J groups of ties either side)
    and distinct distances are counted from the nearest row: after the default fit the window holds
    its distances and values only, and both equal the whole window's computation. Reference: the
    in-memory design on the same rows, and ``neighbor_residuals`` of the whole window."""
    from seamline.core.neighbors import neighbor_residuals
    rng = np.random.default_rng(29)
    n = 40_000
    for x in (rng.uniform(-1.0, 1.0, n), np.round(rng.uniform(-1.0, 1.0, n), 4)):     # continuous, tied
        y = 0.5 + 0.8 * x + (2.0 * x ** 2) * (x >= 0) + 0.2 * (x >= 0) + rng.normal(0.0, 0.3, n)
        frame = pd.DataFrame({"x": x, "y": y})
        got = seamline.Design(dd.from_pandas(frame, npartitions=3), reading="streamed", score="x", cutoff=0.0,
                              outcome="y")
        want = seamline.Design(frame, score="x", cutoff=0.0, outcome="y")
        same_fit(got.fit(), want.fit(), "default")
        same_fit(got.fit(variance="neighbors"), want.fit(variance="neighbors"), "neighbors")
        prep = got._data.window(("y",))
        for side in (prep.below, prep.above):
            # no per-row residuals; group starts only of the rows scanned from the nearest one
            assert side._nn is None and (side._groups is None or side._groups[0] < side.n_window // 2)
            whole, _ = neighbor_residuals(side.distance, side.values, side.neighbors, tol=side.tie_tol)
            for size in (7, 97, 33_000):     # every row, from slices of several sizes
                pieces = [side._nn_rows(slice(a, a + size)) for a in range(0, side.n_window, size)]
                np.testing.assert_allclose(np.concatenate(pieces), whole, rtol=1e-13, atol=1e-15)
        memory = want._data.prepare(("y",))
        for side, full in ((prep.below, memory.below), (prep.above, memory.above)):
            for rows in (0, 1, 50, 3000, side.n_window):
                assert side.distinct_within(rows) == min(full.distinct_within(rows), 16)
            for needed, kernel in ((1, "triangular"), (2, "triangular"), (5, "triangular"), (2, "uniform")):
                assert side.bandwidth_for_distinct(needed, kernel) == full.bandwidth_for_distinct(needed, kernel)
