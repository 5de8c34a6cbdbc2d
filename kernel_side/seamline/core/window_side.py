"""A side of the cutoff of which only the rows nearest the cutoff are held, with whole-side summaries.

The bounded-memory route for partitioned data (seamline.streaming) gathers, per side, every row with
distance <= R and summarises the rest in streaming passes: the side's count, its largest distance, its
means (the centring offsets) and the sums of the curvature pilot's polynomial over its nearer part.
A ``WindowSide`` answers every question the fits and bandwidth selectors ask exactly as a ``Side``
holding the whole side would, as long as the question concerns rows inside the window; a question
about rows beyond it raises ``WindowTooNarrow`` with the radius it needs, and the caller gathers a
wider window and asks again. Nothing is approximated.
"""
from __future__ import annotations

import numpy as np

from .moments import SideMoments
from .neighbors import neighbor_residuals
from .side import DISTINCT_COUNTED, Side

# A lower bound of distinct distances this large answers every "enough distinct values?" question
# the selectors ask of a whole side (degrees up to 6 need at most 7).
DISTINCT_ENOUGH = 8


class WindowTooNarrow(Exception):
    """Internal signal (not a user error): a computation needs rows beyond the gathered window."""

    def __init__(self, radius: float):
        super().__init__(f"rows up to distance {radius!r} are needed")
        self.radius = float(radius)


class _WindowMoments(SideMoments):
    """Moment tables of the window's rows that refuse windows reaching past the exact part."""

    def __init__(self, distance: np.ndarray, limit: float):
        super().__init__(distance)
        self.limit = limit

    def count(self, t: float) -> int:
        if t >= self.limit:
            raise WindowTooNarrow(t)
        return super().count(t)


class WindowSide(Side):
    """The rows of one side with distance <= ``radius`` (sorted), standing in for the whole side.

    Parameters
    ----------
    sign, distance, values, weights, neighbors : as for ``Side`` (the window's rows only).
    n_side : the whole side's number of usable rows.
    far : the whole side's largest distance.
    offsets : the whole side's means of ``values`` (the centring of the in-memory side).
    complete : True when the window holds the whole side (then it is exact everywhere).
    pilots : {share: (top, gram, cross)} the curvature pilot's sums over the whole side's nearer
        ``share`` (from a streaming pass), in the layout of ``Side.pilot_sums``, up to some degree.
    cubic : IK's global cubic sums over the nearer n // 2 + 1 rows (``Side.cubic_sums``), or None
        (ties at that row: which tied rows count depends on the sort, so the whole side is needed).

    Exact part: neighbour residuals of a row use up to J groups of tied distances beyond it, so
    rows are exact up to J + 1 groups before the window's edge; any bandwidth below ``limit`` (the
    first distance past that point) sees only exact rows.
    """

    def __init__(self, sign: int, distance: np.ndarray, values: np.ndarray, weights: np.ndarray | None, *,
                 neighbors: int, n_side: int, far: float, offsets: np.ndarray, complete: bool,
                 pilots: dict[float, tuple[float, np.ndarray, np.ndarray]], cubic: dict | None = None):
        super().__init__(sign, distance, values, weights, None, neighbors, None, offsets=offsets)
        self.n_window = len(distance)
        self.n = int(n_side)
        self._far = np.float64(far)
        self.complete = complete
        self.pilots = pilots
        self.cubic = cubic
        # the whole side's tie tolerance (neighbor_residuals' default: relative to the side's range)
        near = float(distance[0]) if len(distance) else 0.0
        self.tie_tol = 1e-12 * max(self._far - near, np.finfo(float).tiny)
        self.limit = np.inf if complete else self._exact_limit()
        self.moments = _WindowMoments(distance, self.limit)

    def _exact_limit(self) -> float:
        """The distance where the rows that may miss neighbours begin (the last J + 1 groups of ties),
        found on the window's tail only (no full-length temporaries)."""
        d, need = self.distance, self.neighbors + 1
        tail = min(len(d), 64 * need)
        while True:
            part = d[len(d) - tail:]
            starts = np.flatnonzero(np.r_[True, np.diff(part) > self.tie_tol])   # groups within the tail
            if len(starts) > need or tail == len(d):
                break
            tail = min(len(d), 4 * tail)
        if len(starts) <= need:
            return 0.0                                     # too few groups in the window: nothing is exact
        return float(part[starts[len(starts) - need]])

    @property
    def far(self) -> float:
        return self._far

    def _need(self, t: float) -> None:
        if t >= self.limit:
            raise WindowTooNarrow(t)

    def count_positive(self, h: float, kernel: str) -> int:
        self._need(h)
        return super().count_positive(h, kernel)

    def nn_residuals(self) -> np.ndarray:
        """The whole window's residuals (kept): only the direct paths read them; the moment tables
        read each slice's own (``series``), so a fit holds no per-row residuals."""
        if self._nn is None:
            self._nn, _ = neighbor_residuals(self.distance, self.values, self.neighbors, tol=self.tie_tol, counts=False)
        return self._nn

    def series(self, kind: str, a: int = -1, b: int = -1):
        if kind != "w2nn" or self._nn is not None:
            return super().series(kind, a, b)

        def w2nn(rows: slice) -> np.ndarray:
            e = self._nn_rows(rows)
            return self.w(rows) ** 2 * e[:, a] * e[:, b]
        return ("w2nn", a, b), w2nn

    def _nn_rows(self, rows: slice) -> np.ndarray:
        """Neighbour residuals of a slice of rows, from the slice with J whole groups of ties (the
        window's tie tolerance) on either side: a row's neighbours lie within J groups of it
        (``neighbor_residuals`` chunks the same way), so these are the whole window's residuals."""
        d, tol, j = self.distance, self.tie_tol, self.neighbors
        start, stop = rows.indices(len(d))[:2]
        if stop <= start:
            return np.zeros((0, self.values.shape[1]))
        span = 4 * (j + 1)
        while True:                     # group starts in (lo0, start]: the slice's first group and J before
            lo0 = max(0, start - span)
            cuts = lo0 + 1 + np.flatnonzero(np.diff(d[lo0:start + 1]) > tol)
            if len(cuts) > j or lo0 == 0:
                break
            span *= 4
        lo = int(cuts[len(cuts) - j - 1]) if len(cuts) > j else 0
        span = 4 * (j + 1)
        while True:                     # group starts in [stop, hi0): the end of the slice's last group and J after
            hi0 = min(len(d), stop + span)
            cuts = stop + np.flatnonzero(np.diff(d[stop - 1:hi0]) > tol)
            if len(cuts) > j or hi0 == len(d):
                break
            span *= 4
        hi = int(cuts[j]) if len(cuts) > j else len(d)
        resid, _ = neighbor_residuals(d[lo:hi], self.values[lo:hi], j, tol=tol, counts=False)
        return resid[start - lo: stop - lo]

    def distinct_within(self, n_rows: int) -> int:
        """Exact below DISTINCT_COUNTED, else DISTINCT_COUNTED (a lower bound); beyond the window's
        rows a lower bound too, given only when it reaches DISTINCT_ENOUGH."""
        have = len(self._scan_groups(min(n_rows, self.n_window), DISTINCT_COUNTED))
        if n_rows <= self.n_window or self.complete or have >= DISTINCT_ENOUGH:
            return have
        raise WindowTooNarrow(np.inf)

    def _first_groups(self, count: int) -> np.ndarray:
        starts = self._scan_groups(self.n_window, count)
        if not self.complete and len(starts) < count:    # the answer may lie beyond the window
            raise WindowTooNarrow(np.inf)
        return starts

    def pilot_sums(self, share: float, degree: int):
        rows = max(int(np.ceil(share * self.n)), 1)
        if self.complete or (rows < self.n_window and self.distance[rows - 1] < self.limit):
            return None                                    # the window holds the pilot's rows
        summary = self.pilots.get(share)
        if summary is None or summary[1].shape[0] < degree + 1:
            raise WindowTooNarrow(np.inf)
        top, gram, cross = summary
        return top, gram[: degree + 1, : degree + 1], cross[: degree + 1]

    def cubic_sums(self, score_sd: float):
        """The streamed sums, or, when ties at the median made them unusable, the same sums of this
        side's first n // 2 + 1 rows once it holds the whole side (never None: the other side may
        have only sums)."""
        if self.cubic is not None:
            return self.cubic
        if not self.complete:
            raise WindowTooNarrow(np.inf)
        rows = max(self.n // 2 + 1, min(self.n, 4))
        xs = self.sign * self.distance[:rows] / score_sd
        w = self.w(slice(0, rows))
        v = self.values[:rows]
        basis = np.column_stack([np.ones(rows), np.full(rows, 1.0 if self.sign > 0 else 0.0), xs, xs ** 2, xs ** 3])
        return {"rows": rows, "w": float(w.sum()), "w2": float(w @ w), "wv": w @ v, "wvv": (v * w[:, None]).T @ v,
                "gram": (basis * w[:, None]).T @ basis, "cross": (basis * w[:, None]).T @ v}

    def without_nearest(self, start: int) -> "Side":
        raise WindowTooNarrow(np.inf)      # donuts go through the gathered route
