"""What the board's inference panels cost (issue 9), against one default fit.

For n = 2e3, 2e4 and 2e5 invented rows, prints the wall time of each inference node a board
computes, divided by one default fit on a fresh Design (preparation included), each measured on a
fresh Design whose default fit has already run (untimed), as on a board:

    bias_aware           Design.bias_aware() with its sensitivity table over M (the Estimate tab)
    local_randomization  Design.local_randomization(window=2.0, seed=1): balance p-values on two
                         covariates in every nested window, then the sensitivity over windows (the tab)
    weak_iv              Fit.weak_iv_conf_set() on the invented fuzzy scenario

and, as "level", the same two calls at level 0.90 on a design that already answered at 0.95 (a board's
level change: the balance of the nested windows, each window's outcome test and the moments at the
searched bandwidths are kept on the design, seamline.estimate.design.INFERENCE_PARTS).

The local randomization node is the expensive one (randomization draws in each of the nested
windows and each covariate); it runs only when its tab is open or the board is idle. No target is
set by the issue; the ratios are printed so a change that makes a node costlier shows.
Data: seamline.demo_data (invented, seeded). Run: .venv/bin/python tests/benchmarks/bench_inference_panels.py [n ...]
"""
from __future__ import annotations

import sys

import seamline
from _timing import timed  # tests/benchmarks/ is on sys.path when a script runs
from seamline.demo_data import fuzzy_scenario, sharp_scenario


def fresh(data, kwargs):
    design = seamline.Design(data, **kwargs)
    design.fit()
    return design


def main(sizes) -> None:
    print(f"{'n':>8} {'fit s':>8} {'bias_aware':>11} {'local rand.':>12} {'weak_iv':>8} {'level: aware':>12} {'level: rand.':>13}   (times one default fit)")
    for n in sizes:
        s = sharp_scenario(n=n, seed=5)
        kwargs = {"score": s.score, "cutoff": s.cutoff, "outcome": s.outcome[0], "treated": s.treated,
                  "covariates": ["age", "prior_math"]}
        fit = timed(lambda: seamline.Design(s.data, **kwargs).fit(), repeat=3)

        def aware():
            fresh(s.data, kwargs).bias_aware().sensitivity

        def randomization():
            fresh(s.data, kwargs).local_randomization(window=2.0, seed=1).sensitivity

        kept = fresh(s.data, kwargs)
        kept.bias_aware().sensitivity
        kept.local_randomization(window=2.0, seed=1).sensitivity
        level_aware = timed(lambda: kept.bias_aware(level=0.9).sensitivity, repeat=1) / fit
        level_randomization = timed(lambda: kept.local_randomization(window=2.0, seed=1, level=0.9).sensitivity,
                                    repeat=1) / fit

        f = fuzzy_scenario(n=n, seed=5)
        fuzzy_fit = seamline.Design(f.data, **f.design_kwargs()).fit()
        ratios = [timed(aware, repeat=3) / fit, timed(randomization, repeat=1) / fit,
                  timed(lambda: fuzzy_fit.weak_iv_conf_set(), repeat=3) / fit]
        print(f"{n:>8} {fit:>8.3f} {ratios[0]:>11.1f} {ratios[1]:>12.1f} {ratios[2]:>8.2f} "
              f"{level_aware:>12.2f} {level_randomization:>13.2f}")


if __name__ == "__main__":
    main([int(float(a)) for a in sys.argv[1:]] or [2_000, 20_000, 200_000])
