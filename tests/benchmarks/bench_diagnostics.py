"""Diagnostic costs against one default fit, at n = 1e5, 1e6 and 1e7 invented rows (issue 8, item 4).

For each size, prints the time of each diagnostic divided by one default fit (``Design(...).fit()``
on a fresh Design, preparation included), measured alternately in the same run, beside its target
at 1e6 rows:

    density_test <= 3, bins <= 1, donut <= 3, placebo_cutoffs <= 3, balance <= 3, score_profile <= 1

Each diagnostic is timed on a fresh Design whose default fit has already run (untimed), as on a
board, so the diagnostic pays for everything it needs beyond the main fit, and nothing is cached
from an earlier call of the same diagnostic. Then, for each diagnostic, the growth of its time from
one size to the next is printed beside the growth of n log n (target: no faster).

Data: seamline.demo_data.sharp_scenario (invented, seeded), columns score, outcome and two
covariates. Memory at 1e7: about 0.3 GB of input columns plus prepared sides, well under 4 GB.
Run: make bench   (or .venv/bin/python tests/benchmarks/bench_diagnostics.py [n ...])
"""
from __future__ import annotations

import math
import statistics
import sys

import seamline
from _timing import timed  # tests/benchmarks/ is on sys.path when a script runs
from seamline.demo_data import sharp_scenario

TARGETS = {"density_test": 3.0, "bins": 1.0, "donut": 3.0, "placebo_cutoffs": 3.0, "balance": 3.0,
           "score_profile": 1.0}
SIZES = (100_000, 1_000_000, 10_000_000)


def repeats(n: int) -> int:
    """Fewer repeats at the largest size: each one costs seconds."""
    return 5 if n <= 100_000 else 3 if n <= 1_000_000 else 2


def measure(n: int) -> tuple[float, dict[str, float]]:
    scenario = sharp_scenario(n, seed=11)
    columns = [scenario.score, "math_gain", "age", "prior_math"]
    data = scenario.data[columns].copy()
    del scenario
    kwargs = dict(score=columns[0], cutoff=40.0, outcome="math_gain", treated="below",
                  covariates=["age", "prior_math"])
    fit_times: list[float] = []
    diag_times: dict[str, list[float]] = {name: [] for name in TARGETS}
    for _ in range(repeats(n)):
        fit_times.append(timed(lambda: seamline.Design(data, **kwargs).fit(), 1))
        for name in TARGETS:
            design = seamline.Design(data, **kwargs)
            design.fit()                       # the board's headline fit, already there
            diag_times[name].append(timed(getattr(design, name), 1))
            del design
    return statistics.median(fit_times), {k: statistics.median(v) for k, v in diag_times.items()}


def main(sizes=SIZES) -> None:
    print("Diagnostics / one default fit on a fresh Design (invented data: "
          "seamline.demo_data.sharp_scenario, seed=11)")
    results = {}
    for n in sizes:
        t_fit, times = measure(n)
        results[n] = times
        print(f"n = {n:>10,}: default fit {t_fit * 1e3:8.1f} ms")
        for name, target in TARGETS.items():
            ratio = times[name] / t_fit
            mark = "ok" if ratio <= target else "OVER"
            print(f"    {name:16s} {times[name] * 1e3:9.1f} ms  ratio {ratio:6.2f}  "
                  f"(target <= {target:g} at 1e6) {mark if n == 1_000_000 else ''}")
    for small, large in zip(sizes, sizes[1:]):
        nlogn = (large * math.log(large)) / (small * math.log(small))
        print(f"growth {small:,} -> {large:,} (n log n grows x{nlogn:.1f}):")
        for name in TARGETS:
            growth = results[large][name] / results[small][name]
            mark = "ok" if growth <= nlogn * 1.15 else "FASTER"   # 15%: timing noise on a shared machine
            print(f"    {name:16s} x{growth:6.1f}  {mark}")


if __name__ == "__main__":
    main(tuple(int(float(a)) for a in sys.argv[1:]) or SIZES)
