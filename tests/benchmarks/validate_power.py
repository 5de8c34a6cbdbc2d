"""Monte Carlo check of sample_size under both scaling conventions (not part of `make test`).

Data-generating process: score uniform on [-1, 1], quadratic means on each side with a jump of
0.15, normal errors with sd 0.5 (the bias-corrected local linear estimate is unbiased given the
scores, so only the scaling rule and the normal approximation are under test). A pilot of 20000
draws gives the sample size for 80% power; R samples of that size are then fitted and the
rejection rate of the robust 5% test is printed with its binomial standard error, next to the mean
estimate, the Monte Carlo sd of the estimates and the mean robust se against the predicted se.
"fixed-bandwidth" fits at h = 0.4, pilot b = 0.6; "reselected-bandwidth" uses the default fit
(bandwidths selected in every sample). Usage:
    .venv/bin/python tests/benchmarks/validate_power.py [replications]
"""
from __future__ import annotations

import math
import sys
import time

import numpy as np
import pandas as pd

import seamline

EFFECT = 0.15


def draw(n: int, rng: np.random.Generator) -> pd.DataFrame:
    x = rng.uniform(-1.0, 1.0, n)
    y = 0.5 + 0.8 * x - 0.6 * x ** 2 + EFFECT * (x >= 0) + rng.normal(0.0, 0.5, n)
    return pd.DataFrame({"x": x, "y": y})


def main(reps: int = 1000) -> None:
    rng = np.random.default_rng(2026)
    pilot = seamline.Design(draw(20000, rng), score="x", cutoff=0.0, outcome="y")
    print(f"{'scaling':>20} {'n':>6} | {'rejection':>9} {'(se)':>6} | {'mean est':>8} {'sd est':>7} "
          f"{'mean se':>7} {'pred se':>7} | {'seconds':>7}")
    for scaling, options in (("fixed-bandwidth", {"bandwidth": 0.4, "pilot_bandwidth": 0.6}),
                             ("reselected-bandwidth", {})):
        plan = pilot.sample_size(EFFECT, power=0.8, scaling=scaling, **options)
        start = time.perf_counter()
        fits = [seamline.Design(draw(plan.n_total, rng), score="x", cutoff=0.0, outcome="y").fit(**options)
                for _ in range(reps)]
        seconds = time.perf_counter() - start
        rate = np.mean([f.robust_p_value < 0.05 for f in fits])
        est = np.array([f.bias_corrected_estimate for f in fits])
        print(f"{scaling:>20} {plan.n_total:>6} | {rate:>9.3f} {math.sqrt(rate * (1 - rate) / reps):>6.3f} | "
              f"{est.mean():>8.4f} {est.std(ddof=1):>7.4f} {np.mean([f.robust_std_error for f in fits]):>7.4f} "
              f"{plan.std_error:>7.4f} | {seconds:>7.1f}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 1000)
