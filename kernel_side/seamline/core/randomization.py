"""Fisher randomization tests under complete randomization within a window, and their inversion.

Inside a window the n units are treated as if n_1 of them had been picked at random to be treated
(complete randomization; Cattaneo, Frandsen & Titiunik 2015). Under the sharp null the outcomes are
fixed, so the null distribution of a statistic comes from recomputing it for every assignment:

- exact, by enumerating all C(n, n_1) assignments when there are at most ``EXACT_LIMIT``:
  p = #{S >= S_obs} / C(n, n_1);
- Monte Carlo otherwise, with R assignments drawn uniformly: p = (1 + #{S_r >= S_obs}) / (R + 1),
  which is never zero and valid (Phipson & Smyth 2010).

Statistics are two-sided through their absolute value: |difference in means|, the
Kolmogorov-Smirnov distance sup |F_1 - F_0|, and |rank sum of the treated - its null mean| (mid-ranks).
Ties are compared with the relative tolerance scipy.stats.permutation_test uses (100 machine epsilons).
Randomness only through an explicit numpy Generator, or (``prefix_keys``) generators seeded by
(seed, block of draws, block of units).

Nested symmetric windows share their Monte Carlo draws: the units are put in order of distance to
the cutoff, so each such window is a prefix of that order, and every draw gives each unit a uniform
key; a window's assignment treats the n_1 units of its prefix with the smallest keys, a uniform draw
from its C(n, n_1) assignments (``prefix_treated_sums``). A window's draws depend on its prefix only,
not on which other windows are analysed, so one window gets the same draws alone or in a sequence.
"""
from __future__ import annotations

from itertools import combinations
from math import comb
from typing import Callable

import numpy as np
from scipy import stats

from .interrupt import checkpoint

EXACT_LIMIT = 100_000
CHUNK = 4096                    # assignments per block when computing statistics (memory bound)
DRAW_CHUNK = 1024               # Monte Carlo draws per block of random keys
KEY_DRAWS = 64                  # draws per generator of shared keys (prefix_keys)
KEY_MEMORY = 128 * 2 ** 20      # bytes of shared keys (and their float32 copies) held at a time
KEY_BLOCK = 256                 # units per block of shared random keys (prefix_keys)
TIE_TOLERANCE = 100 * np.finfo(float).eps
# The steps of a rank statistic's p(tau0) (treated x control differences) are kept up to this many
# (32 MB); beyond it the inversion's bisection computes p at each of its points.
STEPS_KEPT = 4_000_000
STATISTICS = ("difference in means", "Kolmogorov-Smirnov", "rank sum")


def draw_assignments(n: int, n_treated: int, permutations: int,
                     rng: np.random.Generator) -> tuple[np.ndarray, bool]:
    """(m, n) boolean matrix of assignments with ``n_treated`` treated each, and whether it is exact.

    Exact: all C(n, n_treated) subsets (the observed one among them). Monte Carlo: ``permutations``
    uniform draws with replacement from that set.
    """
    total = comb(n, n_treated)
    if total <= EXACT_LIMIT:
        out = np.zeros((total, n), dtype=bool)
        rows = np.repeat(np.arange(total), n_treated)
        cols = np.fromiter((i for c in combinations(range(n), n_treated) for i in c), dtype=np.int64,
                           count=total * n_treated)
        out[rows, cols] = True
        return out, True
    out = np.zeros((permutations, n), dtype=bool)
    for start in range(0, permutations, DRAW_CHUNK):   # random keys in blocks bound the memory
        checkpoint()
        keys = rng.random((min(DRAW_CHUNK, permutations - start), n))
        picked = np.argpartition(keys, n_treated - 1, axis=1)[:, :n_treated]
        np.put_along_axis(out[start: start + len(keys)], picked, True, axis=1)
    return out, False


def prefix_keys(seed: int, draws: slice, n: int, out: np.ndarray | None = None) -> np.ndarray:
    """(draws, n) uniform keys of units 0..n-1 (in order of distance) for the Monte Carlo draws in
    ``draws`` (its start a multiple of KEY_DRAWS). Each (block of KEY_DRAWS draws, block of
    KEY_BLOCK units) has its own generator seeded by (seed, draw block, unit block), so the keys of a
    prefix depend neither on how many units follow it nor on how many draws are taken at a time.
    ``out``: a buffer to fill (at least that large)."""
    rows = draws.stop - draws.start
    blocks = -(-n // KEY_BLOCK)
    if out is None or out.shape[0] < rows or out.shape[1] < blocks * KEY_BLOCK:
        out = np.empty((rows, blocks * KEY_BLOCK))
    for d in range(draws.start // KEY_DRAWS, -(-draws.stop // KEY_DRAWS)):
        top = d * KEY_DRAWS - draws.start
        take = slice(max(0, -top), min(KEY_DRAWS, rows - top))
        for b in range(blocks):
            block = np.random.default_rng([seed, d, b]).random((KEY_DRAWS, KEY_BLOCK))
            out[top + take.start: top + take.stop, b * KEY_BLOCK:(b + 1) * KEY_BLOCK] = block[take]
    return out[:rows, :n]


def _draw_steps(permutations: int, units: int):
    """Slices of draws taken at a time: whole key blocks, at most DRAW_CHUNK, and few enough that
    the keys and their float32 copies stay within KEY_MEMORY (a window of 200,000 units, integer
    scores at 1e6 rows, would otherwise need gigabytes)."""
    fit = KEY_MEMORY // max(1, 16 * units) // KEY_DRAWS * KEY_DRAWS
    step = int(min(DRAW_CHUNK, max(KEY_DRAWS, fit)))
    return [slice(start, min(start + step, permutations)) for start in range(0, permutations, step)]


def _blocked_keys(seed: int, draws: slice, blocks: int, out: np.ndarray) -> np.ndarray:
    """The keys of ``prefix_keys`` for the first ``blocks`` unit blocks, laid out (unit block, draw,
    unit in the block) so that each generator fills its part of ``out`` in place; draws.start a
    multiple of KEY_DRAWS. A part of fewer than KEY_DRAWS draws gets the generator's first numbers,
    as the rows of its full block would."""
    rows = draws.stop - draws.start
    for d in range(draws.start // KEY_DRAWS, -(-draws.stop // KEY_DRAWS)):
        top = d * KEY_DRAWS - draws.start
        for b in range(blocks):
            np.random.default_rng([seed, d, b]).random(out=out[b, top: min(top + KEY_DRAWS, rows)])
    return out[:blocks, :rows]


def _treated_by_keys(keys: np.ndarray, n_treated: int, rounded: np.ndarray | None = None,
                     work: np.ndarray | None = None, out: np.ndarray | None = None) -> np.ndarray:
    """Each row's n_treated smallest keys (keys are distinct with probability one), as a mask.

    The selection runs on the keys rounded to float32 (half the memory a partition moves: about
    twice as fast), exactly: rounding is monotone, so the n_treated-th smallest rounded key is the
    rounding of the n_treated-th smallest key, and the keys at or below it are the n_treated
    smallest unless another key rounds to the same float32 (about 1e-4 rows in each window at n =
    4,500); those rows are partitioned in float64. The float32 numbers are partitioned and compared
    through their bit patterns read as int32: for numbers >= 0 (keys are in [0, 1)) these are in the
    same order (IEEE 754), and numpy partitions int32 about 1.5 times as fast as float32 (no NaN
    ordering). ``keys``: the keys, or a function giving the keys of some rows (only tied rows need
    them); ``rounded``: the keys rounded (else computed); ``work``: the same numbers in any order
    within each row, partitioned here in place (else a copy of ``rounded``); ``out``: a boolean
    array of that shape for the mask."""
    rows_of = keys if callable(keys) else keys.__getitem__
    if rounded is None:
        rounded = keys.astype(np.float32)
    rows, n = rounded.shape
    if work is None:
        work = rounded.copy()
    treated = np.empty((rows, n), dtype=bool) if out is None else out
    work = work.view(np.int32)
    work.partition(n_treated - 1, axis=1)
    np.less_equal(rounded.view(np.int32), work[:, n_treated - 1: n_treated], out=treated)
    # every row has at least n_treated keys at or below its n_treated-th smallest: one count of the
    # whole block tells whether any row has a float32 tie
    if np.count_nonzero(treated) != rows * n_treated:
        tied = np.flatnonzero(np.count_nonzero(treated, axis=1) != n_treated)
        exact_keys = rows_of(tied)
        exact = np.partition(exact_keys, n_treated - 1, axis=1)[:, n_treated - 1: n_treated]
        treated[tied] = exact_keys <= exact
    return treated


def _binary(column: np.ndarray) -> bool:
    return bool(np.all((column == 0.0) | (column == 1.0)))


def _counts(treated: np.ndarray, packed_columns: np.ndarray) -> np.ndarray:
    """(rows, k) sums of 0/1 columns over each row's treated units, as bit counts: sums of whole
    numbers, so exactly what a floating-point sum in any order gives."""
    packed = np.packbits(treated, axis=1)
    out = np.empty((len(treated), len(packed_columns)))
    for j, column in enumerate(packed_columns):
        out[:, j] = _bit_count(packed & column).sum(axis=1)
    return out


_BITS = np.array([bin(v).count("1") for v in range(256)], dtype=np.uint8)
_bit_count = getattr(np, "bitwise_count", lambda a: _BITS[a])      # numpy < 2.0 has no bitwise_count


def prefix_treated_sums(windows: list[tuple[int, int, np.ndarray]], permutations: int,
                        seed: int) -> list[np.ndarray]:
    """For each window (n, n_treated, columns (n, k), units in order of distance): the (permutations,
    k) sums of each column over the treated units of every Monte Carlo draw, all windows from one
    pass over shared keys (``prefix_keys``; the module docstring says why each is a uniform draw).

    Per block of draws the keys are rounded to float32 once for all windows (each window's are a
    prefix), and one more float32 copy is partitioned in place window after window, smallest
    first: a partition permutes a prefix within itself, so every larger prefix still holds its own
    numbers (no copy per window). Columns of zeros and ones (the treatment indicator, dummy
    covariates) are summed as bit counts of the packed assignments; the others with einsum's own
    loops, not a BLAS product: OpenBLAS's threads spin and stall on a shared machine for these thin
    products, even 64 draws at a time (measured at 1e6 rows, load 8 on 2 CPUs: 56 s against 5 s with
    one thread, and 3.8 s with einsum). The sums are the same numbers, bit for bit, as one einsum
    over all columns of a freshly selected mask per window."""
    if not windows:
        return []
    largest = max(n for n, _, _ in windows)
    blocks = -(-largest // KEY_BLOCK)
    out = [np.empty((permutations, cols.shape[1])) for _, _, cols in windows]
    plans = []
    for _, _, cols in windows:
        binary = np.array([_binary(cols[:, j]) for j in range(cols.shape[1])], dtype=bool)
        plans.append((np.flatnonzero(~binary), np.ascontiguousarray(cols[:, ~binary].T),
                      np.flatnonzero(binary), np.packbits(cols[:, binary].T.astype(bool), axis=1)))
    steps = _draw_steps(permutations, largest)
    rows = steps[0].stop - steps[0].start
    keys_buffer = np.empty((blocks, rows, KEY_BLOCK))
    rounded_buffer = np.empty((rows, blocks * KEY_BLOCK), dtype=np.float32)
    work_buffer = np.empty_like(rounded_buffer)
    mask = np.empty(rows * largest, dtype=bool)
    ascending = sorted(range(len(windows)), key=lambda i: windows[i][0])
    for draws in steps:
        checkpoint()                    # a board's newer change stops this between blocks of draws
        keys = _blocked_keys(seed, draws, blocks, keys_buffer)
        size = len(keys[0])
        rounded, work = rounded_buffer[:size], work_buffer[:size]
        np.copyto(rounded.reshape(size, blocks, KEY_BLOCK), keys.transpose(1, 0, 2), casting="same_kind")
        np.copyto(work, rounded)

        def keys_of(tied: np.ndarray, keys=keys) -> np.ndarray:
            return keys[:, tied].transpose(1, 0, 2).reshape(len(tied), -1)
        for i in ascending:
            n, n_treated, _ = windows[i]
            general, general_t, binary, packed = plans[i]
            treated = _treated_by_keys(lambda tied, n=n: keys_of(tied)[:, :n], n_treated, rounded[:, :n],
                                       work[:, :n], mask[: size * n].reshape(size, n))
            if len(general):
                out[i][draws, general] = np.einsum("rn,kn->rk", treated, general_t)
            if len(binary):
                out[i][draws, binary] = _counts(treated, packed)
    return out


def prefix_assignments(n: int, n_treated: int, permutations: int, seed: int) -> np.ndarray:
    """The (permutations, n) boolean assignments ``prefix_treated_sums`` uses for a window of the first
    n units (for the statistics that need the assignments themselves)."""
    out = np.empty((permutations, n), dtype=bool)
    for draws in _draw_steps(permutations, n):
        checkpoint()
        out[draws] = _treated_by_keys(prefix_keys(seed, draws, n), n_treated)
    return out


def _difference_in_means(assign: np.ndarray, y: np.ndarray) -> np.ndarray:
    n1 = assign.sum(axis=1)
    s1 = assign @ y
    return np.abs(s1 / n1 - (y.sum() - s1) / (len(y) - n1))


def _rank_sum(assign: np.ndarray, y: np.ndarray) -> np.ndarray:
    ranks = stats.rankdata(y)                     # mid-ranks for ties
    n1 = assign.sum(axis=1)
    # one cast of the block, then a BLAS product (numpy's bool-by-float product is a slow loop)
    return np.abs(assign.astype(float) @ ranks - n1 * (len(y) + 1) / 2.0)


# Bit j of every byte value: the subsets of eight units a packed byte stands for.
_BYTE_BITS = ((np.arange(256)[:, None] >> np.arange(8)[None, :]) & 1).astype(float)


class PackedRankSums:
    """The rank sum of the treated units of every assignment, at any ranks, without a cast of the
    assignments: they are packed eight units a byte, and at given ranks a table holds, for each
    byte position, the sum of ranks of each of its 256 subsets; a draw's rank sum is then the sum
    of one table entry per byte (n/8 reads from a table of 2n numbers, which stays in the cache).
    Ranks are multiples of 1/2, so every partial sum is exact: the same numbers as the product of
    the assignments cast to floats with the ranks, about ten times faster at 2,000 units."""

    def __init__(self, assignments: np.ndarray):
        self.n = assignments.shape[1]
        self.n1 = assignments.sum(axis=1)
        packed = np.packbits(assignments, axis=1, bitorder="little")       # unit 8b + j is bit j of byte b
        self.bytes = packed.shape[1]
        # positions in the flattened table (byte position b, byte value v) -> 256 b + v
        self.index = packed.astype(np.intp) + 256 * np.arange(self.bytes, dtype=np.intp)

    def __call__(self, ranks: np.ndarray) -> np.ndarray:
        padded = np.zeros(8 * self.bytes)
        padded[: self.n] = ranks
        table = np.ascontiguousarray((_BYTE_BITS @ padded.reshape(self.bytes, 8).T).T).ravel()
        return np.concatenate([np.take(table, self.index[i: i + CHUNK]).sum(axis=1)
                               for i in range(0, len(self.index), CHUNK)])


def _kolmogorov_smirnov(assign: np.ndarray, y: np.ndarray) -> np.ndarray:
    order = np.argsort(y, kind="stable")
    ys = y[order]
    last_of_tie = np.r_[np.diff(ys) > 0, True]    # compare the two CDFs only after each tie group
    # units in the order of y, each row one unit over the block's assignments: the treated count so
    # far is then one vector add per unit, a pass numpy's cumsum along rows does about ten times
    # slower
    a = np.ascontiguousarray(assign[:, order].T)
    n1 = a.sum(axis=0)
    n0 = len(y) - n1
    # F_1 - F_0 at the k-th smallest value is c/n1 - (k - c)/n0 with c the treated count so far
    scale = 1.0 / n1 + 1.0 / n0
    count = np.zeros(a.shape[1], dtype=np.int32)
    gap = np.empty(a.shape[1])
    high = np.full(a.shape[1], -np.inf)
    low = np.full(a.shape[1], np.inf)
    for k, (row, last) in enumerate(zip(a, last_of_tie.tolist()), start=1):
        np.add(count, row, out=count)
        if last:
            np.multiply(count, scale, out=gap)
            np.subtract(gap, k / n0, out=gap)
            np.maximum(high, gap, out=high)
            np.minimum(low, gap, out=low)
    return np.maximum(high, -low)


_STATISTIC_FUNCTIONS: dict[str, Callable[[np.ndarray, np.ndarray], np.ndarray]] = {
    "difference in means": _difference_in_means,
    "Kolmogorov-Smirnov": _kolmogorov_smirnov,
    "rank sum": _rank_sum,
}


def statistic_values(statistic: str, assign: np.ndarray, y: np.ndarray) -> np.ndarray:
    """The absolute statistic for each row of ``assign`` (computed in blocks of assignments)."""
    fn = _STATISTIC_FUNCTIONS[statistic]
    y = np.asarray(y, dtype=float)
    return np.concatenate([fn(assign[i: i + CHUNK], y) for i in range(0, len(assign), CHUNK)])


def differences_in_means(assign: np.ndarray, columns: list[np.ndarray]) -> list[np.ndarray]:
    """``statistic_values("difference in means", assign, y)`` for several y on the same units, each
    block of assignments cast to float once for all of them (the same numbers: the same products)."""
    columns = [np.asarray(y, dtype=float) for y in columns]
    blocks: list[list[np.ndarray]] = [[] for _ in columns]
    for i in range(0, len(assign), CHUNK):
        checkpoint()
        a = assign[i: i + CHUNK].astype(float)
        for out, y in zip(blocks, columns):
            out.append(_difference_in_means(a, y))
    return [np.concatenate(b) for b in blocks]


def p_value(observed: float, null: np.ndarray, exact: bool) -> float:
    """Share of assignments at least as extreme (exact), or (1 + count) / (R + 1) (Monte Carlo)."""
    count = int(np.sum(null >= observed - TIE_TOLERANCE * abs(observed)))
    return count / len(null) if exact else (count + 1) / (len(null) + 1)


class RandomizationTest:
    """The randomization test of one window for one statistic, for any outcome vector.

    ``treated`` is the observed assignment; ``assignments`` the enumerated or drawn ones.
    ``p_value(y)`` tests the sharp null of no effect on y; ``p_value_shifted(tau0)`` tests a constant
    additive effect tau0 (outcomes y - tau0 T under the null), with the same assignments for every
    tau0 so that p(tau0) is a deterministic step function.
    """

    def __init__(self, y: np.ndarray, treated: np.ndarray, statistic: str, assignments: np.ndarray,
                 exact: bool):
        self.y = np.asarray(y, dtype=float)
        self.treated = np.asarray(treated, dtype=bool)
        self.statistic = statistic
        self.assignments = assignments
        self.exact = exact
        self._shifted: ShiftedDifference | None = None
        self._p_at: dict[float, float] = {}
        self._rank_sums: PackedRankSums | None = None     # the rank sum's packed assignments
        self._steps: np.ndarray | None = None             # ``steps``

    def shifted(self) -> ShiftedDifference:
        """The difference in means at any tau0 without the assignments (computed on first use, so a
        test used only for p_value, as a balance check is, never pays for it)."""
        if self._shifted is None:
            # S_t(tau0) = |D_t(y) - tau0 D_t(T)|, both differences linear in the outcome: precompute
            t = self.treated.astype(float)
            self._shifted = ShiftedDifference(self._signed(self.y), self._signed(t),
                                              self._signed(self.y, self.treated[None, :])[0],
                                              self._signed(t, self.treated[None, :])[0], self.exact)
        return self._shifted

    def _signed(self, v: np.ndarray, assign: np.ndarray | None = None) -> np.ndarray:
        a = self.assignments if assign is None else assign
        n1 = a.sum(axis=1)
        s1 = np.concatenate([a[i: i + CHUNK] @ v for i in range(0, len(a), CHUNK)])
        return s1 / n1 - (v.sum() - s1) / (len(v) - n1)

    def observed(self, y: np.ndarray) -> float:
        return float(statistic_values(self.statistic, self.treated[None, :], y)[0])

    def p_value(self, y: np.ndarray) -> float:
        if self.statistic == "rank sum":        # the same numbers as statistic_values, packed
            if self._rank_sums is None:
                self._rank_sums = PackedRankSums(self.assignments)
            y = np.asarray(y, dtype=float)
            null = np.abs(self._rank_sums(stats.rankdata(y)) - self._rank_sums.n1 * (len(y) + 1) / 2.0)
            return p_value(self.observed(y), null, self.exact)
        return p_value(self.observed(y), statistic_values(self.statistic, self.assignments, y), self.exact)

    def steps(self) -> np.ndarray | None:
        """The shifts tau0 at which p(tau0) of a rank statistic (rank sum, Kolmogorov-Smirnov) can
        change, sorted and distinct: the statistics read only the order of y - tau0 T, which
        changes where a treated unit's adjusted outcome meets a control's, tau0 = y_i - y_j. None
        for the difference in means, or when there are more than STEPS_KEPT of them."""
        if self.statistic == "difference in means":
            return None
        if self._steps is None:
            y1, y0 = self.y[self.treated], self.y[~self.treated]
            self._steps = (np.unique(np.subtract.outer(y1, y0)) if 0 < y1.size * y0.size <= STEPS_KEPT
                           else np.zeros(0))
        return self._steps if self._steps.size else None

    def p_value_shifted(self, tau0: float) -> float:
        if self.statistic == "difference in means":
            return self.shifted().p_value_shifted(tau0)
        # kept per tau0: the inversion's grid is the same at every level, so a level change on a
        # kept test computes only its new bisection points
        p = self._p_at.get(tau0)
        if p is None:
            p = self._p_at[tau0] = self.p_value(self.y - tau0 * self.treated)
        return p


class ShiftedDifference:
    """p(tau0) of the difference in means from four precomputed pieces: small enough (two vectors
    of one value per assignment) to keep after the assignments are gone.

    Draw r counts toward p(tau0) when |d_y,r - tau0 d_t,r| >= c |D_y - tau0 D_t| (c = 1 - the tie
    tolerance), i.e. when L1 L2 >= 0 with L1 = (d_y,r - c D_y) - tau0 (d_t,r - c D_t) and L2 the same with
    +c: a product of two linear functions of tau0. So the count is a step function whose steps are at
    the roots of L1 and L2, and ``accepted_hull`` finds {tau0 : p(tau0) > alpha} exactly, for every
    alpha, from one sort of the 2R roots (``_steps``, computed once): a level change is a threshold.
    """

    def __init__(self, d_y: np.ndarray, d_t: np.ndarray, obs_d_y: float, obs_d_t: float, exact: bool):
        self._d_y, self._d_t, self._obs_d_y, self._obs_d_t, self.exact = d_y, d_t, obs_d_y, obs_d_t, exact
        self._step_table: tuple[np.ndarray, np.ndarray, np.ndarray, int] | None = None

    def p_value_shifted(self, tau0: float) -> float:
        obs = abs(self._obs_d_y - tau0 * self._obs_d_t)
        return p_value(obs, np.abs(self._d_y - tau0 * self._d_t), self.exact)

    def _p(self, count: np.ndarray) -> np.ndarray:
        total = len(self._d_y)
        return count / total if self.exact else (count + 1) / (total + 1)

    def _steps(self):
        """(step positions u_1 < ... < u_m, count on (u_k, u_k+1) for k = 0..m (u_0 = -inf,
        u_m+1 = inf), count at each u_k)."""
        if self._step_table is None:
            c = 1.0 - TIE_TOLERANCE
            a, b, big_a, big_b = self._d_y, self._d_t, self._obs_d_y, self._obs_d_t
            alpha = np.stack([a - c * big_a, a + c * big_a])      # L_i(tau0) = alpha_i - tau0 beta_i
            beta = np.stack([b - c * big_b, b + c * big_b])
            constant_zero = np.any((beta == 0.0) & (alpha == 0.0), axis=0)   # counted at every tau0
            left_sign = np.where(beta != 0.0, np.sign(beta), np.sign(alpha))  # sign as tau0 -> -inf
            base = (left_sign[0] * left_sign[1] >= 0.0) | constant_zero
            with np.errstate(divide="ignore", invalid="ignore"):
                roots = np.where((beta != 0.0) & ~constant_zero, alpha / beta, np.nan)
            lo, hi = np.fmin(roots[0], roots[1]), np.fmax(roots[0], roots[1])
            has_lo, has_hi = ~np.isnan(lo), ~np.isnan(roots[0]) & ~np.isnan(roots[1])
            flip = 1 - 2 * base.astype(np.int64)                   # +1: uncounted -> counted at the first root
            positions = np.r_[lo[has_lo], hi[has_hi]]
            deltas = np.r_[flip[has_lo], -flip[has_hi]]
            # a draw is counted at its root (L1 L2 = 0 there): add it to the point unless it was already
            # counted just left of it (the second of two equal roots is the same point)
            adds = np.r_[(~base)[has_lo], (base & (hi != lo))[has_hi]].astype(np.int64)
            order = np.argsort(positions, kind="stable")
            positions, deltas, adds = positions[order], deltas[order], adds[order]
            values, first = np.unique(positions, return_index=True)
            delta_at = np.add.reduceat(deltas, first) if len(first) else np.zeros(0, np.int64)
            add_at = np.add.reduceat(adds, first) if len(first) else np.zeros(0, np.int64)
            start = int(np.sum(base))
            open_counts = start + np.r_[0, np.cumsum(delta_at)]
            point_counts = open_counts[:-1] + add_at
            self._step_table = (values, open_counts, point_counts, start)
        return self._step_table

    def accepted_hull(self, alpha: float) -> tuple[tuple[float, float], bool]:
        """{tau0 : p(tau0) > alpha} as an interval (the hull of its closure) and whether it is one
        interval; (nan, nan) when no tau0 is accepted. Exact: the ends are steps of p."""
        values, open_counts, point_counts, _ = self._steps()
        m = len(values)
        # the pieces in order: open_0, point_1, open_1, ..., point_m, open_m
        accepted = np.empty(2 * m + 1, dtype=bool)
        accepted[0::2] = self._p(open_counts) > alpha
        accepted[1::2] = self._p(point_counts) > alpha
        idx = np.flatnonzero(accepted)
        if not len(idx):
            return (float("nan"), float("nan")), True
        contiguous = bool(np.all(np.diff(idx) == 1))
        first, last = int(idx[0]), int(idx[-1])
        # piece 2k is the open interval (u_k, u_k+1) (u_0 = -inf), piece 2k - 1 the point u_k
        low = -np.inf if first == 0 else float(values[(first - 1) // 2]) if first % 2 else float(values[first // 2 - 1])
        high = np.inf if last == 2 * m else float(values[last // 2]) if last % 2 == 0 else float(values[(last - 1) // 2])
        return (low, high), contiguous


def invert(p_of: Callable[[float], float], centre: float, scale: float, alpha: float,
           points: int = 81, refine: int = 30, steps: np.ndarray | None = None) -> tuple[tuple[float, float], bool]:
    """{tau0 : p(tau0) > alpha} as an interval (its hull), and whether the accepted grid points were
    contiguous. A grid of ``points`` over centre +- 8 scale (widened while the accepted values reach
    its edge), then ``refine`` bisection steps at each end of the accepted run.

    ``steps``: the sorted distinct shifts at which p can change (a step function constant between
    them, ``RandomizationTest.steps``). Once a bisection bracket holds exactly one of them, strictly
    inside, every later midpoint falls on a known side of it, so the rest of the bisection follows
    without computing p: the same points, the same result, fewer tests."""
    for _ in range(8):
        grid = np.linspace(centre - 8 * scale, centre + 8 * scale, points)
        checkpoint()
        accepted = np.array([p_of(t) > alpha for t in grid])
        if not accepted.any():
            return (float("nan"), float("nan")), True
        if not (accepted[0] or accepted[-1]):
            break
        scale *= 4.0
    else:
        return (-np.inf, np.inf), True
    idx = np.flatnonzero(accepted)
    contiguous = bool(np.all(np.diff(idx) == 1))

    def edge(inside: float, outside: float) -> float:
        for _ in range(refine):
            checkpoint()
            mid = 0.5 * (inside + outside)
            step = None if steps is None else _lone_step(steps, inside, outside)
            if step is not None and mid != step:
                accept = (mid > step) == (inside > step)     # p is p(inside) on inside's side of it
            else:
                accept = p_of(mid) > alpha
            if accept:
                inside = mid
            else:
                outside = mid
        return inside
    low = edge(grid[idx[0]], grid[idx[0] - 1])
    high = edge(grid[idx[-1]], grid[idx[-1] + 1])
    return (float(low), float(high)), contiguous


def _lone_step(steps: np.ndarray, a: float, b: float) -> float | None:
    """The one step in the closed interval between a and b when there is exactly one and it lies
    strictly inside, else None."""
    lo, hi = (a, b) if a < b else (b, a)
    first = int(np.searchsorted(steps, lo, side="left"))
    if first + 1 < len(steps) and steps[first + 1] <= hi:
        return None
    if first < len(steps) and lo < steps[first] < hi:
        return float(steps[first])
    return None
