"""Larger Monte Carlo validation on the published designs (not part of `make test`; `make validate`).

Designs: the Lee / Ludwig-Miller quintic Models 1-3 used by Imbens & Kalyanaraman (2012) and
Calonico, Cattaneo & Titiunik (2014), as in METHODS 14.1 (coefficients confirmed there against
independent replication scripts). For each model and n it prints, over R replications of the default
fit (MSE-optimal bandwidth, triangular kernel, local linear, neighbour variance) and of the
coverage-error rule: coverage of the conventional and robust bias-corrected 95% intervals, the mean
bias-corrected estimate against the truth, mean SE / Monte Carlo SD, the mean robust interval length, the median bandwidth
against the population MSE-optimal value (METHODS 14.2) and the median pilot (bias) bandwidth. Usage:
    .venv/bin/python tests/benchmarks/validate_monte_carlo.py [replications]
"""
from __future__ import annotations

import sys
import time

import numpy as np
import pandas as pd

import seamline

SIGMA = 0.1295
MODELS = {  # METHODS 14.1: (left coefficients, right coefficients, tau, population h at n = 500)
    1: ([0.48, 1.27, 7.18, 20.21, 21.54, 7.33], [0.52, 0.84, -3.00, 7.99, -9.01, 3.56], 0.04, 0.1655),
    2: ([3.71, 2.30, 3.28, 1.45, 0.23, 0.03], [0.26, 18.49, -54.81, 74.30, -45.02, 9.83], -3.45, 0.0825),
    3: ([0.48, 1.27, -0.5 * 7.18, 0.7 * 20.21, 1.1 * 21.54, 1.5 * 7.33],
        [0.52, 0.84, -0.1 * 3.00, -0.3 * 7.99, -0.1 * 9.01, 3.56], 0.04, 0.2601),
}


def draw(model: int, n: int, rng: np.random.Generator) -> pd.DataFrame:
    left, right, _, _ = MODELS[model]
    x = 2.0 * rng.beta(2.0, 4.0, n) - 1.0
    powers = np.vander(x, 6, increasing=True)
    y = np.where(x < 0, powers @ np.array(left), powers @ np.array(right)) + rng.normal(0.0, SIGMA, n)
    return pd.DataFrame({"x": x, "y": y})


def main(reps: int = 1000) -> None:
    print(f"{'model':>5} {'n':>5} {'rule':>8} | {'cov conv':>8} {'cov RBC':>8} | {'mean bc - tau':>13} | "
          f"{'SE/SD':>6} {'RBC SE/SD':>9} | {'RBC len':>7} | {'median h':>8} {'h / pop':>7} {'median b':>8}")
    for model in (1, 2, 3):
        tau, h500 = MODELS[model][2], MODELS[model][3]
        for n in (500, 2000):
            for rule in ("mse", "coverage"):
                rng = np.random.default_rng(1000 * model + n)
                rows = []
                t0 = time.perf_counter()
                for _ in range(reps):
                    f = seamline.Design(draw(model, n, rng), score="x", cutoff=0.0, outcome="y").fit(bandwidth=rule)
                    rows.append((f.estimate, f.std_error, *f.conf_int, f.bias_corrected_estimate,
                                 f.robust_std_error, *f.robust_conf_int, f.bandwidth[0], f.pilot_bandwidth[0]))
                a = np.array(rows)
                cov_conv = np.mean((a[:, 2] <= tau) & (tau <= a[:, 3]))
                cov_rbc = np.mean((a[:, 6] <= tau) & (tau <= a[:, 7]))
                pop = h500 * (500 / n) ** 0.2
                print(f"{model:>5} {n:>5} {rule:>8} | {cov_conv:8.3f} {cov_rbc:8.3f} | {a[:, 4].mean() - tau:13.4f} | "
                      f"{a[:, 1].mean() / a[:, 0].std():6.2f} {a[:, 5].mean() / a[:, 4].std():9.2f} | "
                      f"{np.mean(a[:, 7] - a[:, 6]):7.4f} | "
                      f"{np.median(a[:, 8]):8.4f} {np.median(a[:, 8]) / pop:7.2f} {np.median(a[:, 9]):8.4f}"
                      f"   ({time.perf_counter() - t0:.0f} s)")
    print("Binomial sd of a 95% coverage rate at this many replications:", f"{np.sqrt(0.95 * 0.05 / reps):.4f}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 1000)
