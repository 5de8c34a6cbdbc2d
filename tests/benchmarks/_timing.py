"""Timing helper shared by the benchmark scripts."""
from __future__ import annotations

import gc
import statistics
import time


def timed(fn, repeat: int = 5) -> float:
    """Median wall time of ``repeat`` calls (the machine is noisy; medians of interleaved runs)."""
    times = []
    for _ in range(repeat):
        gc.collect()
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)
