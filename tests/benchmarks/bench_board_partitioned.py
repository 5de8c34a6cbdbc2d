"""What a partitioned board's after-cell check costs, measured side by side in one run.

Prints, for n rows in k Parquet files (invented data, seeded: a uniform score on [-1, 1] and a
noisy outcome), the best of 5 runs of: the after-cell check of a board over the Parquet path
(``reactive.fingerprints``: one ``stat`` per file), over a dask frame of the same files (dask's
token), over the same two columns in memory (content fingerprints), and reading the two columns
(``partitioned.gather_frame``, best of 2), which is what a check reading the rows would cost at least.
No target: the point is that the check is independent of the number of rows.
Run: .venv/bin/python tests/benchmarks/bench_board_partitioned.py [n files]   (default 4000000 40)
"""
from __future__ import annotations

import shutil
import sys
import tempfile
import time

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

import dask.dataframe as dd
from seamline.notebook.reactive import fingerprints
from seamline.partitioned import gather_frame


def best(f, repeats=5):
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        f()
        times.append(time.perf_counter() - start)
    return min(times)


def main(n: int, files: int) -> None:
    folder = tempfile.mkdtemp(prefix="seamline-bench-board-")
    try:
        rng = np.random.default_rng(0)
        for k in range(files):
            x = rng.uniform(-1, 1, n // files)
            pq.write_table(pa.table({"x": x, "y": x + rng.normal(size=x.size)}), f"{folder}/part-{k}.parquet")
        path = f"{folder}/*.parquet"
        frame = dd.read_parquet(path)
        memory = gather_frame(path, ["x", "y"])
        read = best(lambda: gather_frame(path, ["x", "y"]), 2)
        print(f"{n} rows in {files} Parquet files")
        for label, data in (("Parquet path (file stats)", path), ("dask frame (token)", frame),
                            ("pandas frame (column fingerprints)", memory)):
            t = best(lambda: fingerprints(data, ["x", "y"]))
            print(f"after-cell check, {label:36s} {1e3 * t:9.2f} ms  ({t / read:.4f} x reading the columns)")
        print(f"reading the two columns (gather_frame){'':20s}{1e3 * read:9.0f} ms")
    finally:
        shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    args = [int(a) for a in sys.argv[1:3]]
    main(*(args + [4_000_000, 40][len(args):]))
