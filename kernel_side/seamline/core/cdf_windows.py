"""Window sums of the local-CDF density estimator from blocked tables over the sorted scores.

The estimator fits the empirical CDF by kernel-weighted least squares in a window around a point
x0 (Cattaneo, Jansson & Ma 2020). With u_j = (X_j - x0)/h and w_j = K(|u_j|)/h, everything it needs
is a sum over a contiguous run of the sorted scores:

* the fit: sum_j w_j u_j^k (the Gram matrix and the bias vector) and sum_j w_j u_j^k N_j, where
  N_j = #{i : X_i <= X_j} (n times the empirical CDF at X_j);
* its Hajek-projection variance. With A(x) = sum_j w_j r_j 1{x <= X_j} and r_j = (1, u_j, ...),
  sum_i psi_i psi_i' = (sum_i A(X_i) A(X_i)' - NW NW'/n) / n^2 with NW = sum_j N_j w_j r_j, and
  sum_i A(X_i) A(X_i)' = sum_{j, l} N_{min(j, l)} w_j r_j w_l r_l' (sorted order), i.e. the diagonal
  sum_j N_j w_j^2 r_j r_j' plus the ordered pairs sum_{j < l} N_j w_j r_j w_l r_l' and their transpose.

Every summand is a polynomial in u_j (the kernels are polynomials in |u|, and |u| = -u or u on
either side of x0). We cut the sorted scores into blocks of BLOCK rows and store, per block b with
centre m_b and half-span s_b, the power sums of delta_j = (X_j - m_b)/s_b in [-1, 1]: sum delta^k,
sum N delta^k and the ordered pair sums sum_{j < l} N_j delta_j^k delta_l^m. A block that lies
inside a window on one side of x0 then contributes exactly (binomial theorem, u = (m_b - x0)/h +
(s_b/h) delta); the expansion is well conditioned because |delta| <= 1 and a block spans little of
the window. The rows at the two ends of the window and in the block holding x0 (where the
triangular kernel has its kink) are summed row by row. A window therefore costs O(n / BLOCK + BLOCK)
instead of O(window), and the tables cost one O(n) pass, built once per sample and degree.
Sums agree with the row-by-row computation up to rounding (tests/core/test_cdf_windows.py).

Memory: the engine reads the sorted scores in place and asks for the counts N_j of a run of rows
when it needs them (``counts(start, stop)``), so nothing of length n is kept beside the scores: the
tables hold about 60 numbers per block (under one byte per row) and every pass works on at most
_CHUNK_BLOCKS blocks. One side's scores can be given alone with their ``offset`` (the number of
rows before them in the whole sorted sample): blocks then stay aligned on multiples of BLOCK of the
whole sample, so the sums are those of one engine over both sides, bit for bit.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .kernels import kernel_poly, kernel_weights

BLOCK = 512
_CHUNK_BLOCKS = 64      # blocks per pass when building tables (keeps temporaries near 3 MB)


class BlockTables:
    """Power sums per block of the sorted scores (see the module docstring)."""

    def __init__(self, xs: np.ndarray, counts, order: int, block: int = BLOCK, offset: int = 0):
        self.block = block
        self.order = order                  # highest power of delta in one weighted basis term
        counts = _counts_reader(counts)
        # whole blocks of the full sample (rows offset + i) inside xs; the rest is summed directly
        self.first = -(-offset // block)
        n_blocks = max(0, (offset + len(xs)) // block - self.first)
        self.n_blocks = n_blocks
        base = self.first * block - offset  # local row of the first whole block
        top = 2 * order + 1
        self.centre = np.empty(n_blocks)
        self.half = np.empty(n_blocks)
        self.power = np.empty((n_blocks, top + 1))              # sum delta^k
        self.power_n = np.empty((n_blocks, top + 1))            # sum N delta^k
        self.pairs = np.empty((n_blocks, order + 1, order + 1))  # sum_{j<l} N_j delta_j^k delta_l^m
        for first in range(0, n_blocks, _CHUNK_BLOCKS):
            last = min(first + _CHUNK_BLOCKS, n_blocks)
            rows = slice(base + first * block, base + last * block)
            z = xs[rows].reshape(last - first, block)
            nj = counts(rows.start, rows.stop).reshape(last - first, block)
            lo, hi = z[:, 0], z[:, -1]
            centre = 0.5 * (lo + hi)
            half = 0.5 * (hi - lo)
            half[half == 0] = 1.0
            delta = (z - centre[:, None]) / half[:, None]
            # (blocks, power, row): every pass below runs along contiguous rows
            powers = np.empty((last - first, top + 1, block))
            powers[:, 0] = 1.0
            for k in range(1, top + 1):
                np.multiply(powers[:, k - 1], delta, out=powers[:, k])
            self.centre[first:last], self.half[first:last] = centre, half
            self.power[first:last] = powers.sum(axis=2)
            self.power_n[first:last] = np.matmul(powers, nj[:, :, None])[:, :, 0]
            low = powers[:, : order + 1]
            weighted = low * nj[:, None, :]
            before = np.cumsum(weighted, axis=2)
            before -= weighted                                   # rows j < l only
            self.pairs[first:last] = np.matmul(before, low.transpose(0, 2, 1))


@dataclass
class WindowSums:
    """Unscaled sums of one window fit of degree d (basis r = (1, u, ..., u^d)).

    gram : sum_j w_j r_j r_j'; bias : sum_j w_j r_j u_j^(d+1); with_counts : sum_j N_j w_j r_j.
    ``variance_sums`` (filled on request): total : sum_j w_j r_j; pairs : sum_i A(X_i) A(X_i)'.
    """

    gram: np.ndarray
    bias: np.ndarray
    with_counts: np.ndarray
    total: np.ndarray | None = None
    pairs: np.ndarray | None = None
    _pieces: list = field(default_factory=list, repr=False)


class WindowEngine:
    """Window sums over one sorted sample: ``fit_sums`` for a fit, ``add_variance`` for its variance."""

    def __init__(self, xs: np.ndarray, counts, block: int = BLOCK, offset: int = 0):
        """``counts``: N_j of the sorted rows, an integer array or ``counts(start, stop)`` giving
        them as floats for rows [start, stop) of ``xs``; ``offset``: rows of the whole sorted sample
        before ``xs`` (row indices given to the engine are positions in ``xs``)."""
        self.xs = xs
        self.counts = _counts_reader(counts)
        self.offset = offset
        self.block = block
        self._tables: BlockTables | None = None
        self._reserved = 0

    def reserve(self, order: int) -> None:
        """Build the tables, when first needed, for terms up to this order (one build, not several)."""
        self._reserved = max(self._reserved, order)

    def tables(self, order: int) -> BlockTables:
        if self._tables is None or self._tables.order < order:
            self._tables = BlockTables(self.xs, self.counts, max(order, self._reserved), self.block,
                                       self.offset)
        return self._tables

    # ---- one window -----------------------------------------------------------------------------
    def _plan(self, a: int, b: int, kink: int) -> tuple[list[tuple[int, int]], np.ndarray, np.ndarray]:
        """Direct row ranges and the blocks expanded from the tables (with their side of x0), in
        rows of the whole sample (local row + offset) and block numbers of the whole sample."""
        B = self.block
        off = self.offset
        a, b, kink = a + off, b + off, kink + off
        n_blocks = (off + len(self.xs)) // B
        first = -(-a // B)                   # first block starting at or after a
        last = min(b // B, n_blocks)         # blocks before this one end at or before b
        if last - first < 3:                 # a short window: every row directly
            return [(a, b)], np.empty(0, dtype=np.int64), np.empty(0)
        # keep the blocks at both ends direct too: rows with zero weight can only sit there
        first += 1
        last -= 1
        blocks = np.arange(first, last)
        direct = [(a, first * B), (last * B, b)]
        inside = (blocks * B < kink) & (kink < (blocks + 1) * B)
        if inside.any():
            k_block = int(blocks[inside][0])
            direct.append((k_block * B, (k_block + 1) * B))
            blocks = blocks[~inside]
        sign = np.where(blocks * B >= kink, 1.0, -1.0)    # u >= 0 from the kink on
        return direct, blocks, sign

    def fit_sums(self, a: int, b: int, kink: int, x0: float, h: float, degree: int,
                 kernel: str) -> WindowSums:
        """Sums of the degree-``degree`` fit over rows [a, b) (all with positive weight)."""
        direct, blocks, sign = self._plan(a, b, kink)
        q = degree + 1
        gram = np.zeros((q, q))
        bias = np.zeros(q)
        with_counts = np.zeros(q)
        pieces = []
        off = self.offset
        for start, stop in direct:
            if stop <= start:
                continue
            z = self.xs[start - off:stop - off]
            u = (z - x0) / h
            w = kernel_weights(kernel, np.abs(u)) / h
            r = np.vander(u, degree + 2, increasing=True)
            wr = w[:, None] * r[:, :q]
            gram += wr.T @ r[:, :q]
            bias += wr.T @ r[:, q]
            nj = self.counts(start - off, stop - off)
            with_counts += wr.T @ nj
            pieces.append(("rows", start, wr, nj))
        if len(blocks):
            kpoly = kernel_poly(kernel)
            kd = len(kpoly) - 1
            tables = self.tables(degree + kd)          # w u^r has degree d + kernel degree in u
            top = 2 * degree + 1 + kd                  # highest power of u any sum here needs
            blocks = blocks - tables.first             # rows of the tables
            coef_u = _powers_in_delta(tables, blocks, x0, h, top)             # (nb, top+1, top+1)
            u_pow = np.matmul(coef_u, tables.power[blocks, : top + 1, None])[:, :, 0]
            u_pow_n = np.matmul(coef_u[:, : q + kd, : q + kd],
                                tables.power_n[blocks, : q + kd, None])[:, :, 0]
            kern = kpoly[None, :] * sign[:, None] ** np.arange(kd + 1)[None, :] / h   # (nb, t)
            ks = np.arange(2 * degree + 2)
            moments = sum(kern[:, t] @ u_pow[:, ks + t] for t in range(kd + 1))
            gram += moments[np.add.outer(np.arange(q), np.arange(q))]
            bias += moments[np.arange(q) + q]
            with_counts += sum(kern[:, t] @ u_pow_n[:, t:t + q] for t in range(kd + 1))
            pieces.append(("blocks", tables, blocks, coef_u, kern))
        out = WindowSums(gram=gram, bias=bias, with_counts=with_counts)
        out._pieces = pieces
        return out

    def add_variance(self, sums: WindowSums, degree: int) -> WindowSums:
        """Fill ``total`` and ``pairs`` (sum_i A(X_i) A(X_i)') of a window's sums."""
        if sums.pairs is not None:
            return sums
        q = degree + 1
        starts, totals, weighted, inner = [], [], [], np.zeros((q, q))
        for piece in sums._pieces:
            if piece[0] == "rows":
                _, start, wr, nj = piece
                nwr = nj[:, None] * wr
                after = np.cumsum(wr[::-1], axis=0)[::-1] - wr           # sum over later rows
                inner += nwr.T @ wr + nwr.T @ after + after.T @ nwr
                starts.append(np.array([start]))
                totals.append(wr.sum(axis=0)[None, :])
                weighted.append(nwr.sum(axis=0)[None, :])
            else:
                _, tables, blocks, coef_u, kern = piece
                m = q + kern.shape[1] - 1                 # powers of delta in w u^r: up to d + kd
                # c[b, r, :] = coefficients in delta of w u^r on block b
                c = sum(kern[:, t, None, None] * coef_u[:, t:t + q, :m] for t in range(kern.shape[1]))
                total_b = np.einsum("brm,bm->br", c, tables.power[blocks, :m])
                weighted_b = np.einsum("brm,bm->br", c, tables.power_n[blocks, :m])
                hankel = tables.power_n[blocks][:, np.add.outer(np.arange(m), np.arange(m))]
                diag = np.einsum("brm,bmk,bsk->rs", c, hankel, c)
                pair = np.einsum("brm,bmk,bsk->rs", c, tables.pairs[blocks, :m, :m], c)
                inner += diag + pair + pair.T
                starts.append((blocks + tables.first) * self.block)
                totals.append(total_b)
                weighted.append(weighted_b)
        order = np.argsort(np.concatenate(starts), kind="stable")
        total_seg = np.concatenate(totals)[order]
        weighted_seg = np.concatenate(weighted)[order]
        later = np.cumsum(total_seg[::-1], axis=0)[::-1] - total_seg      # sum over later pieces
        cross = weighted_seg.T @ later
        sums.total = total_seg.sum(axis=0)
        sums.pairs = inner + cross + cross.T
        return sums


def _counts_reader(counts):
    """``counts(start, stop)`` as floats, from an integer array or such a function."""
    if callable(counts):
        return counts
    return lambda start, stop: counts[start:stop].astype(float)


def _powers_in_delta(tables: BlockTables, blocks: np.ndarray, x0: float, h: float, top: int) -> np.ndarray:
    """coef[b, k, m]: coefficient of delta^m in u^k on block b, u = (m_b - x0)/h + (s_b/h) delta.

    By the binomial theorem, coef = C(k, m) shift^(k-m) scale^m for m <= k (zero above).
    """
    k = np.arange(top + 1)
    binom = _binomials(top)
    shift = ((tables.centre[blocks] - x0) / h)[:, None] ** k[None, :]
    scale = (tables.half[blocks] / h)[:, None] ** k[None, :]
    gap = np.subtract.outer(k, k)                       # k - m
    lower = gap >= 0
    return binom[None] * shift[:, np.where(lower, gap, 0)] * scale[:, None, :] * lower[None]


def _binomials(top: int) -> np.ndarray:
    out = np.zeros((top + 1, top + 1))
    for k in range(top + 1):
        for m in range(k + 1):
            out[k, m] = math.comb(k, m)
    return out
