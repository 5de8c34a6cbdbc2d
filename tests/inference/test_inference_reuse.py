"""The faster paths of local randomization and the bias-aware interval give the same numbers.

Windows are found by binary search on sorted distances (checked against boolean masks over all
rows, the earlier method), windows on the same units share their tests, and the level-free parts
are kept on the design: a level change must give exactly what a fresh design gives at that level,
without recomputing the balance of the nested windows or the moments at the searched bandwidths.
The data are invented (seeded) and only compared with themselves computed another way.
"""
from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest

import seamline
from seamline.demo_data import fuzzy_scenario
from seamline.core.bias_aware import GRID_POINTS
from seamline.core.randomization import RandomizationTest, draw_assignments, prefix_assignments
from seamline.estimate import bias_aware as aware_module
from seamline.estimate import local_randomization as lr

WINDOW_TOLERANCE = lr.WINDOW_TOLERANCE


def grid_frame(n=3000, seed=3):
    """Scores on a 0.01 grid (ties at every window end), two covariates, one with gaps."""
    rng = np.random.default_rng(seed)
    x = np.round(rng.uniform(-1, 1, n), 2)
    z1 = rng.normal(size=n) + 0.1 * x
    z2 = rng.normal(size=n)
    z2[rng.random(n) < 0.1] = np.nan
    y = 1 + x + 0.8 * (x >= 0) + rng.normal(scale=0.5, size=n)
    y[rng.random(n) < 0.05] = np.nan
    return pd.DataFrame({"x": x, "y": y, "z1": z1, "z2": z2})


def design(frame=None, **kw):
    return seamline.Design(grid_frame() if frame is None else frame, score="x", cutoff=0.0, outcome="y",
                           covariates=["z1", "z2"], **kw)


def mask_window(units, low, high):
    """The earlier method: a mask over all usable rows."""
    tol = WINDOW_TOLERANCE * max(abs(units.cutoff), abs(low), abs(high))
    return (units.x >= low - tol) & (units.x <= high + tol)


def test_binary_search_finds_the_rows_a_mask_finds():
    units = lr._Units(design(), "y")
    for low, high in [(-0.05, 0.05), (-0.3, 0.3), (-0.07, 0.2), (-2, 2), (-0.001, 0.001), (0.0, 0.3)]:
        mask = mask_window(units, low, high)
        span = units.span(low, high)
        np.testing.assert_array_equal(units.rows(span), np.flatnonzero(mask))
        assert units.counts(span) == (int(np.sum(mask & ~units.above)), int(np.sum(mask & units.above)))
    for k in (1, 5, 10):
        below, above = np.sort(-units.x[~units.above]), np.sort(units.x[units.above])
        assert units.half_width_for(k) == max(below[k - 1], above[k - 1])


def test_balance_table_equals_masks_and_tests_window_by_window():
    d = design()
    res = d.local_randomization(window=0.3, seed=11, permutations=999)
    units = lr._Units(d, "y")
    for row in res.windows.itertuples():
        mask = mask_window(units, -row.half_width, row.half_width)
        best = (np.nan, None)
        # a symmetric window holds the units nearest the cutoff: a prefix of the distance order
        nearest = units.by_distance[: int(mask.sum())]
        np.testing.assert_array_equal(np.sort(nearest), np.flatnonzero(mask))
        for name in ("z1", "z2"):
            z = units.covariates[name]
            ok = mask & ~np.isnan(z)
            if ok.sum() == mask.sum():
                # observed on every unit: the window's shared draws (keys of the distance order)
                treated, values = units.treated[nearest], z[nearest]
                assign = prefix_assignments(len(nearest), int(treated.sum()), 999, 11)
                exact = False
            else:
                # missing on some units: draws of its own over the units that have it, in row order
                treated, values = units.treated[ok], z[ok]
                assign, exact = draw_assignments(int(ok.sum()), int(treated.sum()), 999, np.random.default_rng(11))
            p = RandomizationTest(values, treated, "difference in means", assign, exact).p_value(values)
            if not p >= best[0]:
                best = (p, name)
        assert (row.n_below, row.n_above) == (int(np.sum(mask & ~units.above)), int(np.sum(mask & units.above)))
        assert row.balance_p_value == best[0] and row.least_balanced == best[1]


def fields(result):
    return {f.name: getattr(result, f.name) for f in dataclasses.fields(result)
            if not callable(getattr(result, f.name))}


def assert_same(a, b):
    fa, fb = fields(a), fields(b)
    assert fa.keys() == fb.keys()
    for k in fa:
        if isinstance(fa[k], pd.DataFrame):
            pd.testing.assert_frame_equal(fa[k], fb[k], check_exact=True)
        else:
            assert repr(fa[k]) == repr(fb[k]), k
    pd.testing.assert_frame_equal(a.sensitivity, b.sensitivity, check_exact=True)


@pytest.mark.parametrize("statistic", ["difference in means", "rank sum"])
def test_local_randomization_after_a_level_change_equals_a_fresh_design(monkeypatch, statistic):
    d = design()
    d.local_randomization(seed=5, permutations=999, statistic=statistic, balance_threshold=0.01).sensitivity
    calls = []
    monkeypatch.setattr(lr, "_nested_balance", lambda *a, **k: calls.append(1) or (_ for _ in ()).throw(AssertionError))
    if statistic == "difference in means":   # every window's test is kept: no draw at all, only thresholds
        for name in ("prefix_treated_sums", "_assignments", "prefix_assignments"):
            monkeypatch.setattr(lr, name, lambda *a, **k: calls.append(1) or (_ for _ in ()).throw(AssertionError))
    again = d.local_randomization(seed=5, permutations=999, statistic=statistic, balance_threshold=0.01,
                                  level=0.9)
    again.sensitivity
    assert calls == []     # the balance of the nested windows is kept on the design
    monkeypatch.undo()
    fresh = design().local_randomization(seed=5, permutations=999, statistic=statistic, balance_threshold=0.01,
                                         level=0.9)
    assert_same(again, fresh)


def test_a_different_seed_or_covariate_subset_is_not_served_from_the_kept_balance():
    d = design()
    a = d.local_randomization(window=0.2, seed=1, permutations=999)
    b = d.local_randomization(window=0.2, seed=2, permutations=999)
    c = d.local_randomization(window=0.2, seed=1, permutations=999, covariates=["z1"])
    assert not a.windows["balance_p_value"].equals(b.windows["balance_p_value"])
    assert set(c.windows["least_balanced"]) == {"z1"}
    assert_same(c, design().local_randomization(window=0.2, seed=1, permutations=999, covariates=["z1"]))


@pytest.mark.parametrize("smoothness_class", ["taylor", "holder"])
def test_bias_aware_after_a_level_change_equals_a_fresh_design(monkeypatch, smoothness_class):
    d = design()
    d.bias_aware(smoothness_class=smoothness_class).sensitivity
    built = []
    real = aware_module.JumpEngine

    def counting(*a, **k):
        built.append(1)
        return real(*a, **k)
    monkeypatch.setattr(aware_module, "JumpEngine", counting)
    again = d.bias_aware(smoothness_class=smoothness_class, level=0.9)
    search = len(built)
    again.sensitivity
    monkeypatch.undo()
    # the log grid is kept; only the bounded refinement between grid points is level-dependent
    assert search < GRID_POINTS / 2
    assert_same(again, design().bias_aware(smoothness_class=smoothness_class, level=0.9))


def test_fuzzy_bias_aware_after_a_level_change_equals_a_fresh_design():
    s = fuzzy_scenario(n=4000, seed=2)
    d = seamline.Design(s.data, **s.design_kwargs())
    d.bias_aware()
    assert_same(d.bias_aware(level=0.9), seamline.Design(s.data, **s.design_kwargs()).bias_aware(level=0.9))


@pytest.mark.parametrize("exact", [False, True])
def test_exact_inversion_agrees_with_the_test_at_every_shift(exact):
    # the interval of the difference in means is read off the step table of p(tau0); checked against
    # p(tau0) itself (the randomization test at each shift) and against the grid-and-bisection inversion
    from seamline.core.randomization import ShiftedDifference, invert
    rng = np.random.default_rng(4)
    n, n1 = (14, 6) if exact else (60, 25)
    y = rng.normal(size=n) + 0.8 * (np.arange(n) < n1)
    treated = np.arange(n) < n1
    assign, is_exact = draw_assignments(n, n1, 2000, rng)
    assert is_exact == exact
    test = RandomizationTest(y, treated, "difference in means", assign, is_exact)
    shifted = test.shifted()
    estimate = y[treated].mean() - y[~treated].mean()
    for level in (0.8, 0.9, 0.95, 0.99):
        (low, high), contiguous = shifted.accepted_hull(1 - level)
        grid = np.linspace(low - 2 * (high - low), high + 2 * (high - low), 4001)
        accepted = np.array([shifted.p_value_shifted(t) > 1 - level for t in grid])
        inside = grid[accepted]
        slack = 1e-12 * (high - low)      # a root and the test at it agree up to rounding
        assert low - slack <= inside.min() and inside.max() <= high + slack
        step = 1e-9 * (high - low)
        assert shifted.p_value_shifted(low + step) > 1 - level >= shifted.p_value_shifted(low - step)
        assert shifted.p_value_shifted(high - step) > 1 - level >= shifted.p_value_shifted(high + step)
        (g_low, g_high), _ = invert(shifted.p_value_shifted, estimate, 1.0, 1 - level)
        assert (g_low, g_high) == pytest.approx((low, high), abs=1e-7)
        assert isinstance(shifted, ShiftedDifference) and contiguous in (True, False)


@pytest.mark.parametrize("kernel", ["triangular", "uniform", "epanechnikov"])
@pytest.mark.parametrize("degree", [1, 2, 3])
@pytest.mark.parametrize("smoothness_class", ["taylor", "holder"])
def test_bias_aware_moments_from_window_tables_equal_the_window_arrays(kernel, degree, smoothness_class):
    # the search evaluates each bandwidth from the sides' moment tables; the engine's direct window
    # arrays (the earlier path, still used with clusters) must give the same jumps, covariance and bias
    f = fuzzy_scenario(n=3000, seed=2)
    data = f.data.assign(weight=np.random.default_rng(6).uniform(0.5, 2.0, len(f.data)))   # invented weights
    kwargs = {**f.design_kwargs(), "weights": "weight", "cluster": None}
    d = seamline.Design(data, **kwargs)
    variables = (kwargs["outcome"] if isinstance(kwargs["outcome"], str) else kwargs["outcome"][0], d.takeup)
    prep = d._data.prepare(variables, 0.0)
    problem = aware_module._Problem(d, prep, 2, kernel, degree, 0.95, smoothness_class, {})
    low, high = problem.bandwidth_range()
    for h in np.geomspace(low * 1.5, high, 5):
        fast, direct = problem._from_moments((h, h)), problem._direct((h, h), False)
        np.testing.assert_allclose(fast.jumps, direct.jumps, rtol=1e-9, atol=1e-12)
        np.testing.assert_allclose(fast.cov, direct.cov, rtol=1e-8, atol=1e-14 * np.abs(direct.cov).max())
        assert fast.unit_bias == pytest.approx(direct.unit_bias, rel=1e-9)
        assert fast.n_used == direct.n_used


@pytest.mark.parametrize("n, n_treated", [(20, 10), (600, 300), (1000, 10), (1000, 990), (4554, 2277), (513, 1)])
def test_shared_draws_treat_each_rows_smallest_keys(n, n_treated):
    # the selection on float32-rounded keys must pick exactly the n_treated smallest float64 keys
    # (a partition of each row), also when keys round to the same float32 (clustered keys)
    from seamline.core.randomization import _treated_by_keys
    rng = np.random.default_rng(n)
    for keys in (rng.random((300, n)), 0.5 + 1e-6 * rng.random((300, n))):
        threshold = np.partition(keys, n_treated - 1, axis=1)[:, n_treated - 1: n_treated]
        np.testing.assert_array_equal(_treated_by_keys(keys, n_treated), keys <= threshold)
