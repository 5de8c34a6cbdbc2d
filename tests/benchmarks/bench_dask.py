"""Partitioned inputs (dask, Parquet) against the in-memory path, measured side by side in one run.

Prints, with their targets (issue 12):
  1. dask vs in-memory at 4e6 rows: largest relative difference over every number, counts equal
                                                                            target < 1e-8, equal
  2. in-memory 1e7 rows, default fit + density test + bins: peak memory / used columns
                                                                            target <= 4
  3. 1e8 rows from Parquet, default fit + density test + bins: time / one dask pass that sums the
     two columns                                                            target <= 6
     peak memory of that run / (0.75 x the two columns + 0.6 GB)           target <= 1
  4. the bounded-memory route (reading="streamed") at the large size, default fit + density test +
     bins: time / one dask pass summing the two columns                  target <= 6
     peak memory / (0.75 x the two columns + 0.6 GB)                      target <= 1
     (with the time of each part, the peak after the fit, and whether anything was gathered)
  5. step 4 at the in-memory size on data whose two sides curve differently (a narrow bias
     bandwidth, so a small window)
The data are invented here (seeded): a continuous score on [-1, 1], a smooth outcome with a jump.
The unit, one dask pass summing the two columns, is timed in a fresh interpreter after dask.dataframe
is imported (so it is a pass, not a pass plus an import); step 4 prints, besides, the time of each pass
of the streamed route in that unit.
Step 3 writes about 2 GB of Parquet to a temporary folder, removes it, and runs in child processes
so that their peak resident memory is their own; it is skipped when the machine has too little
free memory for the route measured (the gathered route needs about 12 x the two columns).
Run: make bench   (or .venv/bin/python tests/benchmarks/bench_dask.py [n_equal n_memory n_large [steps]]),
steps a string of step numbers, e.g. "14" for steps 1 and 4 only (default "12345").
"""
from __future__ import annotations

import gc
import json
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
import tracemalloc

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

import seamline

KWARGS = dict(score="x", cutoff=0.0, outcome="y")
GB = 1e9


def invented(n: int, seed: int, curved: bool = False) -> pd.DataFrame:
    """Invented rows: score uniform on [-1, 1], outcome smooth in the score with a jump of 0.2
    (``curved``: the two sides' curvatures differ, so the bias bandwidth is narrow)."""
    rng = np.random.default_rng(seed)
    x = rng.uniform(-1.0, 1.0, n)
    bend = (3.0 * x ** 2 + 4.0 * x ** 3) * (x >= 0) if curved else 0.0
    y = 0.5 + 0.8 * x - 0.4 * x ** 2 + bend + 0.2 * (x >= 0) + rng.normal(0.0, 0.3 + 0.1 * np.abs(x), n)
    return pd.DataFrame({"x": x, "y": y})


def write_parquet(folder: str, n: int, files: int, seed: int, curved: bool = False) -> None:
    """``n`` invented rows in ``files`` Parquet files of uneven size, written one file at a time."""
    cuts = np.linspace(0, n, files + 1)
    cuts[1:-1] += np.resize([0.2, -0.3, 0.1], files - 1) * (n / files)     # uneven sizes
    cuts = np.round(cuts).astype(int)
    for k in range(files):
        part = invented(int(cuts[k + 1] - cuts[k]), seed + k, curved)
        pq.write_table(pa.Table.from_pandas(part, preserve_index=False), os.path.join(folder, f"part-{k}.parquet"))


def run(design):
    """Default fit + density test + bins (the measured workload), as tables."""
    return design.fit().table(), design.density_test().table(), design.bins().table()


def largest_difference(got, want) -> tuple[float, bool]:
    worst, counts_equal = 0.0, True
    for a, b in zip(got, want):
        for column in b.columns:
            if pd.api.types.is_integer_dtype(b[column]):
                counts_equal &= bool(np.array_equal(a[column].to_numpy(), b[column].to_numpy()))
            elif pd.api.types.is_float_dtype(b[column]):
                x, y = a[column].to_numpy(), b[column].to_numpy()
                ok = np.isfinite(y) & (y != 0)
                if ok.any():
                    worst = max(worst, float(np.max(np.abs(x[ok] - y[ok]) / np.abs(y[ok]))))
                counts_equal &= bool(np.array_equal(np.isnan(x), np.isnan(y)))
    return worst, counts_equal


def equality(n: int) -> None:
    folder = tempfile.mkdtemp(prefix="seamline-bench-")
    try:
        write_parquet(folder, n, 8, seed=100)
        memory = pd.concat([pd.read_parquet(os.path.join(folder, f"part-{k}.parquet")) for k in range(8)],
                           ignore_index=True)
        t0 = time.perf_counter()
        want = run(seamline.Design(memory, **KWARGS))
        t_memory = time.perf_counter() - t0
        t0 = time.perf_counter()
        got = run(seamline.Design(folder, reading="streamed", **KWARGS))   # every part streamed
        t_dask = time.perf_counter() - t0
        worst, counts = largest_difference(got, want)
        print(f"[1] n = {n:,}: dask vs in-memory, largest relative difference {worst:.1e} (target < 1e-8); "
              f"counts equal: {counts}; time {t_dask:.1f} s from Parquet vs {t_memory:.1f} s in memory")
    finally:
        shutil.rmtree(folder, ignore_errors=True)


def memory_ratio(n: int) -> None:
    data = invented(n, seed=5)
    used = data["x"].to_numpy().nbytes + data["y"].to_numpy().nbytes
    for label, work in (("default fit", lambda d: d.fit()), ("fit + density test + bins", run)):
        gc.collect()
        tracemalloc.start()
        work(seamline.Design(data, **KWARGS))
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        print(f"[2] n = {n:,} in memory, {label}: peak {peak / 2**20:7.1f} MiB above the input | columns used "
              f"{used / 2**20:6.1f} MiB | ratio {peak / used:5.2f}  (target <= 4)")


def _child(task: str, folder: str, n: int) -> dict:
    """Run one step of the large measurement in a fresh interpreter; its own peak RSS comes back."""
    out = subprocess.run([sys.executable, __file__, "--child", task, folder, str(n)], check=True,
                         capture_output=True, text=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def _available_bytes() -> float:
    with open("/proc/meminfo") as f:
        for line in f:
            if line.startswith("MemAvailable:"):
                return float(line.split()[1]) * 1024
    return float("inf")


def large(n: int) -> None:
    columns = 16.0 * n
    need = 12 * columns
    if _available_bytes() < need:
        print(f"[3] n = {n:,} skipped: the gathered route needs about {need / GB:.1f} GB and "
              f"{_available_bytes() / GB:.1f} GB are available")
        return
    folder = tempfile.mkdtemp(prefix="seamline-bench-large-")
    try:
        files = max(8, n // 2_000_000)
        _child("write", folder, n)
        size = sum(os.path.getsize(os.path.join(folder, f)) for f in os.listdir(folder))
        one_pass = _child("pass", folder, n)
        workload = _child("design", folder, n)
        budget = 0.75 * columns + 0.6 * GB
        print(f"[3] n = {n:,} from {files} Parquet files ({size / GB:.2f} GB): fit + density test + bins "
              f"{workload['seconds']:.1f} s | one dask pass summing the two columns {one_pass['seconds']:.1f} s | "
              f"ratio {workload['seconds'] / one_pass['seconds']:.1f} (target <= 6)")
        print(f"    peak memory {workload['peak'] / GB:.2f} GB | budget 0.75 x {columns / GB:.2f} GB + 0.6 GB = "
              f"{budget / GB:.2f} GB | ratio {workload['peak'] / budget:.2f} (target <= 1); "
              f"the summing pass alone peaks at {one_pass['peak'] / GB:.2f} GB")
    finally:
        shutil.rmtree(folder, ignore_errors=True)


def streamed(n: int, curved: bool = False) -> None:
    columns = 16.0 * n
    folder = tempfile.mkdtemp(prefix="seamline-bench-stream-")
    try:
        files = max(8, n // 2_000_000)
        _child("write-curved" if curved else "write", folder, n)
        size = sum(os.path.getsize(os.path.join(folder, f)) for f in os.listdir(folder))
        one_pass = _child("pass", folder, n)
        work = _child("streamed", folder, n)
        budget = 0.75 * columns + 0.6 * GB
        parts = work["parts"]
        print(f"[{5 if curved else 4}] n = {n:,}{' (curved data)' if curved else ''} from {files} Parquet files "
              f"({size / GB:.2f} GB), streamed: default fit + density test + bins {work['seconds']:.1f} s "
              f"(fit {parts['fit']:.1f} s, density test {parts['density']:.1f} s, bins {parts['bins']:.1f} s; "
              f"{work['passes']} passes; window {work['window']:,} rows, h = {work['h']:.4g}; columns gathered: "
              f"{work['gathered']}) | one dask pass summing the two columns {one_pass['seconds']:.1f} s | "
              f"ratio {work['seconds'] / one_pass['seconds']:.1f} (target <= 6)")
        merged: dict = {}                 # the score pass runs in batches: one entry per pass kind and order
        for name, seconds in work["computes"]:
            if merged and list(merged)[-1][0] == name and name == "_score_part":
                merged[list(merged)[-1]] += seconds
            else:
                merged[(name, len(merged))] = seconds
        print("    time per pass, in summing passes: " + ", ".join(
            f"{name.strip('_').replace('_part', '')} {seconds / one_pass['seconds']:.1f}"
            for (name, _), seconds in merged.items())
            + f"; outside the passes {(work['seconds'] - sum(merged.values())) / one_pass['seconds']:.1f}")
        print(f"    CPU time (user + system; steadier than wall time on a shared machine): {work['cpu']:.1f} s "
              f"against {one_pass['cpu']:.1f} s for the summing pass, ratio {work['cpu'] / one_pass['cpu']:.1f}")
        print(f"    peak memory {work['peak'] / GB:.2f} GB (after the fit {work['peak_fit'] / GB:.2f} GB) | budget "
              f"{budget / GB:.2f} GB | ratio {work['peak'] / budget:.2f} (target <= 1); the summing pass alone "
              f"peaks at {one_pass['peak'] / GB:.2f} GB")
    finally:
        shutil.rmtree(folder, ignore_errors=True)


def child(task: str, folder: str, n: int) -> None:
    import dask.dataframe as dd       # imported before the clock starts: the unit is one pass, not an import
    t0 = time.perf_counter()
    cpu0 = sum(resource.getrusage(resource.RUSAGE_SELF)[:2])      # CPU seconds, user + system
    if task.startswith("write"):
        write_parquet(folder, n, max(8, n // 2_000_000), seed=1000, curved=task == "write-curved")
    elif task == "pass":
        dd.read_parquet(folder, columns=["x", "y"]).sum().compute()
    elif task == "streamed":
        import seamline.partitioned as partitioned
        computes, compute = [], partitioned._compute

        def timed(tasks, name="_partition_arrays", total=None):      # each dask.compute of the route
            start = time.perf_counter()
            try:
                return compute(tasks, name, total)
            finally:
                computes.append((name, time.perf_counter() - start))
        partitioned._compute = timed
        design = seamline.Design(folder, reading="streamed", **KWARGS)
        fit = design.fit()
        marks = [time.perf_counter()]
        peak_fit = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024.0
        design.density_test()
        marks.append(time.perf_counter())
        design.bins()
        marks.append(time.perf_counter())
        window = design._data.window(("y",))
        extra = {"passes": design._data.passes, "h": fit.bandwidth[0], "peak_fit": peak_fit,
                 "parts": {"fit": marks[0] - t0, "density": marks[1] - marks[0], "bins": marks[2] - marks[1]},
                 "gathered": design._data._gathered is not None,
                 "window": window.below.n_window + window.above.n_window, "computes": computes}
    else:
        design = seamline.Design(folder, reading="gathered", **KWARGS)
        design.fit(), design.density_test(), design.bins()
    seconds = time.perf_counter() - t0
    usage = resource.getrusage(resource.RUSAGE_SELF)
    peak = usage.ru_maxrss * 1024.0
    cpu = usage.ru_utime + usage.ru_stime - cpu0
    print(json.dumps({"seconds": seconds, "peak": peak, "cpu": cpu, **(extra if task == "streamed" else {})}))


def main(n_equal: int = 4_000_000, n_memory: int = 10_000_000, n_large: int = 100_000_000,
         steps: str = "12345") -> None:
    print(f"invented data (seeded, made by this script); {os.cpu_count()} CPUs")
    for step, work, n in (("1", equality, n_equal), ("2", memory_ratio, n_memory), ("3", large, n_large),
                          ("4", streamed, n_large), ("5", lambda n: streamed(n, curved=True), n_memory)):
        if step in steps:
            work(n)


if __name__ == "__main__":
    if len(sys.argv) > 1 and sys.argv[1] == "--child":
        child(sys.argv[2], sys.argv[3], int(sys.argv[4]))
    else:
        main(*(int(v) for v in sys.argv[1:4]), *sys.argv[4:5])
