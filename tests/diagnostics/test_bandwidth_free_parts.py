"""Parts of the diagnostics kept on a Design across bandwidths, and what they must not change.

A board's slider asks for bins, the score profile, placebo cutoffs and donut at one bandwidth after
another. Their bandwidth-free parts -- the binned means, the score's census (overall counts,
resolution, heaping), the placebo-cutoff designs with their prepared sides, a donut side's
neighbour residuals -- are computed once per Design. Reference: the same diagnostic on a fresh
Design that never saw another bandwidth (nothing kept), and for the donut, a fresh Design on the
rows outside the radius (a fact of the trade: a donut fit is the fit on the remaining rows).
Invented data, seeded, with a rounded score (ties) and a continuous one.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import seamline
from seamline.core.side import Side
from seamline.estimate import diagnostics, score_profile

TIGHT = dict(rtol=1e-11, atol=1e-13)   # neighbour residuals of a donut side round differently


def frame(n: int = 4000, seed: int = 9, decimals: int | None = None) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = rng.uniform(-1, 1, n)
    if decimals is not None:
        x = np.round(x, decimals)
    return pd.DataFrame({"x": x, "y": 3.0 + x + 0.4 * (x >= 0) + rng.normal(0, 0.3, n)})


def design(data):
    return seamline.Design(data, score="x", cutoff=0.0, outcome="y")


def tables_equal(got, want, **tol):
    for name in ("table", "curve"):
        if hasattr(want, name):
            pd.testing.assert_frame_equal(getattr(got, name)(), getattr(want, name)(), check_exact=not tol,
                                          **tol)


@pytest.mark.parametrize("decimals", [None, 2])
@pytest.mark.parametrize("name", ["bins", "score_profile", "placebo_cutoffs"])
def test_a_second_bandwidth_equals_a_fresh_design(name, decimals):
    data = frame(decimals=decimals)
    kept = design(data)
    getattr(kept, name)(bandwidth=0.3)                 # the parts are now kept on this design
    for h in (0.45, 0.2):
        got = getattr(kept, name)(bandwidth=h)
        want = getattr(design(data), name)(bandwidth=h)
        tables_equal(got, want)
        assert got.warnings == want.warnings


def test_the_kept_parts_are_computed_once(monkeypatch):
    counts = {"binned": 0, "census": 0, "placebo designs": 0}
    real_binned, real_census, real_placebo = diagnostics.binned_means, score_profile._census, diagnostics._placebo_design

    def count(key, real):
        def counted(*args, **kwargs):
            counts[key] += 1
            return real(*args, **kwargs)
        return counted

    monkeypatch.setattr(diagnostics, "binned_means", count("binned", real_binned))
    monkeypatch.setattr(score_profile, "_census", count("census", real_census))
    d = design(frame())
    made = []
    monkeypatch.setattr(diagnostics, "_placebo_design",
                        lambda *a: made.append(a[1:]) or real_placebo(*a))
    for h in (0.2, 0.3, 0.4):
        d.bins(bandwidth=h), d.score_profile(bandwidth=h), d.placebo_cutoffs(bandwidth=h)
    assert counts["binned"] == 1 and counts["census"] == 1
    assert len(made) == 3 * 8 and len(d._placebos) == 8         # the eight designs, kept
    d.bins(level=0.9)                                  # another level: its own binned means
    assert counts["binned"] == 2


@pytest.mark.parametrize("decimals", [None, 2])
@pytest.mark.parametrize("variance", ["neighbors", "hc1"])
def test_donut_fits_equal_fits_on_the_remaining_rows(decimals, variance):
    data = frame(decimals=decimals)
    d = design(data)
    d.fit(bandwidth=0.5, variance=variance)            # the full side's residuals exist first
    for radius in (0.013, 0.05, 0.12):
        got = d.fit(bandwidth=0.5, donut=radius, variance=variance)
        rest = data[np.abs(data.x) >= radius]
        want = design(rest).fit(bandwidth=0.5, variance=variance, pilot_bandwidth=got.pilot_bandwidth)
        np.testing.assert_allclose(got.estimate, want.estimate, **TIGHT)
        np.testing.assert_allclose([got.std_error, got.robust_std_error], [want.std_error, want.robust_std_error],
                                   **TIGHT)
        assert got.n_used == want.n_used


def test_donut_preparations_are_bounded():
    d = design(frame())
    for k in range(40):
        d.fit(bandwidth=0.5, donut=0.001 * (k + 1))
    donuts = [key for key in d._data._cache if key[1] > 0]
    assert len(donuts) == seamline.data.DONUT_PREPARATIONS


@pytest.mark.parametrize("decimals", [None, 2])
def test_placebo_fits_equal_fits_on_the_side_rows(decimals):
    # the placebo sides take their neighbour residuals from the design's own sides: the result is
    # the fit of a design holding only that side's rows (a fact of the trade: a placebo cutoff
    # uses one side's observations)
    data = frame(decimals=decimals)
    d = design(data)
    d.fit()                                            # the design's sides and residuals exist first
    result = d.placebo_cutoffs(bandwidth=0.2)
    for row, got in zip(result.rows, result.fits):
        rows = data[data.x >= 0] if row["side"] == "above" else data[data.x < 0]
        want = seamline.Design(rows, score="x", cutoff=row["cutoff"], outcome="y").fit(
            bandwidth=0.2, pilot_bandwidth=got.pilot_bandwidth)
        np.testing.assert_allclose(got.estimate, want.estimate, **TIGHT)
        np.testing.assert_allclose([got.std_error, got.robust_std_error], [want.std_error, want.robust_std_error],
                                   **TIGHT)
        assert got.n_used == want.n_used


@pytest.mark.parametrize("decimals", [None, 2])
def test_donut_and_placebo_sides_hold_the_values_a_gather_gives(decimals):
    # a design's own sides hold the rows' values gathered, bit for bit; a donut's side and a
    # placebo cutoff's side are views of a full side's, centred on that side's means: the rows'
    # values once the offsets are added back, up to rounding
    data = frame(decimals=decimals)
    d = design(data)
    prepared = d._data
    for source in (prepared, prepared.one_side("above", 0.4), prepared.one_side("below", -0.3)):
        source.prepare(("y",))
        for radius in (0.0, 0.02, 0.1):
            got = source.prepare(("y",), radius)
            for side in (got.below, got.above):
                raw = data["y"].to_numpy()[side.rows][:, None]
                if radius > 0 or source is not prepared:
                    np.testing.assert_allclose(side.values + side.offsets, raw, rtol=1e-12, atol=1e-12)
                    continue
                gathered = Side(side.sign, side.distance, raw.copy())
                np.testing.assert_array_equal(side.values, gathered.values)
                np.testing.assert_array_equal(side.offsets, gathered.offsets)
