"""Observations in ascending score order, for the bins: pure numerical core.

``SortedSample`` holds both sides' scores in ascending order with their outcomes and weights along
the same sort, which a design hands over from its own (``order``, with its kept sorted score), so
nothing is sorted twice. The outcomes and weights are not gathered whole: a ``Gathered`` reads
``source[positions]`` one run of rows at a time, and every pass over them (``bin_number``'s pilot
and residuals, ``binning``'s bin sums) works run by run: the same sums in the same order as on a
gathered copy, bit for bit, in a few chunks of CHUNK rows of working memory.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InvalidOptionError, OneSidedDataError

CHUNK = 1 << 15   # rows per pass: small enough to stay in cache


class Gathered:
    """``source[positions]``, read one run at a time: ``rows(lo, hi)`` gathers rows [lo, hi) only.

    Slicing with a step-1 slice gives a lazy ``Gathered`` of those rows; ``np.asarray`` gathers all.
    """

    def __init__(self, source: np.ndarray, positions: np.ndarray):
        self.source = source
        self.positions = positions

    @property
    def size(self) -> int:
        return self.positions.size

    def __len__(self) -> int:
        return self.positions.size

    def rows(self, lo: int, hi: int) -> np.ndarray:
        return self.source[self.positions[lo:hi]]

    def __getitem__(self, key):
        if isinstance(key, slice) and key.step in (None, 1):
            return Gathered(self.source, self.positions[key])
        return self.source[self.positions[key]]

    def __array__(self, dtype=None, copy=None):
        out = self.source[self.positions]
        return out if dtype is None else out.astype(dtype)


def take(values, lo: int, hi: int) -> np.ndarray:
    """Rows [lo, hi) of an array (a view) or of a ``Gathered`` (gathered)."""
    return values.rows(lo, hi) if isinstance(values, Gathered) else values[lo:hi]


@dataclass(frozen=True, eq=False)
class SortedSample:
    """Validated observations in ascending score order, split at the cutoff.

    Attributes
    ----------
    x, y : scores and outcomes in ascending score order (``y`` a ``Gathered``: read by runs).
    w : weights in that order (a ``Gathered``), or None.
    positions : input position of each sorted observation (ties in any order unless ``stable``).
    split : number of observations below the cutoff (they come first).
    source_y : the outcomes in input order (``positions`` index it).
    stable : whether tied scores keep their input order (a stable sort).
    """

    x: np.ndarray
    y: Gathered
    w: Gathered | None
    positions: np.ndarray
    split: int
    source_y: np.ndarray
    stable: bool

    def side(self, index: int) -> tuple[np.ndarray, np.ndarray, np.ndarray | None, np.ndarray]:
        """(x, y, w, positions) of side 0 (below) or 1 (above), as views."""
        part = slice(0, self.split) if index == 0 else slice(self.split, None)
        return self.x[part], self.y[part], None if self.w is None else self.w[part], self.positions[part]

    @property
    def counts(self) -> tuple[int, int]:
        return self.split, self.x.size - self.split


def sorted_sample(x: np.ndarray, y: np.ndarray, w: np.ndarray | None, cutoff: float,
                  order: np.ndarray | None = None, sorted_x: np.ndarray | None = None) -> SortedSample:
    """Gather validated arrays along ``order`` (positions sorting ``x``; a stable sort if None).
    ``sorted_x``: ``x[order]`` if the caller keeps it (read, never written), not gathered again."""
    stable = order is None
    if stable:
        order = np.argsort(x, kind="stable")
    else:
        order = np.asarray(order)
        if order.shape != x.shape or order.dtype.kind not in "iu":
            raise InvalidOptionError(
                f"`order` must hold one integer position per observation; got shape {order.shape} "
                f"for {x.size} observations. Pass np.argsort(score), or leave `order` unset.")
    xs = x[order] if sorted_x is None or order is None else np.asarray(sorted_x, dtype=float)
    if xs.shape != x.shape:
        raise InvalidOptionError(
            f"`sorted_score` must hold the {x.size} scores in `order`; got shape {xs.shape}. Pass "
            "score[order], or leave it unset.")
    if not is_ascending(xs):
        raise InvalidOptionError(
            "`order` must sort `score` ascending; it does not. Pass np.argsort(score), or leave "
            "`order` unset.")
    split = int(np.searchsorted(xs, cutoff, side="left"))
    if split == 0 or split == x.size:
        empty = "below" if split == 0 else "above"
        raise OneSidedDataError(
            f"`score` must have observations on both sides of the cutoff; got none {empty} {cutoff:g}. "
            "Check the cutoff value or the sample filter.")
    return SortedSample(xs, Gathered(y, order), None if w is None else Gathered(w, order), order, split,
                        y, stable)


def is_ascending(xs: np.ndarray) -> bool:
    """xs[1:] >= xs[:-1] everywhere, chunk by chunk (one row of overlap)."""
    return all(bool(np.all(z[1:] >= z[:-1])) for z in (xs[s:s + CHUNK + 1] for s in range(0, xs.size - 1, CHUNK)))


def n_runs(xs: np.ndarray) -> int:
    """Number of runs of equal values in a sorted array, chunk by chunk."""
    if xs.size == 0:
        return 0
    return 1 + sum(int(np.count_nonzero(z[1:] != z[:-1]))
                   for z in (xs[s:s + CHUNK + 1] for s in range(0, xs.size - 1, CHUNK)))


def run_starts(xs: np.ndarray) -> np.ndarray:
    """First position of each run of equal values in a sorted array."""
    return np.flatnonzero(np.r_[True, xs[1:] != xs[:-1]])
