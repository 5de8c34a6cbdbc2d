"""The score prepared for the density tests: both sides' sorted scores, read in place.

Both tests (``density_local_cdf``, ``density_binned``) work on :class:`SortedScores`: the scores
below the cutoff (X < c) and above it (X >= c), each ascending, as two arrays that are only read.
A design hands over two views of its kept sorted score; a caller that sorted each side elsewhere
(e.g. a partitioned dataset) hands over its two arrays. Nothing of length n is made here:

* N_j = #{i : X_i <= X_j} (n times the right-continuous empirical CDF at X_j) is computed for a run
  of rows when a window sum asks for it (``counts``): the end of the run of equal scores holding
  each row, plus the rows of the side below;
* ties, distinct values, the standard deviation and the quartiles are read off the sorted scores
  chunk by chunk. The standard deviation follows numpy's pairwise summation tree, and the
  quartiles numpy's "linear" interpolation, so both equal ``np.std`` / ``np.percentile`` of the
  whole sample bit for bit (tests/core/test_density_sorted.py).

Also here: the argument checks shared by both tests and the histogram and grid helpers.
"""
from __future__ import annotations

import math

import numpy as np
from scipy import stats

from ..errors import InvalidBandwidthError, InvalidOptionError, OneSidedDataError, shown
from .cdf_windows import WindowEngine
from .density_results import DensityGrid, DensityHistogram, frozen

SIDES = ("below", "above")
CHUNK = 1 << 16          # rows per pass over the sorted scores (a few hundred kB of temporaries)


class SortedScores:
    """The scores of both sides of the cutoff in ascending order, as two read-only arrays.

    ``below`` holds the scores < cutoff and ``above`` those >= cutoff; rows are numbered within
    their side, and the whole sample's row of side row i is ``offset(side) + i``.
    """

    def __init__(self, below: np.ndarray, above: np.ndarray, cutoff: float):
        self.parts = (below, above)
        self.cutoff = cutoff
        self.n_below = below.size
        self.n = below.size + above.size
        self._tied: list[int | None] = [None, None]
        self._runs: list[bool | None] = [None, None]      # whether a side has tied scores
        self.engines = tuple(
            WindowEngine(part, self._counts_of(i), offset=self._offset(i)) for i, part in enumerate(self.parts))

    @classmethod
    def from_sorted(cls, xs: np.ndarray, cutoff: float) -> "SortedScores":
        """Split one ascending array at the cutoff (views, no copy); raise if a side is empty."""
        split = split_point(xs, cutoff)
        return cls(xs[:split], xs[split:], cutoff)

    # ---- positions ------------------------------------------------------------------------------
    def _offset(self, i: int) -> int:
        return 0 if i == 0 else self.n_below

    def index(self, side: str) -> int:
        return 0 if side == "below" else 1

    def part(self, side: str) -> np.ndarray:
        return self.parts[self.index(side)]

    def offset(self, side: str) -> int:
        return self._offset(self.index(side))

    def engine(self, side: str) -> WindowEngine:
        return self.engines[self.index(side)]

    @property
    def first(self) -> float:
        return float(self.parts[0][0])

    @property
    def last(self) -> float:
        return float(self.parts[1][-1])

    def value(self, row: int) -> float:
        """The whole sample's sorted score at ``row``."""
        return float(self.parts[0][row] if row < self.n_below else self.parts[1][row - self.n_below])

    def rows(self, start: int, stop: int) -> np.ndarray:
        """Sorted scores at the whole sample's rows [start, stop) (a view unless it spans the cutoff)."""
        nb = self.n_below
        if stop <= nb:
            return self.parts[0][start:stop]
        if start >= nb:
            return self.parts[1][start - nb:stop - nb]
        return np.concatenate((self.parts[0][start:], self.parts[1][:stop - nb]))

    # ---- counts and ties ------------------------------------------------------------------------
    def _counts_of(self, i: int):
        part, off = self.parts[i], self._offset(i)

        def counts(start: int, stop: int) -> np.ndarray:
            """N_j of side rows [start, stop): the end of each row's run of equal scores, as floats."""
            if not self.has_ties(i):
                return np.arange(off + start + 1, off + stop + 1, dtype=float)
            z = part[start:stop]
            new = np.flatnonzero(z[1:] != z[:-1]) + 1            # first row of each later run
            ends = np.empty(new.size + 1)
            ends[:-1] = new + (start + off)
            ends[-1] = off + int(np.searchsorted(part, z[-1], side="right"))   # the last run may go on
            return np.repeat(ends, np.diff(np.r_[0, new, z.size]))
        return counts

    def has_ties(self, i: int) -> bool:
        if self._runs[i] is None:
            self._runs[i] = self.tied_rows(i) > 0
        return bool(self._runs[i])

    def tied_rows(self, i: int) -> int:
        """Rows of side ``i`` whose score also occurs in another row (ties never cross the cutoff)."""
        if self._tied[i] is None:
            part = self.parts[i]
            total = 0
            for start in range(0, part.size, CHUNK):
                stop = min(start + CHUNK, part.size)
                z = part[max(start - 1, 0):stop + 1]         # one row of context on each side
                eq = z[1:] == z[:-1]
                tied = np.zeros(z.size, dtype=bool)
                tied[1:] |= eq
                tied[:-1] |= eq
                lo = 1 if start > 0 else 0
                total += int(np.count_nonzero(tied[lo:lo + stop - start]))
            self._tied[i] = total
        return self._tied[i]

    def tie_share(self) -> float:
        """Share of observations whose score also occurs in another observation."""
        if self.n < 2:
            return 0.0
        return float(np.float64(self.tied_rows(0) + self.tied_rows(1)) / self.n)

    def distinct(self, side: str, a: int, b: int, cap: int) -> int:
        """Distinct scores among the side's rows [a, b), counted up to ``cap`` (run by run)."""
        xs = self.part(side)
        count, at = 0, a
        while at < b and count < cap:
            count += 1
            at = int(np.searchsorted(xs, xs[at], side="right"))
        return count

    # ---- summaries of the whole sample ------------------------------------------------------------
    def std(self) -> float:
        """np.std(scores, ddof=1) of the whole sample, chunk by chunk (the same number)."""
        return pairwise_std(self.n, self.rows)

    def percentile(self, q) -> np.ndarray:
        """np.percentile(scores, q) ("linear" method) of the whole sample, from its sorted rows."""
        q = np.true_divide(np.asarray(q, dtype=float), 100)
        n = self.n
        virtual = (n - 1) * q
        out = np.empty(q.shape)
        for k, v in np.ndenumerate(virtual):
            below = int(math.floor(v))
            if v >= n - 1:
                out[k] = self.value(n - 1)
                continue
            a, b = np.float64(self.value(below)), np.float64(self.value(below + 1))
            t = np.float64(v - below)
            diff = b - a
            out[k] = b - diff * (1 - t) if t >= 0.5 else a + diff * t
        return out


def pairwise_sum(n: int, piece) -> float:
    """sum of ``piece(lo, hi)`` over rows [0, n) in numpy's pairwise summation tree: np.add.reduce
    of one contiguous float64 array splits its n values into n2 = n // 2 rounded down to a
    multiple of 8 and the rest, down to blocks of 128, so this equals np.sum of the whole array
    while reading CHUNK rows at a time."""
    def tree(lo: int, hi: int) -> float:
        m = hi - lo
        if m <= CHUNK:
            return np.add.reduce(piece(lo, hi))
        n2 = m // 2
        n2 -= n2 % 8
        return tree(lo, lo + n2) + tree(lo + n2, hi)
    return tree(0, n)


def pairwise_std(n: int, rows) -> float:
    """np.std(values, ddof=1) of the n values ``rows(lo, hi)`` gives, chunk by chunk (the same
    number: numpy's mean, deviations, squares and sums, in its summation tree)."""
    if n < 2:
        return 0.0
    mean = np.true_divide(pairwise_sum(n, rows), n)

    def squares(lo, hi):
        d = np.subtract(rows(lo, hi), mean)
        return np.square(d, out=d)
    return float(np.sqrt(np.true_divide(pairwise_sum(n, squares), n - 1)))


def array_std(x: np.ndarray) -> float:
    """np.std(x, ddof=1) of a 1-D array, without its n-long temporary."""
    return pairwise_std(x.size, lambda lo, hi: x[lo:hi])


# ---------------------------------------------------------------------------------------------
# Checks (messages: "`<argument>` must be <rule>; got <value>. <How to fix>.")
# ---------------------------------------------------------------------------------------------
def score_array(score) -> np.ndarray:
    x = np.asarray(score, dtype=float)
    if x.ndim != 1:
        raise InvalidOptionError(
            f"`score` must be a one-dimensional array; got shape {x.shape}. Pass a single column.")
    if not all_finite(x):
        raise InvalidOptionError(
            "`score` must hold only finite values; got NaN or infinity. "
            "Drop or fill the missing rows before the density test.")
    return x


def all_finite(x: np.ndarray) -> bool:
    return all(bool(np.isfinite(x[s:s + CHUNK]).all()) for s in range(0, x.size, CHUNK))


def is_sorted(x: np.ndarray) -> bool:
    """Ascending (ties allowed), checked chunk by chunk with one row of overlap."""
    for s in range(0, x.size - 1, CHUNK):
        z = x[s:s + CHUNK + 1]
        if not bool(np.all(z[1:] >= z[:-1])):
            return False
    return True


def sorted_scores(score, cutoff: float) -> SortedScores:
    """A checked score array (any order; sorted once unless it is already ascending)."""
    x = score_array(score)
    return SortedScores.from_sorted(x if is_sorted(x) else np.sort(x), cutoff)


def sorted_sides(below, above, cutoff: float) -> SortedScores:
    """Checked scores of each side, already ascending (read in place, never copied)."""
    parts = []
    for name, side, values in (("below", "below", below), ("above", "above", above)):
        x = np.asarray(values, dtype=float)
        if x.ndim != 1:
            raise InvalidOptionError(
                f"`{name}` must be a one-dimensional array of scores; got shape {x.shape}. Pass one array per side.")
        if x.size == 0:
            raise OneSidedDataError(
                f"`{name}` must hold the scores {side} the cutoff; got none {side} {cutoff:g}. "
                "Check the cutoff value or the sample filter.")
        if not (math.isfinite(x[0]) and math.isfinite(x[-1]) and is_sorted(x)):
            raise InvalidOptionError(
                f"`{name}` must hold finite scores in ascending order; it does not. "
                f"Sort each side (np.sort) and drop missing values first.")
        parts.append(x)
    if not parts[0][-1] < cutoff:
        raise InvalidOptionError(
            f"`below` must hold only scores < the cutoff {cutoff:g}; got {shown(float(parts[0][-1]))}. "
            "Split the sorted scores at the cutoff with np.searchsorted(xs, cutoff).")
    if not parts[1][0] >= cutoff:
        raise InvalidOptionError(
            f"`above` must hold only scores >= the cutoff {cutoff:g}; got {shown(float(parts[1][0]))}. "
            "Split the sorted scores at the cutoff with np.searchsorted(xs, cutoff).")
    return SortedScores(parts[0], parts[1], cutoff)


def split_point(xs: np.ndarray, cutoff: float) -> int:
    """Number of sorted scores below the cutoff; raise if a side is empty."""
    n_below = int(np.searchsorted(xs, cutoff, side="left"))
    if n_below == 0 or n_below == xs.size:
        empty = "below" if n_below == 0 else "above"
        raise OneSidedDataError(
            f"`score` must have observations on both sides of the cutoff; got none {empty} {cutoff:g}. "
            "Check the cutoff value or the sample filter.")
    return n_below


def check_positive(argument: str, value, error=InvalidOptionError) -> float:
    ok = (isinstance(value, (int, float, np.floating, np.integer)) and not isinstance(value, bool)
          and math.isfinite(float(value)) and float(value) > 0)
    if not ok:
        raise error(f"`{argument}` must be a positive finite number; got {shown(value)}. "
                    f"Pass a value greater than 0 or leave `{argument}` unset to choose it from the data.")
    return float(value)


def bandwidth_pair(bandwidth) -> tuple[float, float] | None:
    if bandwidth is None:
        return None
    if isinstance(bandwidth, (tuple, list, np.ndarray)):
        if len(bandwidth) != 2:
            raise InvalidBandwidthError(
                f"`bandwidth` must be one positive number or a pair (below, above); got {shown(bandwidth)}. "
                "Pass a single number or two numbers.")
        return (check_positive("bandwidth", bandwidth[0], InvalidBandwidthError),
                check_positive("bandwidth", bandwidth[1], InvalidBandwidthError))
    h = check_positive("bandwidth", bandwidth, InvalidBandwidthError)
    return h, h


def check_grid_points(grid_points) -> int:
    if not (isinstance(grid_points, (int, np.integer)) and not isinstance(grid_points, bool)
            and grid_points >= 0):
        raise InvalidOptionError(
            f"`grid_points` must be a whole number >= 0; got {shown(grid_points)}. "
            "Use 0 to skip the plotting grid or e.g. 20 points per side.")
    return int(grid_points)


def check_plot_range(plot_range, cutoff: float) -> tuple[float, float] | None:
    if plot_range is None:
        return None
    try:
        low, high = (float(v) for v in plot_range)
    except (TypeError, ValueError):
        raise InvalidOptionError(
            f"`plot_range` must be a pair (low, high) of numbers; got {shown(plot_range)}. "
            "Pass two numbers around the cutoff.") from None
    if not (math.isfinite(low) and math.isfinite(high) and low < cutoff < high):
        raise InvalidOptionError(
            f"`plot_range` must satisfy low < cutoff < high; got {shown(plot_range)} with cutoff {cutoff:g}. "
            "Pass a range that contains the cutoff.")
    return low, high


def n_distinct(sorted_values: np.ndarray) -> int:
    if sorted_values.size == 0:
        return 0
    return 1 + int(np.count_nonzero(np.diff(sorted_values)))


def tie_share(score) -> float:
    """Share of observations whose score value also occurs in another observation.

    0 for a continuous score; 1 when every value is repeated (a fully discrete score).
    """
    xs = np.asarray(score, dtype=float)
    if xs.size < 2:
        return 0.0
    xs = xs if is_sorted(xs) else np.sort(xs)
    one = SortedScores(xs, xs[:0], math.inf)
    return float(np.float64(one.tied_rows(0)) / xs.size)


def z_value(level: float) -> float:
    return float(stats.norm.ppf(0.5 + level / 2.0))


def two_sided(t: float) -> float:
    return float(2.0 * stats.norm.sf(abs(t))) if math.isfinite(t) else math.nan


# ---------------------------------------------------------------------------------------------
# Histogram and plotting grid
# ---------------------------------------------------------------------------------------------
def grid_points(low: float, high: float, cutoff: float, count: int) -> tuple[np.ndarray, np.ndarray]:
    """count points from low to the cutoff (below) and from the cutoff to high (above)."""
    if count == 0:
        return np.empty(0), np.empty(0)
    if count == 1:
        return np.array([cutoff]), np.array([cutoff])
    return np.linspace(low, cutoff, count), np.linspace(cutoff, high, count)


def grid_from_rows(rows) -> DensityGrid:
    if rows:
        gx, gs, gd, ge, gl, gh = zip(*rows)
    else:
        gx = gs = gd = ge = gl = gh = ()
    return DensityGrid(x=frozen(gx), side=frozen(gs, dtype="<U5"), density=frozen(gd),
                       std_error=frozen(ge), ci_low=frozen(gl), ci_high=frozen(gh))


def bin_index(sel: np.ndarray, cutoff: float, width: float) -> np.ndarray:
    """Bin k of [c + k w, c + (k+1) w) for each score; rounding never puts one on the wrong side."""
    k = np.floor((sel - cutoff) / width).astype(np.int64)
    return np.where(sel < cutoff, np.minimum(k, -1), np.maximum(k, 0))


def histogram(sample: SortedScores, cutoff: float, width: float, low: float, high: float,
              n_total: int) -> DensityHistogram:
    """Whole bins [c + k w, c + (k+1) w) covering [low, high]; the cutoff is always an edge.

    Every score inside the outer edges is counted, so the end bins are not cut short.
    """
    k_lo = int(math.floor((low - cutoff) / width))
    k_hi = int(math.ceil((high - cutoff) / width))
    k_lo, k_hi = min(k_lo, -1), max(k_hi, 1)
    ks = np.arange(k_lo, k_hi)
    left = cutoff + ks * width
    right = cutoff + (ks + 1) * width
    left[ks == 0] = cutoff
    right[ks == -1] = cutoff
    count = np.zeros(ks.size, dtype=np.int64)
    for part in sample.parts:
        # the scores inside [left[0], right[-1]]: a run of the sorted side, read chunk by chunk
        a = int(np.searchsorted(part, left[0], side="left"))
        b = int(np.searchsorted(part, right[-1], side="right"))
        for start in range(a, b, CHUNK):
            k = bin_index(part[start:min(start + CHUNK, b)], cutoff, width)
            k = np.minimum(k, k_hi - 1)                  # the top edge is closed
            count += np.bincount(k - k_lo, minlength=ks.size)[: ks.size]
    side = np.where(ks < 0, "below", "above")
    return DensityHistogram(side=frozen(side, dtype=str), left=frozen(left), right=frozen(right),
                            count=frozen(count, dtype=np.int64),
                            height=frozen(count / (n_total * width)), bin_width=float(width))
