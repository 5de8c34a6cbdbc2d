"""Diagnostic costs against one default fit, at n = 1e5, 1e6 and 1e7 invented rows (issue 8, item 4).

For each size, prints the time of each diagnostic divided by one default fit (``Design(...).fit()``
on a fresh Design, preparation included), measured alternately in the same run, beside its target
at 1e6 rows:

    density_test <= 3, bins <= 1, donut <= 3, placebo_cutoffs <= 3, balance <= 3, score_profile <= 1

Ratios are printed for wall time and for the process's CPU time. On a shared machine the CPU ratio
is the steadier one (other users' load stretches wall time unevenly), so targets are judged on it.
Each diagnostic is timed on a fresh Design whose default fit has already run (untimed), as on a
board, so the diagnostic pays for everything it needs beyond the main fit, and nothing is cached
from an earlier call of the same diagnostic. Then, for each diagnostic, the growth of its CPU time
from one size to the next is printed beside the growth of n log n (target: no faster).

Data: seamline.demo_data.sharp_scenario (invented, seeded), columns score, outcome and two
covariates. Peak memory at 1e7 is about 2 GB. Takes about three minutes on an idle machine.
Run: make bench   (or .venv/bin/python tests/benchmarks/bench_diagnostics.py [n ...] [diagnostic ...])
"""
from __future__ import annotations

import math
import statistics
import sys
import time

import seamline
from _timing import timed  # tests/benchmarks/ is on sys.path when a script runs
from seamline.demo_data import sharp_scenario

TARGETS = {"density_test": 3.0, "bins": 1.0, "donut": 3.0, "placebo_cutoffs": 3.0, "balance": 3.0,
           "score_profile": 1.0}
SIZES = (100_000, 1_000_000, 10_000_000)


def repeats(n: int) -> int:
    """Fewer repeats at the largest size: each one costs seconds."""
    return 5 if n <= 100_000 else 3 if n <= 1_000_000 else 2


def clocked(fn) -> tuple[float, float]:
    """(wall, CPU) seconds of one call: wall time through the shared helper, CPU time beside it."""
    cpu = []

    def run():
        start = time.process_time()
        fn()
        cpu.append(time.process_time() - start)
    return timed(run, 1), cpu[0]


def measure(n: int, names) -> tuple[tuple[float, float], dict[str, tuple[float, float]]]:
    scenario = sharp_scenario(n, seed=11)
    columns = [scenario.score, "math_gain", "age", "prior_math"]
    data = scenario.data[columns].copy()
    del scenario
    kwargs = dict(score=columns[0], cutoff=40.0, outcome="math_gain", treated="below",
                  covariates=["age", "prior_math"])
    fit_times: list[tuple[float, float]] = []
    diag_times: dict[str, list[tuple[float, float]]] = {name: [] for name in names}
    for _ in range(repeats(n)):
        fit_times.append(clocked(lambda: seamline.Design(data, **kwargs).fit()))
        for name in names:
            design = seamline.Design(data, **kwargs)
            design.fit()                       # the board's headline fit, already there
            diag_times[name].append(clocked(getattr(design, name)))
            del design

    def medians(pairs):
        return statistics.median(p[0] for p in pairs), statistics.median(p[1] for p in pairs)
    return medians(fit_times), {k: medians(v) for k, v in diag_times.items()}


def main(sizes=SIZES, names=tuple(TARGETS)) -> None:
    print("Diagnostics / one default fit on a fresh Design (invented data: "
          "seamline.demo_data.sharp_scenario, seed=11); medians of wall and CPU time")
    results = {}
    for n in sizes:
        (fit_wall, fit_cpu), times = measure(n, names)
        results[n] = times
        print(f"n = {n:>10,}: default fit {fit_wall * 1e3:8.1f} ms wall, {fit_cpu * 1e3:8.1f} ms CPU")
        for name in names:
            wall, cpu = times[name]
            target = TARGETS[name]
            mark = ("ok" if cpu / fit_cpu <= target else "OVER") if n == 1_000_000 else ""
            print(f"    {name:16s} {wall * 1e3:9.1f} ms  ratio wall {wall / fit_wall:6.2f}  "
                  f"CPU {cpu / fit_cpu:6.2f}  (target <= {target:g} at 1e6) {mark}")
    for small, large in zip(sizes, sizes[1:]):
        nlogn = (large * math.log(large)) / (small * math.log(small))
        print(f"growth of CPU time {small:,} -> {large:,} (n log n grows x{nlogn:.1f}):")
        for name in names:
            growth = results[large][name][1] / results[small][name][1]
            mark = "ok" if growth <= nlogn * 1.15 else "FASTER"   # 15%: timing noise on a shared machine
            print(f"    {name:16s} x{growth:6.1f}  {mark}")


if __name__ == "__main__":
    # arguments: sizes (e.g. 1e6 1e7) and, optionally, the names of the diagnostics to time
    args = sys.argv[1:]
    main(tuple(int(float(a)) for a in args if a[0].isdigit()) or SIZES,
         tuple(a for a in args if not a[0].isdigit()) or tuple(TARGETS))
