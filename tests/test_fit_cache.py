"""The per-design caches: bounded, least recently used first out, and a re-request recomputes the
same numbers (an evicted fit is never served stale or lost)."""
from __future__ import annotations

import numpy as np
import pandas as pd

import seamline
from seamline.estimate import design as design_module


def make_design() -> seamline.Design:
    rng = np.random.default_rng(17)
    x = rng.uniform(-1, 1, 800)
    frame = pd.DataFrame({"x": x, "y": 0.5 * x + 0.3 * (x >= 0) + rng.normal(0, 0.2, 800)})
    return seamline.Design(frame, score="x", cutoff=0.0, outcome="y")


def _numbers(fit):
    return (fit.estimate, fit.std_error, fit.bias_corrected_estimate, fit.robust_std_error, fit.bandwidth)


def test_fit_cache_evicts_the_least_recently_used_and_recomputes_on_request(monkeypatch):
    monkeypatch.setattr(design_module, "FIT_CACHE", 4)
    monkeypatch.setattr(design_module, "ENGINE_CACHE", 2)
    design = make_design()
    bandwidths = [0.3, 0.35, 0.4, 0.45, 0.5, 0.55]
    first = {h: design.fit(bandwidth=h) for h in bandwidths[:4]}
    assert len(design._fits) == 4 and len(design._engines) == 2
    again = design.fit(bandwidth=0.3)           # a hit: the same object, and now the most recent
    assert again is first[0.3]
    design.fit(bandwidth=0.5)                  # evicts 0.35, the least recently used
    design.fit(bandwidth=0.55)                 # evicts 0.4
    assert len(design._fits) == 4 and len(design._engines) == 2
    kept = {spec.bandwidth[0] for spec in design._fits}
    assert kept == {0.3, 0.45, 0.5, 0.55}
    assert design.fit(bandwidth=0.3) is first[0.3]
    recomputed = design.fit(bandwidth=0.35)    # evicted earlier: computed again, same numbers
    assert recomputed is not first[0.35]
    assert _numbers(recomputed) == _numbers(first[0.35])
    assert 0.45 not in {spec.bandwidth[0] for spec in design._fits}  # 0.45 was the oldest now


def test_default_bounds_hold_under_many_specifications():
    design = make_design()
    grid = np.linspace(0.2, 0.9, design_module.FIT_CACHE + 3)
    fits = [design.fit(bandwidth=float(h)) for h in grid]
    assert len(design._fits) == design_module.FIT_CACHE
    assert len(design._engines) == design_module.ENGINE_CACHE
    again = design.fit(bandwidth=float(grid[0]))  # evicted: recomputed identically
    assert again is not fits[0] and _numbers(again) == _numbers(fits[0])


def test_a_level_change_reuses_the_cached_fit():
    design = make_design()
    base = design.fit(bandwidth=0.4)
    other = design.fit(bandwidth=0.4, level=0.9)
    assert len(design._fits) == 1
    assert other.level == 0.9 and _numbers(other) == _numbers(base)
