"""One side of the cutoff, prepared once: sorted by distance, with lazily built moment tables.

Everything here is plain float64 arrays; the data adapter (seamline.data) builds Sides from user data.
"""
from __future__ import annotations

import numpy as np

from .moments import SideMoments
from .neighbors import neighbor_residuals

# Distinct distances are counted up to this many, no further: every question asked of the count
# compares it with less (degrees up to 6 need 7; the fits' warning of a discrete score, 10).
DISTINCT_COUNTED = 16
SCAN_ROWS = 1 << 12       # rows per step of a scan from the nearest row (grows fourfold per step)


class Side:
    """Observations on one side of the cutoff sorted by distance |score - cutoff| (ascending).

    Parameters
    ----------
    sign : -1 for the side below the cutoff, +1 for the side above (signed x = sign * distance).
    distance : (n,) sorted distances (>= 0).
    values : (n, k) variables in the same order (outcome, take-up, covariates ...). The Side takes
        ownership: the array is centred in place on the side mean (``offsets``, which level
        estimates add back), so pass a fresh array, never user data (unless ``centred``).
    weights : (n,) positive user weights or None (all ones).
    clusters : (n,) integer cluster codes (shared coding across sides) or None.
    neighbors : J for the nearest-neighbour residuals.
    rows : (n,) integer positions of the observations in the source data, or None.
    offsets : (k,) the side means to centre on, or None (the mean of ``values``). A side that holds
        only the rows nearest the cutoff (``core.window_side``) centres on its whole side's means.
    centred : ``values`` are centred on ``offsets`` already (a view of another side's, a donut's):
        they are neither copied nor changed.
    """

    def __init__(self, sign: int, distance: np.ndarray, values: np.ndarray,
                 weights: np.ndarray | None = None, clusters: np.ndarray | None = None,
                 neighbors: int = 3, rows: np.ndarray | None = None, offsets: np.ndarray | None = None,
                 centred: bool = False):
        self.sign = sign
        self.rows = rows
        self.distance = distance
        values = values if values.ndim == 2 else values[:, None]
        # Centre each variable on this side: the moment engine expands squared residuals, which
        # would cancel catastrophically for outcomes with a large offset (e.g. y + 1e6).
        if offsets is None:
            offsets = values.mean(axis=0) if len(values) else np.zeros(values.shape[1])
        self.offsets = offsets
        if not centred:
            values -= self.offsets  # the caller hands over a fresh array (never user data)
        self.values = values
        self.weights = weights
        self.clusters = clusters
        self.neighbors = neighbors
        self.n = len(distance)
        self.moments = SideMoments(distance)
        self._nn: np.ndarray | None = None
        self._nn_base: tuple[Side, int, bool] | None = None   # what this side is cut from (cut_from)
        self._groups: tuple[int, np.ndarray] | None = None   # (rows scanned, their group starts)

    def without_nearest(self, start: int) -> "Side":
        """This side without its ``start`` observations nearest the cutoff (a donut), with no sort
        and no copy.

        The side is sorted by distance, so the remaining observations are the tail ``[start:]``,
        still sorted: distances, values, weights and clusters are views of this side's. The values
        stay centred on this side's means (``offsets``), not on the tail's own: centring is for
        precision (squared residuals expanded in the moment tables), and a donut's mean is close to
        its side's; every estimate equals a Side prepared from scratch on the remaining rows up to
        rounding in the last digits. At 1e7 rows a fresh copy per radius cost a donut ladder more
        than its fits. Its moment tables are rebuilt on demand (they depend on which rows remain),
        its neighbour residuals are this side's beyond the first J groups of ties (``cut_from``).
        """
        tail = Side(self.sign, self.distance[start:], self.values[start:],
                    None if self.weights is None else self.weights[start:],
                    None if self.clusters is None else self.clusters[start:], self.neighbors,
                    None if self.rows is None else self.rows[start:], offsets=self.offsets, centred=True)
        if start > 0:
            tail.cut_from(self, start, reversed_=False)
        return tail

    def cut_from(self, base: "Side", start: int, reversed_: bool) -> None:
        """Declare this side a run of ``base``'s observations, so it can take its neighbour
        residuals from base's: row i is base row ``start + i`` (a tail, to base's far end), or,
        reversed, base row ``start - 1 - i`` (base's first ``start`` rows in reverse order)."""
        self._nn_base = (base, start, reversed_)

    @property
    def far(self) -> float:
        """The largest distance on the side (the cap of every bandwidth)."""
        return self.distance[-1]

    def pilot_sums(self, share: float, degree: int):
        """Sums of a uniform-kernel polynomial pilot over the nearer ``share`` of the side, when the
        side does not hold those rows: (top, Gram, cross products) in u = sign * d / top, with
        Gram[j, k] = sum w u^(j+k) and cross[j] = sum w u^j (values - offsets) over d <= top. None
        here: this side holds every row, and the bandwidth selector fits the pilot on them."""
        return None

    def cubic_sums(self, score_sd: float):
        """Sums of Imbens-Kalyanaraman's global cubic over the side's nearer n // 2 + 1 rows, when the
        side does not hold them (``core.window_side``); None here (the selector uses the rows)."""
        return None

    # ---- per-row series, each a function of a row slice -------------------------------------
    def w(self, rows: slice) -> np.ndarray:
        return np.ones(len(self.distance[rows])) if self.weights is None else self.weights[rows]

    def nn_residuals(self) -> "np.ndarray | RunResiduals":
        """(n, k) scaled nearest-neighbour residuals; neighbours are searched over the whole side.
        Indexed by a row slice (and columns): on a side cut from another, a ``RunResiduals``."""
        if self._nn is None:
            self._nn = self._tail_residuals()
            if self._nn is None:
                self._nn, _ = neighbor_residuals(self.distance, self.values, self.neighbors, counts=False)
        return self._nn

    def _tail_residuals(self) -> np.ndarray | None:
        """Residuals from those of the side this one is cut from (a donut's tail, a placebo
        cutoff's side), when those exist.

        Neighbours of an observation lie within J groups of ties of it (seamline.core.neighbors),
        so beyond this side's first J groups they are the same observations as on the base side
        (whose run ends where this side ends: at base's far end, or reversed, at its first row),
        and so are the residuals (up to rounding: each side centres its values on its own mean).
        The first J groups are computed afresh on this side's first 2J groups, with the tie
        tolerance of the whole side; the rest are a view of base's (no copy of the side: at 1e7
        rows a donut ladder's copies cost more than its fits). None: compute the whole side directly.
        """
        if self._nn_base is None or self.n < 2:
            return None
        base, start, reversed_ = self._nn_base
        if base._nn is None or self.values.shape[1] != base.values.shape[1]:
            return None
        j, d = self.neighbors, self.distance
        tol = 1e-12 * max(d[-1] - d[0], np.finfo(float).tiny)   # neighbor_residuals' default
        head = min(self.n, 64 * (j + 1))
        while True:                                 # enough rows to hold 2J groups (or the side)
            starts = np.flatnonzero(np.r_[True, np.diff(d[:head]) > tol])
            if len(starts) > 2 * j or head == self.n:
                break
            head = min(self.n, 4 * head)
        if len(starts) <= 2 * j:
            return None                             # a side of few groups: compute it whole
        cut, stop = int(starts[j]), int(starts[2 * j])
        first, _ = neighbor_residuals(d[:stop], self.values[:stop], j, tol=tol, counts=False)
        rest = base._nn[:start - cut][::-1] if reversed_ else base._nn[start + cut:]
        return RunResiduals(first[:cut], rest)

    def series(self, kind: str, a: int = -1, b: int = -1):
        """(key, function of rows) for the series the moment engine sums."""
        v = self.values
        if kind == "w":
            return ("w",), self.w
        if kind == "wv":
            return ("wv", a), lambda r: self.w(r) * v[r, a]
        if kind == "wvv":
            return ("wvv", a, b), lambda r: self.w(r) * v[r, a] * v[r, b]
        if kind == "w2":
            return ("w2",), lambda r: self.w(r) ** 2
        if kind == "w2v":
            return ("w2v", a), lambda r: self.w(r) ** 2 * v[r, a]
        if kind == "w2vv":
            return ("w2vv", a, b), lambda r: self.w(r) ** 2 * v[r, a] * v[r, b]
        if kind == "w2nn":
            return ("w2nn", a, b), lambda r: (self.w(r) ** 2 * self.nn_residuals()[r, a]
                                              * self.nn_residuals()[r, b])
        raise KeyError(kind)

    def warm(self, variance: str, degree: int) -> None:
        """Build, in one pass, the moment tables a fit with this variance will ask for."""
        k = self.values.shape[1]
        kinds = [("w",)] + [("wv", a) for a in range(k)]
        if variance == "neighbors":
            kinds += [("w2nn", a, b) for a in range(k) for b in range(a, k)]
        else:
            kinds += [("w2",)] + [("w2v", a) for a in range(k)]
            kinds += [("w2vv", a, b) for a in range(k) for b in range(a, k)]
        self.moments.ensure([self.series(*kind) for kind in kinds], degree)

    # ---- counts -------------------------------------------------------------------------------
    def count_positive(self, h: float, kernel: str) -> int:
        """Observations with positive kernel weight at bandwidth h (uniform includes d == h)."""
        side = "right" if kernel == "uniform" else "left"
        return int(np.searchsorted(self.distance, h, side=side))

    def distinct_within(self, n_rows: int) -> int:
        """Number of distinct distances among the first n_rows observations: exact below
        DISTINCT_COUNTED, else DISTINCT_COUNTED (a lower bound; every caller compares with less).
        A scan from the nearest row: a continuous score reads a few thousand rows, not the side."""
        return len(self._scan_groups(n_rows, DISTINCT_COUNTED))

    def _first_groups(self, count: int) -> np.ndarray:
        """The first rows of the side's first ``count`` distinct distances (fewer if it has fewer)."""
        return self._scan_groups(len(self.distance), count)

    def _scan_groups(self, n_rows: int, count: int) -> np.ndarray:
        """First rows of the distinct distances among the first ``n_rows`` rows, the first ``count``
        of them. The rows scanned so far and their group starts are kept, so repeated questions
        (every fit asks several) read each row at most once."""
        d = self.distance
        n_rows = min(n_rows, len(d))
        if self._groups is None:
            self._groups = (min(1, len(d)), np.zeros(min(1, len(d)), dtype=np.intp))
        at, starts = self._groups
        if at < n_rows and len(starts) < count:
            found, step = [starts], max(SCAN_ROWS, at)
            total = len(starts)
            while at < n_rows and total < count:
                stop = min(n_rows, at + step)
                new = at + np.flatnonzero(d[at:stop] > d[at - 1:stop - 1])
                found.append(new)
                total += len(new)
                at, step = stop, 4 * step
            starts = np.concatenate(found)
            self._groups = (at, starts)
        return starts[: min(count, int(np.searchsorted(starts, n_rows, side="left")))]

    def bandwidth_for_distinct(self, needed: int, kernel: str) -> float:
        """Smallest bandwidth giving ``needed`` distinct distances positive weight (nan if impossible)."""
        starts = self._first_groups(needed + 1)
        if len(starts) < needed:
            return float("nan")
        d = self.distance[starts[needed - 1]]
        if kernel == "uniform":
            return float(d)
        # d == h gets zero weight under triangular/Epanechnikov: go a little past the value
        nxt = self.distance[starts[needed]] if len(starts) > needed else d * 1.01 + 1e-12
        return float(d + 0.01 * (nxt - d)) if nxt > d else float(d * 1.01)


class RunResiduals:
    """The neighbour residuals of a side cut from another: its first rows computed afresh
    (``head``), the rest a view of the base side's (``rest``, the same numbers). Indexed like the
    (n, k) array it stands for, by a row slice and optionally columns; only a slice that spans
    both parts is copied."""

    def __init__(self, head: np.ndarray, rest: np.ndarray):
        self.head, self.rest = head, rest
        self.shape = (len(head) + len(rest), head.shape[1])

    def __len__(self) -> int:
        return self.shape[0]

    def __getitem__(self, key) -> np.ndarray:
        rows, columns = key if isinstance(key, tuple) else (key, slice(None))
        if not isinstance(rows, slice):
            raise TypeError("RunResiduals are read by a row slice")
        start, stop, step = rows.indices(self.shape[0])
        if step != 1:
            raise TypeError("RunResiduals are read by a contiguous row slice")
        cut = len(self.head)
        if start >= cut:
            return self.rest[start - cut: max(stop - cut, start - cut), columns]
        if stop <= cut:
            return self.head[start:stop, columns]
        return np.concatenate([self.head[start:, columns], self.rest[: stop - cut, columns]])

    def __array__(self, dtype=None, copy=None) -> np.ndarray:
        out = np.concatenate([self.head, self.rest])
        return out if dtype is None else out.astype(dtype)
