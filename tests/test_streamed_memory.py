"""What a streamed design lets go of between calls to stay within its budget (seamline.streaming_memory).

Reference: the in-memory pandas path on the same rows (``pandas.concat`` of the pieces written to
Parquet), as in tests/test_dask_streaming.py: a window let go of and gathered again, and sorted
scores gathered again, give results within a relative 1e-8 of it, counts identical.
"""
from __future__ import annotations

import gc
import weakref

import numpy as np
import pandas as pd
import pytest

import seamline
import seamline.streaming_memory as memory
from seamline.streaming import top_bins

from _partitioned_data import KWARGS, assert_same, pieces, results

dd = pytest.importorskip("dask.dataframe")


@pytest.fixture
def no_floor(monkeypatch):
    """Small test data hold less than HOLD_FLOOR: without it, the budget is the share alone."""
    monkeypatch.setattr(memory, "HOLD_FLOOR", 0)


def test_every_result_equals_memory_when_held_data_are_let_go_of(parquet_folder, memory_design, no_floor):
    design = seamline.Design(parquet_folder, reading="streamed", **KWARGS)
    got = results(design)
    assert design._data.released >= 2            # windows and sorted scores were let go of, and came back
    assert design._data._gathered is not None     # (balance, placebo, donut: gathered, as without the budget)
    assert_same(got, results(memory_design))


ONE = dict(score="x", cutoff=0.0, outcome="y")        # two columns: a budget of 12 bytes a row


def test_the_window_goes_before_the_sorted_scores_come(parquet_folder, no_floor):
    memory_design = seamline.Design(pd.concat(pieces(), ignore_index=True), **ONE)
    design = seamline.Design(parquet_folder, reading="streamed", **ONE)
    data = design._data
    fit = design.fit()
    prep = data.window(("y",))
    rows = prep.below.n_window + prep.above.n_window
    gone = weakref.ref(prep.below.distance)
    before, engines = data.passes, len(design._engines)
    assert engines and memory.budget(data) < memory.window_bytes(data) + 8.0 * data.n_rows
    selections = dict(design._selections)
    del prep
    design.density_test()
    assert gone() is None                         # no engine, selection, side or cycle keeps the window's rows
    scores = [weakref.ref(a) for a in data._scores[None][:2]]
    assert memory.window_bytes(data) == 0 and len(design._engines) < engines
    assert data.passes == before + 1              # the score pass only
    bins = design.bins()                          # its curve needs the fit's engine: the window again
    # y drops rows of its own, so its bins sort their own scores (a score pass), then two bins
    # passes, then one pass gathers the window again
    assert data.passes == before + 1 + 1 + 2 + 1
    assert not data._scores                       # the sorted scores went to make room for it
    assert all(r() is None for r in scores)       # (the density test's engine cycle does not keep them)
    again = data.window(("y",))
    assert again.below.n_window + again.above.n_window == rows
    want = memory_design.bins()
    pd.testing.assert_frame_equal(bins.table(), want.table(), check_exact=False, rtol=1e-8, atol=0)
    pd.testing.assert_frame_equal(bins.curve_frame, want.curve_frame, check_exact=False, rtol=1e-8, atol=0)
    refit = design.fit()                          # cached: the same object, no pass
    assert refit is fit and data.passes == before + 5
    other = design.fit(bandwidth=(0.3, 0.4))      # a new fit on the window gathered again
    want_other = memory_design.fit(bandwidth=(0.3, 0.4))
    np.testing.assert_allclose(other.robust_conf_int, want_other.robust_conf_int, rtol=1e-8, atol=0)
    assert other.n_used == want_other.n_used
    # the selections were kept (their common pair is not selected again) ...
    assert all(design._selections[k][0] is sel for k, (sel, _) in selections.items())
    # ... and their per-side pair, which went with the old window, is selected on the new one
    split, want_split = design.fit(bandwidth="mse-split"), memory_design.fit(bandwidth="mse-split")
    np.testing.assert_allclose(split.bandwidth, want_split.bandwidth, rtol=1e-8, atol=0)
    np.testing.assert_allclose(split.pilot_bandwidth, want_split.pilot_bandwidth, rtol=1e-8, atol=0)
    np.testing.assert_allclose(split.robust_conf_int, want_split.robust_conf_int, rtol=1e-8, atol=0)
    passes = data.passes
    density = design.density_test()               # cached result: the sorted scores are not needed
    assert density.statistic == memory_design.density_test().statistic
    assert data.passes == passes


def test_under_the_floor_both_are_held(parquet_folder):
    design = seamline.Design(parquet_folder, reading="streamed", **KWARGS)
    design.fit(), design.density_test(), design.bins()
    assert design._data.released == 0 and design._data._scores and memory.window_bytes(design._data) > 0


def test_rows_within_bounds_the_window_from_above():
    """The summary's histogram of distances (16-bit keys) bounds the rows within a radius; the bound
    passes the count by at most the rows of the radius's own bin."""
    rng = np.random.default_rng(3)
    d = np.abs(rng.normal(size=50_000))
    bins = top_bins(d, non_negative=True)
    hist = np.bincount(bins, minlength=2 << 16)[:1 << 16]
    for radius in (0.0, 1e-3, 0.1, 0.5, 1.0, 2.5, 10.0, np.inf):
        exact = int(np.count_nonzero(d <= radius))
        bound = memory.rows_within(hist, radius)
        own = int(np.count_nonzero(bins == top_bins(np.array([min(radius, 1e308)]), non_negative=True)[0]))
        assert exact <= bound <= exact + own, radius
    assert memory.rows_within(hist, -np.inf) == 0


def test_let_go_of_means_freed_even_inside_reference_cycles(no_floor):
    """A density test's engine sits in a reference cycle with the sorted scores: letting them go
    must free them now, not when the collector next runs (disabled here, so that it cannot)."""
    rng = np.random.default_rng(8)
    x = rng.uniform(-1.0, 1.0, 20_000)
    frame = pd.DataFrame({"x": x, "y": 0.3 + x + 0.2 * (x >= 0) + rng.normal(0.0, 0.3, x.size)})
    design = seamline.Design(dd.from_pandas(frame, npartitions=3), reading="streamed", **ONE)
    gc.disable()
    try:
        design.fit()
        window = weakref.ref(design._data.window(("y",)).below.distance)
        design.density_test()
        assert window() is None
        scores = [weakref.ref(a) for a in design._data._scores[None][:2]]      # the bins share them
        design.bins()
        assert all(r() is None for r in scores)
    finally:
        gc.enable()
