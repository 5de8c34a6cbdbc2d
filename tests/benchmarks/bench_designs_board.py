"""Cost of the By cutoff, Subgroups and Power tabs of a live board, as ratios to one default fit.

    PYTHONPATH=kernel_side python tests/benchmarks/bench_designs_board.py [n]

Data: the invented cumulative-grants scenario (seamline.demo_cutoffs, seed=3), cutoffs 30 and 60,
groups "cooperative". The reference is one default fit of the headline cutoff's design on a fresh
Design. Printed figures, no assertions (speed is read, not tested).
"""
from __future__ import annotations

import statistics
import sys
import time

import seamline
from seamline.demo_cutoffs import cumulative_grants_scenario
from seamline.notebook.power_report import power_report


def _best(fn, repeat: int = 5) -> float:
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def main(n: int = 100_000) -> None:
    s = cumulative_grants_scenario(n, seed=3)
    kwargs = dict(score=s.score, cutoff=list(s.cutoff), outcome="investment")
    fit_time = _best(lambda: seamline.Design(s.data, **kwargs).at(30.0).fit())
    fit = seamline.Design(s.data, **kwargs).at(30.0).fit()
    print(f"n = {n:,} invented rows; one default fit at cutoff 30 on a fresh Design: {fit_time * 1e3:.1f} ms")

    def line(label, seconds):
        print(f"{label:52s} {seconds * 1e3:9.1f} ms = {seconds / fit_time:6.2f}x fit")

    line("[D1] power tab from the main fit (curve, 80%, sample size)", _best(lambda: power_report(fit, 0.3, 0.95)))
    line("[D2] by_cutoff on a fresh Design (2 cutoffs)", _best(lambda: seamline.Design(s.data, **kwargs).by_cutoff(), 3))
    board = seamline.board(s.data, **kwargs, groups="cooperative", effect=0.3).wait()
    changes = []
    for value in (60.0, 30.0, 60.0):
        t0 = time.perf_counter()
        board.set_option("headline_cutoff", value)
        board.wait("fit")
        changes.append(time.perf_counter() - t0)
    line("[D3] headline change -> headline (fit shared with by_cutoff)", changes[0])
    line("[D4] headline cutoff back (cache hit)", statistics.median(changes[1:]))
    board.wait()
    t0 = time.perf_counter()
    board.set_option("level", 0.9)
    board.wait("by_cutoff", "subgroups", "power")
    line("[D5] level change -> by cutoff, subgroups, power", time.perf_counter() - t0)
    t0 = time.perf_counter()
    board.set_option("effect", 0.2)
    board.wait("power")
    line("[D6] effect change -> power tab", time.perf_counter() - t0)
    board.close()


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 100_000)
