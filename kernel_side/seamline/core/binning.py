"""Binned means for the scatter of a cutoff-design plot: pure numerical core.

Bins are built on each side of the cutoff separately and never straddle it (Calonico, Cattaneo &
Titiunik 2015, JASA 110(512): 1753-1769; METHODS section 9):

* "equal-width" (evenly spaced): J bins of equal width on [min, c) below and [c, max] above;
* "equal-count" (quantile spaced): J bins holding n_s/J observations each (counts differ by at
  most one).

How many bins each side gets is decided in ``seamline.core.bin_number``. Both modules read the
observations once gathered in ascending score order (``bin_number.SortedSample``), so a bin is a
contiguous run of sorted observations: its edges are found by searching the sorted scores, and its
sums are sums over the run. Sides: "below" is X < c, "above" is X >= c. Results are frozen
dataclasses of numbers and read-only arrays; nothing is printed here.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import stats

from ..errors import InvalidOptionError
from ..options import BIN_METHODS, BIN_RULES, check_level, check_option
from .bin_number import (CHUNK, SIDES, BinConstants, BinSelection, bin_constants, check_arrays,
                         check_scale, imse_bins, imse_number, mimic_variance_bins, n_runs,
                         select_bin_number, selection, sorted_sample, take)
from .bin_number import _side_constants  # noqa: F401  (kept importable from here for the tests)

__all__ = [
    "BinConstants",
    "BinSelection",
    "BinnedMeans",
    "bin_constants",
    "binned_means",
    "imse_bins",
    "imse_number",
    "mimic_variance_bins",
    "select_bin_number",
]


def _frozen(a, dtype=float) -> np.ndarray:
    out = np.array(a, dtype=dtype)
    out.setflags(write=False)
    return out


@dataclass(frozen=True, eq=False)
class BinnedMeans:
    """Binned means of the outcome on each side of the cutoff, one row per bin.

    Rows are ordered by score: the bins below the cutoff from left to right, then those above.
    Bins are [left, right) except the last bin above the cutoff, which is closed on the right.
    Equal-count bins are assigned by rank, so two neighbouring bins can share an edge value when
    scores are tied there.

    Attributes
    ----------
    side : "below" or "above".
    left, right : bin edges (the cutoff is always an edge).
    count : observations in the bin (equal-width bins may be empty: count 0, NaN means).
    weight_sum : sum of the weights in the bin (equals ``count`` without weights).
    mean : (weighted) mean of the outcome.
    score_mean : (weighted) mean of the score, the natural x position of equal-count bins.
    std_error : standard error of ``mean`` from the within-bin spread,
        sqrt(sum w^2 (y - mean)^2 / (sum w)^2 * count / (count - 1)), which is s / sqrt(count)
        without weights (count counts only observations with positive weight here); NaN when the
        bin holds fewer than two such observations.
    ci_low, ci_high : mean -/+ z std_error with the normal critical value at ``level``.
    assignment : for each input observation (input order), the row of its bin (built on first
        use from the sorted positions: a plot needs only the rows).
    method, rule : as in :class:`BinSelection`.
    number : (below, above) number of bins.
    level : confidence level of the intervals.
    cutoff : the cutoff.
    selection : the bin-number selection with its constants (:class:`BinSelection`).
    """

    side: np.ndarray
    left: np.ndarray
    right: np.ndarray
    count: np.ndarray
    weight_sum: np.ndarray
    mean: np.ndarray
    score_mean: np.ndarray
    std_error: np.ndarray
    ci_low: np.ndarray
    ci_high: np.ndarray
    method: str
    rule: str
    number: tuple[int, int]
    level: float
    cutoff: float
    selection: BinSelection
    positions: np.ndarray | None = field(repr=False)   # input positions, bin by bin (None: streamed)

    @property
    def assignment(self) -> np.ndarray:
        cached = self.__dict__.get("_assignment")
        if cached is None and self.positions is None:
            raise InvalidOptionError(
                "`assignment` must come from bins computed on the rows themselves; got bins from "
                "streamed sums (binned_means_streamed), which never see the rows' input positions. "
                "Assign rows with np.searchsorted of the bin edges, or use binned_means.")
        if cached is None:
            cached = np.empty(self.positions.size, dtype=np.int64)
            cached[self.positions] = np.repeat(np.arange(self.count.size), self.count)
            cached.setflags(write=False)
            object.__setattr__(self, "_assignment", cached)
        return cached


def _sorted_bins(xs: np.ndarray, cutoff: float, side: str, method: str, j: int) -> tuple[np.ndarray, np.ndarray]:
    """(bounds, edges) of one side's j bins over its ascending scores: bin k holds the sorted
    observations bounds[k]:bounds[k+1], and its edges are edges[k], edges[k+1].

    Equal-width bin k holds the scores in [edges[k], edges[k+1]) (the last bin also takes the top
    edge): the same as searching each score among the reported edges. Equal-count bin k holds
    ranks ceil(k n / j) up to the next one, i.e. the r-th observation goes to floor(r j / n).
    """
    n = xs.size
    if method == "equal-width":
        lower, upper = (float(xs[0]), cutoff) if side == "below" else (cutoff, float(xs[-1]))
        edges = lower + (upper - lower) * np.arange(j + 1) / j
        edges[0], edges[-1] = lower, upper
        if upper == lower:        # every score sits at the cutoff: all in the first bin
            return np.r_[0, np.full(j, n)], edges
        return np.r_[0, np.searchsorted(xs, edges[1:j], side="left"), n], edges
    bounds = -((-np.arange(j + 1) * n) // j)
    edges = np.empty(j + 1)
    edges[1:j] = 0.5 * (xs[bounds[1:j] - 1] + xs[bounds[1:j]])
    edges[0] = float(xs[0]) if side == "below" else cutoff
    edges[j] = cutoff if side == "below" else float(xs[-1])
    return bounds, edges


def _side_bins(x: np.ndarray, cutoff: float, side: str, method: str, j: int,
               order: np.ndarray | None = None):
    """Bin index (0..j-1) of each observation of one side (input order), and the j+1 edges.

    ``order`` sorts ``x`` (ties in any order) for equal-width bins; equal-count bins always use a
    stable sort, as ``binned_means`` does."""
    if order is None or method == "equal-count":
        order = np.argsort(x, kind="stable")
    bounds, edges = _sorted_bins(x[order], cutoff, side, method, j)
    idx = np.empty(x.size, dtype=np.int64)
    idx[order] = np.repeat(np.arange(j), np.diff(bounds))
    return idx, edges


def _groups(bounds: np.ndarray):
    """(first, last, lo, hi): runs of whole bins first..last-1 covering sorted rows [lo, hi), about
    CHUNK rows each (at least one bin), so a bin's rows are always read together."""
    j = bounds.size - 1
    k = 0
    while k < j:
        last = min(j, max(k + 1, int(np.searchsorted(bounds, bounds[k] + CHUNK, side="right")) - 1))
        yield k, last, int(bounds[k]), int(bounds[last])
        k = last


def _side_means(xs, ys, ws, bounds: np.ndarray) -> tuple[np.ndarray, ...]:
    """count, weight sum, mean, score mean and standard error of each bin of one sorted side.

    One pass over groups of whole bins (``_groups``): the outcome (and weights) of a group are
    read once; its sums are np.add.reduceat over the bins' runs (the same sums as one reduceat over
    the side), then the squared deviations from the bins' means. With few bins those are summed
    bin by bin on slices (np.repeat of the means over millions of rows costs more than the sums);
    with many small bins, by one repeat and one reduceat per group."""
    j = bounds.size - 1
    count = np.diff(bounds)
    per_bin = j <= 2000
    ysum, xsum, ss = np.zeros(j), np.zeros(j), np.zeros(j)
    wsum = count.astype(float) if ws is None else np.zeros(j)
    m = wsum if ws is None else np.zeros(j)
    mean = np.zeros(j)
    with np.errstate(invalid="ignore", divide="ignore"):
        for first, last, lo, hi in _groups(bounds):
            if hi <= lo:
                continue
            bins = slice(first, last)
            nonempty = count[bins] > 0
            starts = bounds[first:last][nonempty] - lo
            y, x = take(ys, lo, hi), xs[lo:hi]

            def sums(values):
                out = np.zeros(last - first)
                out[nonempty] = np.add.reduceat(values, starts)
                return out
            if ws is None:
                ysum[bins], xsum[bins] = sums(y), sums(x)
            else:
                w = take(ws, lo, hi)
                wsum[bins], ysum[bins], xsum[bins] = sums(w), sums(w * y), sums(w * x)
                # small-sample factor m/(m-1) over observations that carry weight, so that
                # without weights this is exactly s/sqrt(count)
                m[bins] = sums((w > 0).astype(float))
            mean[bins] = ysum[bins] / wsum[bins]
            if per_bin:
                for k in np.flatnonzero(nonempty) + first:
                    a, b = bounds[k] - lo, bounds[k + 1] - lo
                    dev = y[a:b] - mean[k]
                    if ws is not None:
                        dev *= w[a:b]
                    ss[k] = np.sum(np.square(dev, out=dev))
            else:
                dev = np.repeat(mean[bins], count[bins])
                np.subtract(y, dev, out=dev)
                if ws is not None:
                    dev *= w
                ss[bins] = sums(np.square(dev, out=dev))
        score_mean = xsum / wsum
        se = np.sqrt(ss / wsum ** 2 * m / (m - 1))
    se[m < 2] = np.nan
    empty = wsum <= 0
    mean[empty] = score_mean[empty] = se[empty] = np.nan
    return count, wsum, mean, score_mean, se


def binned_means(score, outcome, cutoff: float, *, method: str = "equal-width",
                 number: int | tuple[int, int] | None = None, rule: str = "imse",
                 scale: float = 1.0, weights=None, level: float = 0.95,
                 order: np.ndarray | None = None, sorted_score: np.ndarray | None = None) -> BinnedMeans:
    """Binned means of the outcome with confidence intervals, bins never straddling the cutoff.

    Parameters
    ----------
    score, outcome : 1-D float arrays of the same length (finite).
    cutoff : the cutoff c; observations with score >= c are "above".
    method : "equal-width" (J bins of equal width on [min, c) and [c, max]) or "equal-count"
        (J bins with equal numbers of observations, +-1).
    number : number of bins, an int for both sides or a pair (below, above); default chosen by
        ``rule`` separately on each side (:func:`select_bin_number`).
    rule : "imse" or "mimic-variance" (used when ``number`` is None).
    scale : factor on the data-driven number of bins.
    weights : optional non-negative weights; means become weighted means.
    level : confidence level of the intervals (normal critical value).
    order : optional positions that sort ``score`` ascending (ties in any order), e.g. a design's
        own sort, so that nothing is sorted again (equal-count bins on tied scores still order
        each run of ties by input position).
    sorted_score : optional ``score[order]``, if the caller keeps it (a design does), so that it is
        not gathered again; only read.

    Returns
    -------
    BinnedMeans

    Raises
    ------
    OneSidedDataError, InvalidOptionError, InvalidWeightsError

    Notes
    -----
    Equal-count bins are filled by rank: the side's observations are sorted by score (ties keep
    their input order) and the r-th of n_s goes to bin floor(r J / n_s). Counts therefore differ by
    at most one even with heavy ties, at the price that tied scores can fall in two neighbouring
    bins, which then share an edge value. Interior equal-count edges are midpoints between the
    last score of a bin and the first score of the next.

    References
    ----------
    Calonico, S., Cattaneo, M. D. and Titiunik, R. (2015). Optimal data-driven regression
    discontinuity plots. Journal of the American Statistical Association 110(512), 1753-1769.
    """
    x, y, w = check_arrays(score, outcome, weights)
    cutoff = float(cutoff)
    level = check_level(level)
    method = check_option("method", method, BIN_METHODS)
    rule = check_option("rule", rule, BIN_RULES)
    scale = check_scale(scale)
    sample = sorted_sample(x, y, w, cutoff, order, sorted_score)
    chosen = selection(sample, cutoff, method, rule, scale, number)
    z = float(stats.norm.ppf(0.5 + level / 2.0))
    sides, lefts, rights, parts, positions = [], [], [], [], []
    reordered = False
    for i, (side, j) in enumerate(zip(SIDES, chosen.number)):
        xs, ys, ws, pos = sample.side(i)
        if method == "equal-count" and not sample.stable and n_runs(xs) < xs.size:
            tied = np.lexsort((pos, xs))        # ties in input order: ranks as a stable sort gives
            xs, pos = xs[tied], pos[tied]
            ys = sample.source_y[pos]
            ws = None if ws is None else np.asarray(ws)[tied]
            reordered = True
        bounds, edges = _sorted_bins(xs, cutoff, side, method, j)
        parts.append(_side_means(xs, ys, ws, bounds))
        sides += [side] * j
        lefts.append(edges[:-1])
        rights.append(edges[1:])
        positions.append(pos)
    count, wsum, mean, score_mean, se = (np.concatenate(p) for p in zip(*parts))
    # the sorted positions as they are when no run of ties was reordered (a read-only view of the
    # caller's order, not a copy)
    order = (np.concatenate(positions) if reordered else sample.positions).view()
    order.setflags(write=False)
    return BinnedMeans(
        side=_frozen(sides, dtype="<U5"), left=_frozen(np.concatenate(lefts)),
        right=_frozen(np.concatenate(rights)), count=_frozen(count, dtype=np.int64),
        weight_sum=_frozen(wsum), mean=_frozen(mean), score_mean=_frozen(score_mean),
        std_error=_frozen(se), ci_low=_frozen(mean - z * se), ci_high=_frozen(mean + z * se),
        method=method, rule=chosen.rule, number=chosen.number, level=level, cutoff=cutoff,
        selection=chosen, positions=order)
