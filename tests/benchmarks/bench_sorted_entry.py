"""Working memory of the density test and the bins from each side's sorted scores (issue 12).

Prints, for invented scores (seeded, made here: uniform on [-1, 1], an outcome with a jump):
  1. ``density_test_sorted`` on the two sides' sorted scores: time, and tracemalloc's peak above
     the scores, in bytes per row and as a share of the score column;
  2. ``binned_means_streamed`` with passes over the arrays in memory (chunks of 2^20 rows): the
     same, plus the largest relative difference from ``binning.binned_means`` on the same rows
     (computed after the measurement, so it is not counted).
These are the entry points a route that holds only the sorted score in memory uses; the 1e8-row
figure in DEVELOPERS.md comes from ``... bench_sorted_entry.py 100000000 density``.
Run: .venv/bin/python tests/benchmarks/bench_sorted_entry.py [n] [density|bins ...]
"""
from __future__ import annotations

import sys
import time
import tracemalloc

import numpy as np

from seamline.core.binning import binned_means
from seamline.core.bins_streamed import array_passes, binned_means_streamed
from seamline.core.density import density_test_sorted


def invented(n: int):
    rng = np.random.default_rng(5)
    x = rng.uniform(-1.0, 1.0, n)
    y = 0.5 + 0.8 * x + 0.2 * (x >= 0) + rng.normal(0.0, 0.3, n)
    xs = np.sort(x)
    k = int(np.searchsorted(xs, 0.0))
    return x, y, xs[:k], xs[k:]


def measured(work):
    tracemalloc.start()
    t0 = time.perf_counter()
    out = work()
    seconds = time.perf_counter() - t0
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return out, seconds, peak


def main(n: int = 10_000_000, parts=("density", "bins")) -> None:
    x, y, below, above = invented(n)
    column = below.nbytes + above.nbytes
    print(f"invented data (seeded, made by this script): n = {n:,}, score column {column / 2**20:.1f} MiB")
    if "density" in parts:
        est, seconds, peak = measured(lambda: density_test_sorted(below, above, 0.0))
        print(f"[1] density_test_sorted: {seconds:.1f} s, peak {peak / 2**20:.1f} MiB above the inputs "
              f"({peak / n:.2f} bytes per row, {peak / column:.2f} x the score column); statistic {est.statistic:.4f}")
    if "bins" in parts:
        got, seconds, peak = measured(lambda: binned_means_streamed(below, above, 0.0, array_passes(x, y)))
        want = binned_means(x, y, 0.0)
        worst = max(float(np.nanmax(np.abs(getattr(got, f) - getattr(want, f)) / np.abs(getattr(want, f))))
                    for f in ("mean", "score_mean", "std_error"))
        print(f"[2] binned_means_streamed (passes over arrays, 2^20-row chunks): {seconds:.1f} s, peak "
              f"{peak / 2**20:.1f} MiB above the inputs ({peak / n:.2f} bytes per row); bins {got.number}, "
              f"counts equal {bool(np.array_equal(got.count, want.count))}, largest relative difference "
              f"from binned_means {worst:.1e}")


if __name__ == "__main__":
    args = sys.argv[1:]
    size = int(args[0]) if args and args[0].isdigit() else 10_000_000
    chosen = tuple(a for a in args if not a.isdigit()) or ("density", "bins")
    main(size, chosen)
