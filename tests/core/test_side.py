"""Sides derived from an already sorted side (donut, placebo cutoff) against sides prepared from scratch.

Reference: a first-principles preparation written in the test (numpy sort of the kept rows, distances
from the cutoff, variables centred on the side mean), and seamline's own from-scratch preparation of
a DataFrame holding only the rows that remain; no derived side may need a sort.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from seamline.core.side import DISTINCT_COUNTED, RunResiduals, Side
from seamline.data import DesignData

RTOL = 1e-12   # values centred on another mean, offsets added back: rounding in the last digit


def raw_frame(n: int = 4000, seed: int = 2) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = np.round(rng.normal(0.0, 1.0, n), 2)           # ties, as a rounded score has
    frame = pd.DataFrame({"x": x, "y": 5.0 + x + rng.normal(0, 1, n), "z": rng.normal(size=n),
                          "w": rng.uniform(0.5, 2.0, n), "g": rng.integers(0, 40, n)})
    frame.loc[::53, "y"] = np.nan
    frame.loc[::71, "x"] = np.nan
    frame.loc[::97, "w"] = 0.0
    return frame


def data_of(frame: pd.DataFrame, cutoff: float) -> DesignData:
    return DesignData(frame, score="x", cutoff=cutoff, outcomes=("y",), takeup=None, covariates=("z",),
                      cluster="g", weights="w")


def direct_side(frame: pd.DataFrame, cutoff: float, sign: int, donut: float = 0.0):
    """First principles: kept rows of one side, sorted by distance, and their variables."""
    ok = frame[["x", "y", "z", "w"]].notna().all(axis=1) & (frame["w"] > 0)
    sub = frame[ok]
    d = (sub["x"] - cutoff) * sign
    inside = (d >= donut) if sign > 0 else (d > 0) & (d >= donut)
    sub, d = sub[inside], d[inside]
    order = np.argsort(d.to_numpy(), kind="stable")
    values = sub[["y", "z"]].to_numpy()[order]
    return d.to_numpy()[order], values, sub["w"].to_numpy()[order]


def assert_same_side(side: Side, distance, values, weights) -> None:
    """Same rows, distances and weights; the same variables once the side's centring offsets
    (its own means, or a donut's side's) are added back."""
    assert side.n == len(distance)
    np.testing.assert_array_equal(side.distance, distance)
    # tie order may differ between sorts: compare per distinct distance through sorted (d, v) pairs
    uncentred = side.values + side.offsets
    got = np.lexsort((uncentred[:, 0], side.distance))
    want = np.lexsort((values[:, 0], distance))
    np.testing.assert_allclose(uncentred[got], values[want], rtol=RTOL, atol=1e-12)
    np.testing.assert_allclose(side.weights[got], weights[want], rtol=0, atol=0)


@pytest.mark.parametrize("donut", [0.05, 0.3, 1.0])
def test_donut_side_equals_direct_preparation(donut):
    frame = raw_frame()
    data = data_of(frame, 0.1)
    base = data.prepare(("y", "z"))
    trimmed = data.prepare(("y", "z"), donut)
    for side, sign in ((trimmed.below, -1), (trimmed.above, 1)):
        assert_same_side(side, *direct_side(frame, 0.1, sign, donut))
    # the derived preparation kept the base's spread and counts, as a from-scratch one does
    scratch = data_of(frame, 0.1)._prepare(("y", "z"), donut, 3)
    assert (trimmed.score_sd, trimmed.score_scale, trimmed.n_dropped, trimmed.n_donut, trimmed.n_clusters) == (
        scratch.score_sd, scratch.score_scale, scratch.n_dropped, scratch.n_donut, scratch.n_clusters)
    for a, b, full in ((trimmed.below, scratch.below, base.below), (trimmed.above, scratch.above, base.above)):
        np.testing.assert_array_equal(a.rows, b.rows)          # same rows, same order
        np.testing.assert_allclose(a.values + a.offsets, b.values + b.offsets, rtol=RTOL, atol=1e-12)
        assert np.shares_memory(a.values, full.values)         # a view of the full side: no copy
    assert base.below.n - trimmed.below.n + base.above.n - trimmed.above.n == trimmed.n_donut


def test_without_nearest_rebuilds_values_up_to_rounding():
    frame = raw_frame(seed=4)
    base = data_of(frame, 0.0).prepare(("y", "z"))
    dist = base.above.distance
    start = int(np.flatnonzero(np.diff(dist) > 0)[10]) + 1       # a group boundary: no tie is split
    side = base.above.without_nearest(start)                      # a view, centred on the side's means
    assert_same_side(side, *direct_side(frame, 0.0, 1, donut=dist[start]))
    assert side.rows is not None and len(side.rows) == side.n


@pytest.mark.parametrize("side_name, placebo", [("below", -0.6), ("above", 0.45)])
def test_one_side_copy_equals_a_design_of_that_side(side_name, placebo):
    frame = raw_frame(seed=6)
    parent = data_of(frame, 0.1)
    parent.sorted_rows(("y",))
    copy = parent.one_side(side_name, placebo)
    rows = frame["x"] >= 0.1 if side_name == "above" else frame["x"] < 0.1
    scratch = data_of(frame[rows].reset_index(drop=True), placebo)
    got, want = copy.prepare(("y",)), scratch.prepare(("y",))
    assert (got.n_dropped, got.n_total, got.n_clusters) == (want.n_dropped, want.n_total, want.n_clusters)
    assert got.score_sd == want.score_sd and got.score_scale == want.score_scale
    for a, b in ((got.below, want.below), (got.above, want.above)):
        np.testing.assert_array_equal(a.distance, b.distance)
        ia, ib = np.lexsort((a.values[:, 0], a.distance)), np.lexsort((b.values[:, 0], b.distance))
        np.testing.assert_allclose(a.values[ia], b.values[ib], rtol=RTOL, atol=1e-12)
        np.testing.assert_array_equal(a.weights[ia], b.weights[ib])


def test_one_side_copy_does_not_sort(monkeypatch):
    frame = raw_frame(seed=8)
    parent = data_of(frame, 0.0)
    parent.sorted_rows(("y",))
    copy = parent.one_side("above", 0.5)

    def no_sort(*args, **kwargs):
        raise AssertionError("a one-sided copy must read its order off its parent's")

    monkeypatch.setattr(np, "argsort", no_sort)
    copy.prepare(("y",))
    parent.prepare(("y",), 0.2)       # a donut of the parent: no sort either


def test_a_donut_counts_tied_distances_as_a_fresh_side_does():
    # Reference: numpy's own count of distinct values (np.unique) of the remaining distances, capped
    # at DISTINCT_COUNTED (every caller compares the count with less), and a Side built on those
    # distances from scratch; asked in any order (a side keeps the group starts it has scanned).
    frame = raw_frame(seed=9)
    base = data_of(frame, 0.0).prepare(("y",))
    dist = base.above.distance
    start = int(np.flatnonzero(np.diff(dist) > 0)[25]) + 1       # a group boundary, as a donut cuts
    side = base.above.without_nearest(start)
    fresh = Side(1, dist[start:].copy(), side.values + side.offsets, None, None, 3)
    for n_rows in (side.n, 7, 0, 50, 1, side.n // 2, 3):
        want = min(len(np.unique(dist[start:][:n_rows])), DISTINCT_COUNTED)
        assert side.distinct_within(n_rows) == fresh.distinct_within(n_rows) == want
    for needed in (2, 10, 40):
        assert side.bandwidth_for_distinct(needed, "triangular") == fresh.bandwidth_for_distinct(needed, "triangular")
        assert side.bandwidth_for_distinct(needed, "uniform") == np.unique(dist[start:])[needed - 1]


@pytest.mark.parametrize("values", [100, 5, 40_000])
def test_distinct_distances_of_a_long_side_are_counted_as_numpy_counts_them(values):
    # Long sides scanned in several steps: few tied values, a score with five, a continuous one.
    # Reference: np.unique of the first rows, capped at DISTINCT_COUNTED.
    rng = np.random.default_rng(values)
    dist = np.sort(np.floor(rng.uniform(0, values, 60_000)) / values)
    side = Side(1, dist, rng.normal(size=(dist.size, 1)), None, None, 3)
    for n_rows in (30_000, 10, 60_000, 4_097, 0, 12_345):
        assert side.distinct_within(n_rows) == min(len(np.unique(dist[:n_rows])), DISTINCT_COUNTED)
    for needed in (3, 5, 6, 20):
        unique = np.unique(dist)
        got = side.bandwidth_for_distinct(needed, "uniform")
        assert (got == unique[needed - 1]) if needed <= len(unique) else np.isnan(got)


def test_a_joint_preparation_stacked_from_single_ones_equals_a_fresh_one():
    # The joint balance test's preparation is stacked from the per-covariate ones when they hold the
    # same rows (DesignData._stacked); reference: the same preparation made directly on a fresh design.
    frame = raw_frame(seed=12).dropna().reset_index(drop=True)
    frame["z2"] = frame["z"] ** 2

    def data() -> DesignData:
        return DesignData(frame, score="x", cutoff=0.0, outcomes=("y",), takeup=None, covariates=("z", "z2"),
                          cluster="g", weights="w")
    stacked_data = data()
    for v in ("z", "z2"):
        stacked_data.prepare((v,))
    stacked = stacked_data.prepare(("z", "z2"))
    assert stacked is not None and stacked_data._stacked(("z", "z2"), 0.0, 3) is not None
    fresh = data().prepare(("z", "z2"))
    for a, b in ((stacked.below, fresh.below), (stacked.above, fresh.above)):
        np.testing.assert_array_equal(a.distance, b.distance)
        np.testing.assert_array_equal(a.values, b.values)       # bit for bit
        np.testing.assert_array_equal(a.offsets, b.offsets)
        np.testing.assert_array_equal(a.rows, b.rows)
    assert (stacked.n_dropped, stacked.score_sd, stacked.n_total) == (fresh.n_dropped, fresh.score_sd, fresh.n_total)


def test_a_donut_reads_its_neighbour_residuals_off_its_full_side_in_any_slice():
    # A donut side's residuals are its first J groups computed afresh and a view of the full
    # side's beyond them (RunResiduals). Reference: neighbor_residuals run on the donut side's own
    # rows from scratch (itself checked against a brute-force search in tests/core).
    from seamline.core.neighbors import neighbor_residuals
    frame = raw_frame(seed=14)
    base = data_of(frame, 0.0).prepare(("y", "z"))
    full = base.above
    full.nn_residuals()
    start = int(np.flatnonzero(np.diff(full.distance) > 0)[30]) + 1
    side = full.without_nearest(start)
    got = side.nn_residuals()
    assert isinstance(got, RunResiduals) and 0 < len(got.head) < side.n
    want, _ = neighbor_residuals(side.distance, side.values, side.neighbors)
    n = side.n
    for rows in (slice(0, n), slice(0, 2), slice(1, 9), slice(5, n // 2), slice(n // 3, n), slice(n, n)):
        np.testing.assert_allclose(got[rows], want[rows], rtol=1e-9, atol=1e-12)
        np.testing.assert_allclose(got[rows, 1], want[rows, 1], rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(np.asarray(got), want, rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize("side_name, placebo", [("below", -0.6), ("above", 0.45)])
def test_a_placebo_side_is_a_view_of_its_parents_prepared_side(side_name, placebo):
    # Once the parent has prepared its sides, a placebo cutoff's sides are views of them (values
    # centred on the parent side's means, weights and clusters as they are). Reference: a design
    # built from scratch on that side's rows.
    frame = raw_frame(seed=16)
    frame = frame[frame.y.notna()].reset_index(drop=True)   # the parent's rows for y: its score order
    parent = data_of(frame, 0.1)
    full = parent.prepare(("y",))
    copy = parent.one_side(side_name, placebo)
    rows = frame["x"] >= 0.1 if side_name == "above" else frame["x"] < 0.1
    scratch = data_of(frame[rows].reset_index(drop=True), placebo)
    got, want = copy.prepare(("y",)), scratch.prepare(("y",))
    for a, b in ((got.below, want.below), (got.above, want.above)):
        assert any(np.shares_memory(a.values, s.values) for s in (full.below, full.above))
        np.testing.assert_array_equal(a.distance, b.distance)
        ia, ib = np.lexsort((a.values[:, 0], a.distance)), np.lexsort((b.values[:, 0], b.distance))
        np.testing.assert_allclose((a.values + a.offsets)[ia], (b.values + b.offsets)[ib], rtol=RTOL, atol=1e-12)
        np.testing.assert_array_equal(a.weights[ia], b.weights[ib])
        pairs = set(zip(a.clusters[ia], b.clusters[ib]))     # the same clusters (coded per design)
        assert len(pairs) == len(set(a.clusters)) == len(set(b.clusters))
