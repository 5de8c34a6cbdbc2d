"""Notebook-layer costs on n = 1,000,000 invented rows, measured side by side in one process.

Prints, with their targets (issue 4):
  1. fingerprinting the columns a board uses / one default fit on a fresh Design   target <= 5%
     (a minimal design: score + outcome; and the scenario's full design: 8 columns, clusters,
     weights). Fingerprint and fit alternate, so each fingerprint reads its columns from memory
     after a fit has flushed the caches, as after a real cell; the back-to-back figure (columns
     still cached) and the cryptographic-digest alternatives are printed for comparison.
  2. `%load_ext seamline` in a fresh IPython kernel (jupyter_client, median of 3)    target <= 2 s
Run: make bench   (or .venv/bin/python tests/benchmarks/bench_notebook.py [n])
"""
from __future__ import annotations

import statistics
import sys

import seamline
from _timing import timed  # tests/benchmarks/ is on sys.path when a script runs
from seamline.demo_data import sharp_scenario
from seamline.notebook.board import Board
from seamline.notebook.reactive import fingerprint_algorithm, fingerprints, use_fingerprint_algorithm


def interleaved(fn_a, fn_b, repeat: int = 9) -> tuple[float, float]:
    """Medians of two timings taken alternately (the machine is noisy; compare like with like)."""
    a, b = [], []
    for _ in range(repeat):
        a.append(timed(fn_a, 1))
        b.append(timed(fn_b, 1))
    return statistics.median(a), statistics.median(b)


def fingerprint_cost(n: int) -> None:
    scenario = sharp_scenario(n, seed=7)
    full = scenario.design_kwargs()
    outcome = full["outcome"][0]
    minimal = dict(score=scenario.score, cutoff=scenario.cutoff, outcome=outcome, treated=scenario.treated)
    print(f"n = {n:,} invented rows (seamline.demo_data.sharp_scenario, seed=7); "
          f"chunk checksum {fingerprint_algorithm()}")
    for label, kwargs in (("score + outcome", minimal), ("full design", full)):
        board = Board("bench", kwargs, data=scenario.data, autorun=False)
        columns = board.columns
        t_print, t_fit = interleaved(lambda: fingerprints(scenario.data, columns),
                                     lambda: seamline.Design(scenario.data, **kwargs).fit())
        t_warm = timed(lambda: fingerprints(scenario.data, columns), repeat=9)
        t_check = timed(board.check_inputs)   # an unchanged board: fingerprints + comparison only
        nbytes = sum(scenario.data[c].to_numpy().nbytes for c in columns)
        print(f"[1] {label:16s} {len(columns)} columns ({nbytes / 2**20:5.1f} MiB): fingerprints "
              f"{t_print * 1e3:7.1f} ms | default fit {t_fit * 1e3:8.1f} ms | ratio {t_print / t_fit:6.2%} "
              f"(target <= 5%)")
        print(f"    back to back (columns still in cache) {t_warm * 1e3:6.1f} ms ({t_warm / t_fit:6.2%}); "
              f"whole after-cell check of an unchanged board {t_check * 1e3:6.1f} ms")
        if label == "score + outcome":
            for algorithm in ("sha256", "blake2b"):     # for comparison: cryptographic digests
                use_fingerprint_algorithm(algorithm)
                try:
                    t_strong = timed(lambda: fingerprints(scenario.data, columns))
                finally:
                    use_fingerprint_algorithm("crc32")
                print(f"    same columns with {algorithm:8s} chunk digests: {t_strong * 1e3:6.1f} ms "
                      f"({t_strong / t_fit:6.2%} of the fit)")
        board.close()


LOAD_CELL = """import time as _t
_t0 = _t.perf_counter()
%load_ext seamline
print(f"{_t.perf_counter() - _t0:.4f}")
"""


def load_ext_time(runs: int = 3) -> None:
    from jupyter_client.manager import start_new_kernel
    seconds = []
    for _ in range(runs):
        manager, client = start_new_kernel(kernel_name="python3")
        try:
            output = []
            reply = client.execute_interactive(
                LOAD_CELL, timeout=120,
                output_hook=lambda msg: output.append(msg["content"].get("text", ""))
                if msg["msg_type"] == "stream" else None)
            if reply["content"]["status"] != "ok":
                raise RuntimeError(f"%load_ext seamline failed: {reply['content']}")
            seconds.append(float("".join(output).strip().splitlines()[-1]))
        finally:
            client.stop_channels()
            manager.shutdown_kernel(now=True)
    runs_text = ", ".join(f"{s:.2f}" for s in seconds)
    print(f"[2] %load_ext seamline in a fresh kernel: median {statistics.median(seconds):.2f} s "
          f"(runs {runs_text}; target <= 2 s)")


def main(n: int = 1_000_000) -> None:
    fingerprint_cost(n)
    load_ext_time()


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 1_000_000)
