"""Kernel-weighted sufficient statistics from blocked prefix sums (METHODS Appendix C).

On one side of the cutoff, sorted by distance d to the cutoff, every local polynomial quantity with a
polynomial kernel is a sum over the window {d <= t} of (a series) x (a polynomial in d / t). We store,
per series, prefix sums of d^m * series at block boundaries only; a window sum is one block lookup plus
a direct sum over the partial block. A new bandwidth therefore costs O(log n + block) instead of O(n),
and memory stays at (n / block) x (degree + 1) numbers per series instead of n x (degree + 1).
"""
from __future__ import annotations

from typing import Callable, Hashable

import numpy as np

# A series is a function of a row slice returning that slice's values (so a partial block never
# materialises the whole column).
Series = Callable[[slice], np.ndarray]

BLOCK = 512


class SideMoments:
    """Window moments sum_{d <= t} v_i (d_i / t)^m for series v on one side sorted by distance d."""

    def __init__(self, distance: np.ndarray, block: int = BLOCK):
        self.distance = distance
        self.n = len(distance)
        self.block = block
        # Scale distances into [0, 1] so high powers neither overflow nor underflow for any units.
        self.scale = float(distance[-1]) if self.n and distance[-1] > 0 else 1.0
        self._tables: dict[Hashable, np.ndarray] = {}
        self._tail: tuple[int, int, int, np.ndarray] | None = None  # powers of the last partial block

    def count(self, t: float) -> int:
        """Number of observations with distance <= t."""
        return int(np.searchsorted(self.distance, t, side="right"))

    def _powers(self, rows: slice, degree: int) -> np.ndarray:
        """(degree+1, rows) powers of d/scale, built row by row (contiguous, unlike np.vander)."""
        d = self.distance[rows] / self.scale
        out = np.empty((degree + 1, len(d)))
        out[0] = 1.0
        for m in range(1, degree + 1):
            np.multiply(out[m - 1], d, out=out[m])
        return out

    def ensure(self, requests: list[tuple[Hashable, Series]], degree: int) -> None:
        """Build block tables for several series in one pass over the data (one Vandermonde per chunk)."""
        todo = [(k, f) for k, f in requests
                if k not in self._tables or self._tables[k].shape[1] <= degree]
        if not todo:
            return
        n_blocks = -(-self.n // self.block)
        sums = np.zeros((n_blocks + 1, degree + 1, len(todo)))
        chunk = 64 * self.block
        for start in range(0, self.n, chunk):
            stop = min(start + chunk, self.n)
            rows = slice(start, stop)
            powers = self._powers(rows, degree)                               # (degree+1, rows)
            vals = np.column_stack([f(rows) for _, f in todo])                # (rows, series)
            first = start // self.block
            nb = -(-(stop - start) // self.block)
            full = (stop - start) // self.block * self.block
            if full:
                p3 = powers[:, :full].reshape(degree + 1, -1, self.block).transpose(1, 0, 2)
                s3 = vals[:full].reshape(-1, self.block, len(todo))
                sums[1 + first: 1 + first + full // self.block] = np.matmul(p3, s3)
            if full < stop - start:
                sums[first + nb] = powers[:, full:] @ vals[full:]
        np.cumsum(sums, axis=0, out=sums)
        for j, (key, _) in enumerate(todo):
            self._tables[key] = np.ascontiguousarray(sums[:, :, j])

    def _table(self, key: Hashable, series: Series, degree: int) -> np.ndarray:
        table = self._tables.get(key)
        if table is None or table.shape[1] <= degree:
            self.ensure([(key, series)], max(degree, 2 * (table.shape[1] - 1) if table is not None else degree))
            table = self._tables[key]
        return table

    def sums(self, key: Hashable, series: Series, t: float, degree: int) -> np.ndarray:
        """Normalised window moments [sum_{d<=t} v (d/t)^m for m = 0..degree]; ``series(rows)`` gives v."""
        n_t = self.count(t)
        table = self._table(key, series, degree)
        full = n_t // self.block
        out = table[full, : degree + 1].copy()
        if n_t > full * self.block:
            sl = slice(full * self.block, n_t)
            # several series are usually summed over the same window: reuse the partial block's powers
            tail = self._tail
            if tail is None or tail[0] != sl.start or tail[1] != n_t or tail[2] < degree:
                tail = (sl.start, n_t, degree, self._powers(sl, degree))
                self._tail = tail
            out += tail[3][: degree + 1] @ series(sl)
        # from powers of d/scale to powers of d/t
        out *= (self.scale / t) ** np.arange(degree + 1)
        return out


def scaled_poly(coefs: np.ndarray, rho: float) -> np.ndarray:
    """Coefficients of f(rho * v) given those of f(v)."""
    return coefs * rho ** np.arange(len(coefs)) if rho != 1.0 else coefs


def window_gram(moments: SideMoments, t: float, terms, n_row: int, n_col: int,
                row_kernel: np.ndarray, col_kernel: np.ndarray,
                rho_row: float, rho_col: float, sign: float) -> np.ndarray:
    """G[j, k] = sum_{d<=t} sum_terms v(d) q(d/t) Kr(rho_r d/t) (s rho_r d/t)^j Kc(rho_c d/t) (s rho_c d/t)^k.

    ``terms`` is a list of (key, series_fn, poly) where poly is a polynomial in v = d/t. Row and column
    bases are the local polynomial bases at bandwidths t/rho_row and t/rho_col (so one call serves the
    point-estimate, bias and cross blocks of the bias-corrected variance).
    """
    # plain convolutions: numpy.polynomial's argument checks cost more than the arithmetic here
    base = np.convolve(scaled_poly(row_kernel, rho_row), scaled_poly(col_kernel, rho_col))
    size = n_row + n_col - 1
    hankel = np.zeros(size)
    for key, series, poly in terms:
        coef = np.convolve(base, poly)
        m = moments.sums(key, series, t, len(coef) - 1 + size - 1)
        hankel += np.correlate(m, coef, mode="valid")
    j = np.arange(n_row)[:, None]
    k = np.arange(n_col)[None, :]
    return hankel[j + k] * (sign ** (j + k)) * (rho_row ** j) * (rho_col ** k)
