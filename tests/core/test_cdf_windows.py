"""Blocked window sums of the local-CDF density estimator against direct row-by-row computation.

Reference: first principles written in the test, straight from the definitions: for rows [a, b)
of the sorted scores, u = (X - x0)/h, w = K(|u|)/h, r = (1, u, ..., u^d) and N_j = #{i: X_i <= X_j},
  gram = sum w r r',  bias = sum w r u^(d+1),  with_counts = sum N w r,  total = sum w r,
  pairs = sum_i A(X_i) A(X_i)' with A(x) = sum_j w_j r_j 1{x <= X_j}, summed over every i literally
(an n x m indicator matrix), which is the Hajek-projection sum the variance needs.
"""
from __future__ import annotations

import numpy as np
import pytest

from seamline.core.cdf_windows import BlockTables, WindowEngine

RTOL = 1e-10    # blocked binomial expansion against direct sums: rounding only


def _kernel(u: np.ndarray, name: str) -> np.ndarray:
    a = np.abs(u)
    k = {"triangular": 1 - a, "uniform": np.ones_like(a), "epanechnikov": 1 - u ** 2}[name]
    return np.where(a <= 1, k, 0.0)


def sample(n: int, seed: int, tied: bool = False):
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    xs = np.sort(np.round(x, 2) if tied else x)
    counts = np.searchsorted(xs, xs, side="right")
    return xs, counts


def direct(xs, counts, a, b, x0, h, degree, kernel):
    z = xs[a:b]
    u = (z - x0) / h
    w = _kernel(u, kernel) / h
    r = np.vander(u, degree + 2, increasing=True)
    wr = w[:, None] * r[:, : degree + 1]
    nj = counts[a:b].astype(float)
    indicator = (xs[:, None] <= z[None, :]).astype(float)           # n x m: 1{X_i <= X_j}
    big_a = indicator @ wr                                          # A(X_i) for every i
    return dict(gram=wr.T @ r[:, : degree + 1], bias=wr.T @ r[:, degree + 1], with_counts=wr.T @ nj,
                total=wr.sum(axis=0), pairs=big_a.T @ big_a)


def window(xs, x0, h):
    a = int(np.searchsorted(xs, x0 - h, side="right"))
    b = int(np.searchsorted(xs, x0 + h, side="left"))
    return a, b


@pytest.mark.parametrize("kernel", ["triangular", "uniform", "epanechnikov"])
@pytest.mark.parametrize("degree", [1, 2, 4])
@pytest.mark.parametrize("tied", [False, True])
def test_window_sums_equal_direct_sums(kernel, degree, tied):
    xs, counts = sample(3000, seed=degree, tied=tied)
    engine = WindowEngine(xs, counts, block=64)          # small blocks: many expanded, some direct
    for x0, h in ((0.0, 0.9), (-0.37, 0.5), (0.81, 1.3), (1.7, 0.6)):
        a, b = window(xs, x0, h)
        kink = int(np.searchsorted(xs, x0, side="left"))
        got = engine.add_variance(engine.fit_sums(a, b, kink, x0, h, degree, kernel), degree)
        want = direct(xs, counts, a, b, x0, h, degree, kernel)
        for name, value in want.items():
            scale = np.max(np.abs(value))
            np.testing.assert_allclose(getattr(got, name), value, rtol=RTOL, atol=RTOL * scale,
                                       err_msg=f"{name} at x0={x0}, h={h}")


def test_a_window_that_is_only_direct_rows():
    xs, counts = sample(500, seed=3)
    engine = WindowEngine(xs, counts, block=512)         # fewer than three whole blocks: all direct
    a, b = window(xs, 0.2, 0.4)
    got = engine.add_variance(engine.fit_sums(a, b, int(np.searchsorted(xs, 0.2)), 0.2, 0.4, 2,
                                              "triangular"), 2)
    want = direct(xs, counts, a, b, 0.2, 0.4, 2, "triangular")
    np.testing.assert_allclose(got.pairs, want["pairs"], rtol=RTOL)
    np.testing.assert_allclose(got.gram, want["gram"], rtol=RTOL)


def test_block_tables_equal_direct_power_sums():
    xs, counts = sample(1000, seed=5, tied=True)
    tables = BlockTables(xs, counts, order=3, block=100)
    assert tables.n_blocks == 10
    for blk in (0, 4, 9):
        z = xs[blk * 100:(blk + 1) * 100]
        nj = counts[blk * 100:(blk + 1) * 100].astype(float)
        half = (z[-1] - z[0]) / 2 or 1.0
        delta = (z - (z[0] + z[-1]) / 2) / half
        powers = delta[:, None] ** np.arange(8)[None, :]
        np.testing.assert_allclose(tables.power[blk], powers.sum(axis=0), rtol=1e-12, atol=1e-9)
        np.testing.assert_allclose(tables.power_n[blk], nj @ powers, rtol=1e-12, atol=1e-6)
        low = powers[:, :4]
        pairs = sum(nj[j] * np.outer(low[j], low[l]) for j in range(100) for l in range(j + 1, 100))
        np.testing.assert_allclose(tables.pairs[blk], pairs, rtol=1e-11, atol=1e-6)
