"""Seeded inputs and the numbers pinned from them for tests/core/test_density_sorted.py.

Run as a script with a seamline tree on PYTHONPATH to (re)write the pinned file:
    PYTHONPATH=kernel_side python tests/core/_pinned_inputs.py tests/core/data/pinned_density_bins.json
The file in the repository was written by commit 3238b1f (before the density test and the bins read
the sorted scores in place), so the test pins the present code to that one's numbers.
"""
from __future__ import annotations

import json
import sys

import numpy as np

DENSITY_FIELDS = ("density_below", "density_above", "se_below", "se_above", "density_below_robust",
                  "density_above_robust", "se_below_robust", "se_above_robust", "statistic", "p_value",
                  "statistic_conventional", "cross_covariance", "bandwidth", "n_used", "bin_width",
                  "tie_share")
BIN_FIELDS = ("count", "mean", "score_mean", "std_error", "left", "right", "weight_sum")


def density_inputs():
    rng = np.random.default_rng(2024)
    yield "normal", rng.normal(0.1, 1.0, 3000), 0.0, {}
    yield "uniform", rng.uniform(-1, 1, 200_000), 0.0, {}
    yield "tied", np.round(rng.normal(0, 1, 5000), 1), 0.05, {}
    yield "skew-manual", rng.exponential(1.0, 4000), 0.7, dict(bandwidth=(0.4, 0.9))
    yield "epanechnikov-p3", rng.beta(2, 3, 6000), 0.4, dict(kernel="epanechnikov", degree=3)
    yield "uniform-kernel-p1", rng.normal(0, 1, 2500), -0.3, dict(kernel="uniform", degree=1)


def bin_inputs():
    rng = np.random.default_rng(77)
    x = np.round(rng.normal(0, 1, 20000), 2)
    y = x ** 2 + rng.normal(0, 1, x.size)
    w = rng.uniform(0, 2, x.size)
    w[::17] = 0.0
    order = np.argsort(x)           # not a stable sort: ties in any order
    u = rng.uniform(-1, 1, 50000)
    v = np.sin(3 * u) + 0.5 * (u >= 0) + rng.normal(0, 0.3, u.size)
    for method in ("equal-width", "equal-count"):
        yield f"continuous/{method}", u, v, 0.0, dict(method=method)
        yield f"tied-weighted-order/{method}", x, y, 0.1, dict(method=method, weights=w, order=order)
        yield f"many-bins/{method}", x, y, 0.1, dict(method=method, number=(2500, 3100), order=order)


def thin(values) -> list:
    """A long array by every 37th value and its NaN-ignoring sum (keeps the pinned file small)."""
    a = np.asarray(values, dtype=float)
    if a.size <= 200:
        return a.tolist()
    return a[::37].tolist() + [float(np.nansum(a))]


def numbers() -> dict:
    from seamline.core.binning import binned_means
    from seamline.core.density import density_test
    out = {}
    for name, x, c, opts in density_inputs():
        for method in ("local-cdf", "binned"):
            est = density_test(x, c, method=method, **(opts if method == "local-cdf" else {}))
            row = {f: np.asarray(getattr(est, f), dtype=float).tolist() for f in DENSITY_FIELDS}
            row["grid.density"] = thin(est.grid.density)
            row["grid.ci_low"] = thin(est.grid.ci_low)
            row["histogram.count"] = thin(est.histogram.count)
            out[f"density/{name}/{method}"] = row
    for name, x, y, c, opts in bin_inputs():
        b = binned_means(x, y, c, **opts)
        row = {f: thin(getattr(b, f)) for f in BIN_FIELDS}
        row["number"] = list(b.number)
        for side in ("below", "above"):
            k = getattr(b.selection, side)
            row[side] = [k.bias_equal_width, k.variance_equal_width, k.bias_equal_count,
                         k.variance_equal_count, k.pilot_degree]
        out[f"bins/{name}"] = row
    return out


if __name__ == "__main__":
    with open(sys.argv[1], "w") as f:
        json.dump(numbers(), f)
