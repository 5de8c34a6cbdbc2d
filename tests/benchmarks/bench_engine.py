"""Engine speed and memory on n = 1,000,000 invented rows, measured side by side in one process.

Prints three ratios with their targets (issue 2):
  1. full default fit() time / numpy.sort of the score column          target <= 10
  2. 50-bandwidth grid of estimates + SEs: statsmodels WLS loop / ours   target >= 100
  3. peak memory above the input / bytes of the columns used             target <= 4
  4. design.sensitivity() over 50 bandwidths / one default fit (issue 3)  target <= 3
Run: make bench   (or .venv/bin/python tests/benchmarks/bench_engine.py [n])
"""
from __future__ import annotations

import gc
import statistics
import sys
import time
import tracemalloc

import numpy as np
import pandas as pd
import statsmodels.api as sm

import seamline
from _timing import timed  # tests/benchmarks/ is on sys.path when a script runs
from seamline.demo_data import sharp_scenario


def statsmodels_grid(x: np.ndarray, y: np.ndarray, grid: np.ndarray) -> np.ndarray:
    """Reference loop: one fully interacted WLS per bandwidth with triangular kernel weights, HC0."""
    out = []
    for h in grid:
        inside = np.abs(x) < h
        xi, yi = x[inside], y[inside]
        above = (xi >= 0).astype(float)
        u = xi / h
        exog = np.column_stack([1 - above, (1 - above) * u, above, above * u])
        res = sm.WLS(yi, exog, weights=1 - np.abs(u)).fit(cov_type="HC0")
        contrast = np.array([-1.0, 0.0, 1.0, 0.0])
        out.append((contrast @ res.params, np.sqrt(contrast @ res.cov_params() @ contrast)))
    return np.array(out)


def main(n: int = 1_000_000) -> None:
    scenario = sharp_scenario(n, seed=7)
    outcome = scenario.design_kwargs()["outcome"][0]
    data = scenario.data[[scenario.score, outcome]].copy()
    kwargs = dict(score=scenario.score, cutoff=scenario.cutoff, outcome=outcome, treated=scenario.treated)
    print(f"n = {n:,} invented rows (seamline.demo_data.sharp_scenario, seed=7)")

    # 1. default fit vs numpy.sort, interleaved
    score = data[scenario.score].to_numpy()
    t_sort = timed(lambda: np.sort(score))
    t_fit = timed(lambda: seamline.Design(data, **kwargs).fit())
    print(f"[1] default fit {t_fit * 1e3:8.1f} ms | numpy.sort {t_sort * 1e3:6.1f} ms | "
          f"ratio {t_fit / t_sort:6.1f}  (target <= 10)")

    # 2. 50-bandwidth grid: ours (fresh design, preparation included) vs statsmodels WLS loop
    design = seamline.Design(data, **kwargs)
    h_mse = design.fit().bandwidth[0]
    grid = h_mse * np.linspace(0.5, 2.0, 50)

    def ours(fresh: bool):
        d = seamline.Design(data, **kwargs) if fresh else design
        return np.array([(f.estimate, f.std_error) for f in
                         (d.fit(bandwidth=float(h), variance="hc0", pilot_bandwidth=float(h)) for h in grid)])

    t_ours_cold = timed(lambda: ours(True), repeat=3)
    x = data[scenario.score].to_numpy() - scenario.cutoff
    y = data[outcome].to_numpy()
    t0 = time.perf_counter()
    ref = statsmodels_grid(x, y, grid)
    t_ref = time.perf_counter() - t0
    mine = ours(True)
    sign = 1 if scenario.treated == "above" else -1
    rel = np.max(np.abs(mine - ref * [sign, 1]) / np.abs(ref))
    warm_runs = []
    for k in range(3):  # fresh bandwidths each time, so no fit comes from the design's cache
        shifted = grid * (1.0 + 1e-4 * (k + 1))
        t0 = time.perf_counter()
        [design.fit(bandwidth=float(h), variance="hc0", pilot_bandwidth=float(h)) for h in shifted]
        warm_runs.append(time.perf_counter() - t0)
    t_ours_warm = statistics.median(warm_runs)
    print(f"[2] 50-bandwidth grid: ours {t_ours_cold * 1e3:8.1f} ms (preparation included) | "
          f"statsmodels WLS loop {t_ref * 1e3:9.1f} ms | speed-up {t_ref / t_ours_cold:6.1f}x "
          f"(target >= 100); max relative difference {rel:.1e}")
    print(f"    same grid on an already prepared design: {t_ours_warm * 1e3:8.1f} ms | speed-up "
          f"{t_ref / t_ours_warm:6.1f}x")

    # 3. peak memory above the input, relative to the bytes of the columns used
    used_bytes = sum(data[c].to_numpy().nbytes for c in (scenario.score, outcome))
    gc.collect()
    tracemalloc.start()
    seamline.Design(data, **kwargs).fit()
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    print(f"[3] peak memory above input {peak / 2**20:7.1f} MiB | columns used {used_bytes / 2**20:5.1f} MiB | "
          f"ratio {peak / used_bytes:5.2f}  (target <= 4)")


    # 4. sensitivity grid of 50 bandwidths vs one default fit, both on a fresh design
    t_one = timed(lambda: seamline.Design(data, **kwargs).fit(), repeat=3)
    t_grid = timed(lambda: seamline.Design(data, **kwargs).sensitivity(bandwidths=list(grid)), repeat=3)
    print(f"[4] sensitivity grid of 50 {t_grid * 1e3:8.1f} ms | one default fit {t_one * 1e3:7.1f} ms | "
          f"ratio {t_grid / t_one:5.2f}  (target <= 3)")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 1_000_000)
