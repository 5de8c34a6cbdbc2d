"""The per-design cache of diagnostic results: nothing computed twice, nothing stale, bounded.

The numbers themselves are checked against outside references in test_diagnostics.py; here the
reference is a fresh Design (no cache) computing the same diagnostic from scratch.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import seamline
from seamline.estimate import design as design_module
from seamline.estimate import diagnostics
from seamline.core.density import density_test as core_density_test
from seamline.errors import InvalidOptionError


def frame(n: int = 3000, seed: int = 5) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = rng.uniform(-1, 1, n)
    z = 0.3 * x + rng.normal(0, 0.5, n)
    return pd.DataFrame({"x": x, "y": x + 0.4 * (x >= 0) + rng.normal(0, 0.3, n), "z": z})


def make(data=None):
    return seamline.Design(frame() if data is None else data, score="x", cutoff=0.0, outcome="y",
                           covariates=["z"])


@pytest.fixture
def counted(monkeypatch):
    """Counts of the expensive calls behind the density test and the balance fits."""
    counts = {"density": 0, "balance": 0}
    core = diagnostics.core_density_test
    balance = diagnostics.balance

    def density(*args, **kwargs):
        counts["density"] += 1
        return core(*args, **kwargs)

    def counted_balance(*args, **kwargs):
        counts["balance"] += 1
        return balance(*args, **kwargs)

    monkeypatch.setattr(diagnostics, "core_density_test", density)
    monkeypatch.setattr(diagnostics, "balance", counted_balance)
    return counts


def test_checks_reuses_the_density_test_and_balance(counted):
    d = make()
    first = d.density_test()
    d.balance()
    d.checks()
    assert counted == {"density": 1, "balance": 1}
    assert d.density_test() is first
    d.checks()
    assert counted == {"density": 1, "balance": 1}


def test_resolved_arguments_share_a_key(counted):
    d = make()
    a = d.density_test()
    assert d.density_test("local-cdf", level=0.95) is a
    assert d.donut() is d.donut(None, bandwidth="mse", kernel="triangular", level=0.95)
    assert d.placebo_cutoffs(cutoffs=[-0.5, 0.5]) is d.placebo_cutoffs(np.array([-0.5, 0.5]))
    b = d.density_test(level=0.9)           # re-reported from the test at 0.95: no second run
    assert b is not a and b.level == 0.9
    assert counted["density"] == 1


def test_cached_results_equal_a_fresh_design():
    d = make()
    for name, kwargs in (("density_test", {}), ("bins", {}), ("donut", {}), ("placebo_cutoffs", {}),
                         ("balance", {}), ("score_profile", {}), ("density_test", {"method": "binned"})):
        getattr(d, name)(**kwargs)
        again = getattr(d, name)(**kwargs)           # from the cache
        fresh = getattr(make(), name)(**kwargs)      # computed from scratch
        assert again.to_markdown() == fresh.to_markdown(), name


def test_errors_are_not_cached_and_bad_input_still_raises():
    d = make()
    with pytest.raises(InvalidOptionError, match="`radii` must be non-negative"):
        d.donut(radii=[-1.0])
    with pytest.raises(InvalidOptionError, match="`radii` must be non-negative"):
        d.donut(radii=[-1.0])
    assert len(d._diagnostics) == 0


def test_cache_is_bounded(monkeypatch):
    monkeypatch.setattr(design_module, "DIAGNOSTIC_CACHE", 3)
    d = make()
    for level in (0.8, 0.85, 0.9, 0.95):
        d.density_test(level=level)
    assert len(d._diagnostics) == 3
    assert diagnostics.cache_key("density_test", (), {"level": 0.8}) not in d._diagnostics


def test_unhashable_arguments_are_computed_without_caching():
    assert diagnostics.cache_key("donut", ([0.0, 0.1],), {}) is not None
    radii = pd.Series([0.0, 0.05])                               # a Series has no hash: no key
    assert diagnostics.cache_key("donut", (radii,), {}) is None
    d = make()
    assert len(d.donut(radii=radii).rows) == 2 and len(d._diagnostics) == 0


@pytest.mark.parametrize("method", ["local-cdf", "binned"])
def test_another_level_equals_a_test_run_at_that_level(method):
    # Reference: the core test run afresh at level 0.8 (its intervals use scipy.stats.norm.ppf)
    data = frame(4000, seed=9)
    d = make(data)
    got = d.density_test(method, level=0.8)
    want = core_density_test(data["x"].to_numpy(), 0.0, method=method, level=0.8).__dict__
    est = got.estimate
    for name in ("ci_below", "ci_above", "statistic", "p_value", "bandwidth", "density_below"):
        np.testing.assert_allclose(getattr(est, name), want[name], rtol=1e-10)
    for name in ("ci_low", "ci_high", "density", "std_error"):
        np.testing.assert_allclose(getattr(est.grid, name), getattr(want["grid"], name), rtol=1e-10)
    assert got.level == 0.8 and got.ci_below == tuple(est.ci_below)
    with pytest.raises(InvalidOptionError, match="`level` must be a number strictly between 0 and 1"):
        d.density_test(level=1.5)
