"""Monte Carlo coverage of the robust interval with clustered samples (`make validate`).

Design (invented for this check, seeded): n = 1800 units in G clusters of random size, score
uniform on [-1, 1] and independent of the cluster, y = 0.5 * 1{x >= 0} + 0.8 x - 0.5 x^2 + u_g + e,
u_g ~ N(0, sd_c^2) shared by a cluster's units on both sides of the cutoff, e ~ N(0, 0.7^2). The
default fit (MSE bandwidth, local linear, triangular kernel) with cluster-robust inference, once
with the classic CR1 variance and normal critical values and once with the bias-reduced CR2
variance and Bell-McCaffrey t critical values (Bell and McCaffrey 2002; Imbens and Kolesar 2016).
Usage: .venv/bin/python tests/benchmarks/validate_clusters.py [replications]
"""
from __future__ import annotations

import sys
import time

import numpy as np
import pandas as pd

import seamline

JUMP = 0.5


def draw(rng: np.random.Generator, n: int, groups: int, sd_cluster: float) -> pd.DataFrame:
    g = rng.integers(0, groups, n)
    x = rng.uniform(-1, 1, n)
    y = JUMP * (x >= 0) + 0.8 * x - 0.5 * x ** 2 + rng.normal(0, sd_cluster, groups)[g] + rng.normal(0, 0.7, n)
    return pd.DataFrame({"x": x, "y": y, "g": g})


def main(reps: int = 1000) -> None:
    print(f"{'G':>4} {'sd_c':>5} | {'classic cov':>11} {'len':>6} | {'bias-reduced cov':>16} {'len':>6} "
          f"{'median df':>9}")
    for groups in (20, 60, 200):
        for sd_cluster in (0.7, 0.35):
            rng = np.random.default_rng(0)
            out = []
            t0 = time.perf_counter()
            for _ in range(reps):
                design = seamline.Design(draw(rng, 1800, groups, sd_cluster), score="x", cutoff=0.0, outcome="y",
                                         cluster="g")
                row = []
                for correction in ("classic", "bias-reduced"):
                    fit = design.fit(cluster_variance=correction)
                    lo, hi = fit.robust_conf_int
                    row += [lo <= JUMP <= hi, hi - lo]
                row.append(fit.dof[1])
                out.append(row)
            a = np.array(out, dtype=float)
            print(f"{groups:>4} {sd_cluster:>5} | {a[:, 0].mean():11.3f} {a[:, 1].mean():6.3f} | "
                  f"{a[:, 2].mean():16.3f} {a[:, 3].mean():6.3f} {np.median(a[:, 4]):9.1f}"
                  f"   ({time.perf_counter() - t0:.0f} s)", flush=True)
    print("Monte Carlo SE of a 95% coverage rate at this many replications:", f"{np.sqrt(0.95 * 0.05 / reps):.4f}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 1000)
