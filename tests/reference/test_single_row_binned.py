"""The single-row bias-reduced variance over wide windows from binned moments.

References:
- statsmodels with cov_type="HC2" on the window's interacted regression
  (`_references.wls_reference`; uniform kernel, no weights: the CR2 of one-row clusters is HC2,
  Bell and McCaffrey 2002), at a window of about 60,000 rows per side, where the binned path is used.
- The row-by-row computation (itself checked against a dense CR2 and statsmodels in
  tests/reference/test_cluster_small_sample.py) for the other kernels, degrees, pilot bandwidths,
  fuzzy contrasts and the Bell-McCaffrey degrees of freedom.
Test data are generated here.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import seamline
from seamline.core import single_row_binned

from _references import wls_reference


def wide_data(n=240_000, seed=3):
    rng = np.random.default_rng(seed)
    x = rng.uniform(-1, 1, n)
    y = 1 + 0.5 * x + 2 * x ** 2 - np.sin(3 * x) + 0.4 * (x >= 0) + rng.normal(0, 0.3 + 0.2 * np.abs(x), n)
    d = (rng.uniform(size=n) < np.where(x >= 0, 0.8, 0.2)).astype(float)
    return pd.DataFrame(dict(x=x, y=y, d=d))


@pytest.fixture(scope="module")
def frame():
    return wide_data()


def fit_both(frame, monkeypatch, takeup=None, **options):
    """The same fit by the row-by-row pass and by the binned path."""
    monkeypatch.setattr(single_row_binned, "MIN_ROWS", 10 ** 12)
    rows = seamline.Design(frame, score="x", cutoff=0.0, outcome="y", takeup=takeup).fit(
        variance="bias-reduced", **options)
    monkeypatch.setattr(single_row_binned, "MIN_ROWS", 20_000)   # the test windows are smaller than the default
    calls = []
    original = single_row_binned._binned
    monkeypatch.setattr(single_row_binned, "_binned", lambda *a: calls.append(1) or original(*a))
    binned = seamline.Design(frame, score="x", cutoff=0.0, outcome="y", takeup=takeup).fit(
        variance="bias-reduced", **options)
    assert calls, "the binned path was not used"
    return rows, binned


def test_uniform_kernel_matches_statsmodels_hc2(frame, monkeypatch):
    _, fit = fit_both(frame, monkeypatch, bandwidth=0.5, kernel="uniform")
    ref = wls_reference(frame.x, frame.y, 0.0, 0.5, kernel="uniform", cov_type="hc2")
    assert fit.estimate == pytest.approx(ref.estimate, rel=1e-10)
    assert fit.std_error == pytest.approx(ref.std_error, rel=1e-9)


@pytest.mark.parametrize("options", [
    dict(),                                             # selected bandwidths, b > h
    dict(kernel="epanechnikov"),
    dict(kernel="uniform", bandwidth=0.4, pilot_bandwidth=0.6),
    dict(degree=2),
    dict(bandwidth=0.5, pilot_bandwidth=0.3),            # h > b: the pilot's kink inside the window
    dict(bandwidth=(0.2, 0.35), pilot_bandwidth=(0.3, 0.3)),
    dict(derivative=1, degree=2),
])
@pytest.mark.parametrize("takeup", [None, "d"])
def test_binned_sums_equal_the_row_by_row_pass(frame, monkeypatch, options, takeup):
    rows, binned = fit_both(frame, monkeypatch, takeup=takeup, **options)
    assert binned.std_error == pytest.approx(rows.std_error, rel=1e-10)
    assert binned.robust_std_error == pytest.approx(rows.robust_std_error, rel=1e-10)
    # Degrees of freedom sum polynomials up to degree 16-20, where the truncated series loses more;
    # at these sizes (thousands of degrees of freedom) 1e-7 moves the t quantile by under 1e-12.
    assert binned.dof[0] == pytest.approx(rows.dof[0], rel=1e-7)
    assert binned.dof[1] == pytest.approx(rows.dof[1], rel=1e-7)
    assert binned.robust_conf_int == pytest.approx(rows.robust_conf_int, rel=1e-10, abs=1e-12)
    if takeup:
        assert binned.first_stage.robust_std_error == pytest.approx(rows.first_stage.robust_std_error, rel=1e-10)


def test_sparse_stretches_are_summed_row_by_row(monkeypatch):
    # A score with a gap and a sparse tail: bins there are wider than 1/32 of the window.
    rng = np.random.default_rng(8)
    x = np.concatenate([rng.uniform(-0.3, 0.3, 160_000), rng.uniform(0.45, 1.0, 300),
                        rng.uniform(-1.0, -0.5, 300)])
    y = x + 0.3 * (x >= 0) + rng.normal(0, 0.5, len(x))
    frame = pd.DataFrame(dict(x=x, y=y))
    rows, binned = fit_both(frame, monkeypatch, bandwidth=0.9, pilot_bandwidth=1.0)
    assert binned.robust_std_error == pytest.approx(rows.robust_std_error, rel=1e-10)
    assert binned.dof[1] == pytest.approx(rows.dof[1], rel=1e-7)


def test_weighted_designs_and_small_windows_go_row_by_row(frame):
    weighted = frame.assign(w=np.random.default_rng(2).uniform(0.5, 2.0, len(frame)))
    design = seamline.Design(weighted, score="x", cutoff=0.0, outcome="y", weights="w")
    engine_fit = design.fit(bandwidth=0.5)
    engine = next(iter(design._engines.values()))
    windows = [f.side.count_positive(f.h, f.kernel) for f in engine.fits]
    assert single_row_binned.single_row_variance_binned(engine.fits, np.eye(1)[0], False, windows) is None
    small = seamline.Design(frame.iloc[:5000], score="x", cutoff=0.0, outcome="y")
    small.fit(bandwidth=0.5)
    engine = next(iter(small._engines.values()))
    windows = [f.side.count_positive(f.h, f.kernel) for f in engine.fits]
    assert single_row_binned.single_row_variance_binned(engine.fits, np.eye(1)[0], False, windows) is None
    assert engine_fit.std_error > 0


def test_donut_and_placebo_sides_take_their_bins_from_the_design_sides(frame, monkeypatch):
    """A donut's tail and a placebo cutoff's sides are runs of the design's sorted sides: their bins
    are the design's, moved and re-centred (reversed for a placebo side's near part)."""
    def both(run):
        monkeypatch.setattr(single_row_binned, "MIN_ROWS", 10 ** 12)
        rows = run(seamline.Design(frame, score="x", cutoff=0.0, outcome="y"))
        monkeypatch.setattr(single_row_binned, "MIN_ROWS", 20_000)
        cut = []
        original = single_row_binned._cut_bins
        monkeypatch.setattr(single_row_binned, "_cut_bins", lambda *a: cut.append(a[-1]) or original(*a))
        binned = run(seamline.Design(frame, score="x", cutoff=0.0, outcome="y"))
        monkeypatch.setattr(single_row_binned, "_cut_bins", original)
        return rows, binned, cut

    def donut(design):
        design.fit(variance="bias-reduced", bandwidth=0.5)
        return design.fit(variance="bias-reduced", bandwidth=0.5, donut=0.04)

    rows, binned, cut = both(donut)
    assert cut and not any(cut)                      # tails, not reversed
    assert binned.std_error == pytest.approx(rows.std_error, rel=1e-10)
    assert binned.robust_std_error == pytest.approx(rows.robust_std_error, rel=1e-10)
    assert binned.dof[1] == pytest.approx(rows.dof[1], rel=1e-7)

    def placebo(design):
        design.fit(variance="bias-reduced", bandwidth=0.5)
        return design.placebo_cutoffs(cutoffs=[0.3, -0.35], variance="bias-reduced", bandwidth=0.25).table()
    rows, binned, cut = both(placebo)
    assert True in cut and False in cut              # a head reversed and a tail
    pd.testing.assert_frame_equal(binned, rows, check_exact=False, rtol=1e-9)


def test_a_wider_window_adds_bins_to_those_built_bit_for_bit():
    # The bins are extended (doubling) when a wider window needs more; each bin's moments are its
    # own rows', so the extended table equals one built at once, bit for bit.
    from seamline.core.side import Side
    rng = np.random.default_rng(31)
    d = np.sort(rng.uniform(0.0, 1.0, 200_000))
    side = Side(1, d, rng.normal(size=(d.size, 2)), None, None, 3)
    small = single_row_binned.side_bins(side, 2, 20_000)
    grown = single_row_binned.side_bins(side, 2, 90_000)
    assert grown.starts[-1] > small.starts[-1] >= 20_000
    size = int(grown.starts[1] - grown.starts[0])
    whole = single_row_binned._build_bins(side, 2, size, len(grown.centre))
    for field in ("starts", "low", "high", "centre", "moments"):
        np.testing.assert_array_equal(getattr(grown, field), getattr(whole, field))
