"""The default (bias-reduced) variance on a live board: a refit at a new manual bandwidth, as a
bandwidth slider makes, measured side by side with the neighbour variance and with HC2 by rows.

Invented data (seamline.demo_data.sharp_scenario, seed 7). For each n, one default fit on a fresh
Design is the unit; then each variance refits at 7 fresh bandwidths (best of 7 printed), so every
refit runs its variance anew and nothing comes from a cache. The bias-reduced line is the one the
board's headline waits for (issue 8: bandwidth change -> headline <= 0.5 x one fit at 1e6 and
<= 100 ms at 1e7).
Run: .venv/bin/python tests/benchmarks/bench_variance.py [n ...]   (default: 100000 1000000 10000000)
"""
from __future__ import annotations

import itertools
import sys
import time

import seamline
from seamline.demo_data import sharp_scenario


def best(fn, repeat: int = 7) -> float:
    out = float("inf")
    for _ in range(repeat):
        start = time.perf_counter()
        fn()
        out = min(out, time.perf_counter() - start)
    return out


def run(n: int) -> None:
    scenario = sharp_scenario(n, seed=7)
    kwargs = dict(score=scenario.score, cutoff=scenario.cutoff,
                  outcome=scenario.design_kwargs()["outcome"][0], treated=scenario.treated)
    unit = best(lambda: seamline.Design(scenario.data, **kwargs).fit(), 3)
    design = seamline.Design(scenario.data, **kwargs)
    h = design.fit().bandwidth
    step = itertools.count(1)
    print(f"n = {n:,}: one default fit on a fresh Design {unit * 1e3:8.1f} ms")
    for variance in ("bias-reduced", "neighbors", "hc2"):
        def refit():
            k = 1.0 + 0.003 * next(step)
            design.fit(variance=variance, bandwidth=(h[0] * k, h[1] * k))
        t = best(refit)
        print(f"    refit at a new bandwidth, {variance:12s} {t * 1e3:8.1f} ms = {t / unit:5.2f} x one fit")


if __name__ == "__main__":
    for size in [int(a) for a in sys.argv[1:]] or [100_000, 1_000_000, 10_000_000]:
        run(size)
