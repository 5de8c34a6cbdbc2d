"""Binned means from each side's sorted scores, with the outcome sums made by passes elsewhere.

For a dataset too large to hold the outcome in score order (e.g. 1e8 rows of a partitioned
dataset holding only the sorted score in memory), ``binned_means_streamed`` computes what
``binning.binned_means`` computes, from

* ``below``, ``above``: each side's scores in ascending order (float64, read in place), and
* ``passes``: a function the caller provides that runs one of our chunk functions over all its
  rows, in any order and any chunking, and folds the results with the ``combine`` we give:
  ``passes(chunk, combine) = functools.reduce(combine, [chunk(x, y, w, start) for each chunk])``,
  where x, y and w are the chunk's scores, outcomes and weights (``None`` without weights; the
  rows the in-memory design keeps: no missing value, positive weight) and ``start`` the input
  position of the chunk's first row (used only to order tied scores, as a stable sort does).
  Each call returns a dict of float arrays; with dask, one ``dask.delayed(chunk)`` per partition
  and a tree of ``combine`` on the active scheduler do it.

The passes (three, or two when the caller brings the pilot's sums; each reads every row once):
  1. the global quartic pilot of each side, by normal equations in the Legendre basis (the
     in-memory fit, summed in another order). Its sums need only each side's largest distance
     from the cutoff, so a caller may make them in a pass it runs anyway (``pilot_chunk``; the
     streamed design does so while it gathers the scores) and hand them over as ``pilot``;
  2. the pilot's squared residuals: their sum and their trapezoid over the sorted scores. A row's
     trapezoid weight is half the spacings on either side of it (its rank is found by searching
     the sorted side); on a side with tied scores the trapezoid runs over the runs of equal scores
     with their first and last members in input order, which ``combine`` keeps (4 numbers per run);
  3. per bin: weight sum, weighted outcome and score sums, rows with positive weight, and the
     squared weighted deviations from the bin mean, as per-chunk means and sums of squares about
     them merged pairwise by ``combine`` (Chan, Golub and LeVeque's update: stable, and exactly 0
     for a bin whose outcome is constant), so no fourth pass over the rows is needed.
The slope sums of the pilot and the bins' bounds need the sorted scores only.

What is exact: counts, bin edges and bounds are those of ``binned_means``; every other number
equals it up to the order of summation (relative differences near 1e-15; tests check 1e-10).
Equal-count bins whose bound falls inside a run of tied scores need the input order of that
run's members, which no pass keeps: they raise (use equal-width bins or ``binned_means``).
``BinnedMeans.assignment`` is not available here (no input positions).

Working memory beyond the sorted scores: the chunk's own temporaries (a few arrays of the chunk's
length, in the caller's workers) and arrays per bin; 4 numbers per run of ties on a tied side.
"""
from __future__ import annotations

import numpy as np
from scipy import stats

from ..errors import InvalidOptionError
from ..options import BIN_METHODS, BIN_RULES, check_level, check_option
from .bin_number import (
    CHUNK,
    PILOT_DEGREE,
    SIDES,
    BinConstants,
    _horner,
    _legendre_chunks,
    _t_chunks,
    check_number_pair,
    check_scale,
    choose,
    n_runs,
)
from .binning import BinnedMeans, _frozen, _sorted_bins
from .density_sample import sorted_sides

__all__ = ["binned_means_streamed", "combine", "pilot_chunk"]

STRIDE = 256       # scores per block of ``_Side.ranks``
BLOCKED_FROM = 1 << 23   # sides of at least this many scores (64 MB) are searched block by block


def combine(a: dict, b: dict) -> dict:
    """Fold two chunk results: sums add; "first"/"last" keep the member with the least/greatest
    input position of each run (position arrays "first_pos"/"last_pos", NaN where a chunk had none);
    "mu2"/"m2" (per-bin means and sums of squares about them, weights "c2") merge as Chan et al.'s
    pairwise update does."""
    out = {}
    for key, value in a.items():
        if key.split(".")[-1] in ("first", "last", "first_pos", "last_pos", "mu2", "m2"):
            continue
        out[key] = value + b[key]
    for side in SIDES:
        if f"{side}.m2" not in a:
            continue
        # sums of squares about each chunk's mean (weights w^2), merged pairwise: Chan et al.'s update
        ca, cb = a[f"{side}.c2"], b[f"{side}.c2"]
        n = ca + cb
        with np.errstate(invalid="ignore", divide="ignore"):
            share = np.where(n > 0, cb / n, 0.0)
        delta = b[f"{side}.mu2"] - a[f"{side}.mu2"]
        out[f"{side}.mu2"] = a[f"{side}.mu2"] + delta * share
        out[f"{side}.m2"] = a[f"{side}.m2"] + b[f"{side}.m2"] + delta * delta * ca * share
    for end, better in (("first", np.less), ("last", np.greater)):
        for side in SIDES:
            pk, vk = f"{side}.{end}_pos", f"{side}.{end}"
            if pk not in a:
                continue
            pa, pb = a[pk], b[pk]
            take_b = np.isnan(pa) | (~np.isnan(pb) & better(pb, pa))
            out[pk] = np.where(take_b, pb, pa)
            out[vk] = np.where(take_b, b[vk], a[vk])
    return out


def _to_t(cutoff: float, span: float, side: str) -> tuple[float, float, float]:
    """The map of a side's scores onto [-1, 1] (the pilot's Legendre variable)."""
    return (cutoff, 2.0 / (span if span > 0 else 1.0), 1.0 if side == "below" else -1.0)


def _tied_values(xs: np.ndarray) -> np.ndarray:
    """The values that occur more than once in a sorted array (ascending, each once), chunk by chunk."""
    found = [z[1:][z[1:] == z[:-1]] for z in (xs[a:a + CHUNK + 1] for a in range(0, max(xs.size - 1, 0), CHUNK))]
    return np.unique(np.concatenate(found)) if found else np.empty(0)


class _Side:
    """One side's sorted scores and the scalars the passes need."""

    def __init__(self, xs: np.ndarray, cutoff: float, side: str, degree: int = PILOT_DEGREE):
        self.xs, self.side, self.cutoff = xs, side, cutoff
        n = self.n = xs.size
        self.far = float(xs[0]) if side == "below" else float(xs[-1])
        self.span = abs(self.far - cutoff)
        self.support = (self.far, cutoff) if side == "below" else (cutoff, self.far)
        self.runs = n_runs(xs)
        self.ties = self.runs < n
        self.deg = 0 if self.span == 0.0 else max(0, min(degree, self.runs - 1, n - 2))
        self.to_t = _to_t(cutoff, self.span, side)
        # the tied values only (a run of one score needs no input order): on a nearly continuous
        # side of 5e7 scores with a few repeated values, arrays per run would cost 16 bytes a score
        self.tied = _tied_values(xs) if self.ties else None
        self.tie_weights = self._tie_weights() if self.ties else None
        self.power = None

    def _tie_weights(self) -> tuple[np.ndarray, np.ndarray]:
        """Trapezoid weights of each tied run's first and last member (input order): half the
        spacing to the previous and to the next distinct score, plus the stretch to the cutoff for
        the run nearest it."""
        xs, n, tv = self.xs, self.n, self.tied
        lo = np.searchsorted(xs, tv, side="left")
        hi = np.searchsorted(xs, tv, side="right")
        first = np.where(lo > 0, 0.5 * (tv - xs[np.maximum(lo - 1, 0)]), 0.0)
        last = np.where(hi < n, 0.5 * (xs[np.minimum(hi, n - 1)] - tv), 0.0)
        if self.side == "below":
            last = last + np.where(hi == n, self.cutoff - xs[-1], 0.0)
        else:
            first = first + np.where(lo == 0, xs[0] - self.cutoff, 0.0)
        return first, last

    def rows_of(self, x: np.ndarray) -> np.ndarray:
        return x < self.cutoff if self.side == "below" else x >= self.cutoff

    def t(self, x: np.ndarray) -> np.ndarray:
        centre, factor, shift = self.to_t
        return (x - centre) * factor + shift

    def pilot_at(self, x: np.ndarray) -> np.ndarray:
        out = np.empty(x.size)
        _horner(self.power, self.t(x), out)
        return out

    def ranks(self, x: np.ndarray) -> np.ndarray:
        """``np.searchsorted(self.xs, x, side="left")`` for ascending ``x``, block by block: the ranks
        of every STRIDE-th score of ``x`` bound the stretch of the sorted side where the scores
        between them lie, and each block is searched in its stretch only. On a side of 5e7 scores a
        plain search misses the cache at nearly every step; this takes about half as long (0.17
        against 0.30 s per 1e6 scores). Below BLOCKED_FROM scores (5e6: both 31-33 ms per 6e5
        scores) the plain search is used."""
        xs = self.xs
        if xs.size < BLOCKED_FROM:                 # a side that fits the caches: one search is faster
            return np.searchsorted(xs, x, side="left")
        out = np.empty(len(x), dtype=np.intp)
        if not len(x):
            return out
        bounds = np.append(np.searchsorted(xs, x[::STRIDE], side="left"),
                           np.searchsorted(xs, x[-1:], side="right"))
        for i, a in enumerate(range(0, len(x), STRIDE)):
            lo, hi = bounds[i], bounds[i + 1]
            out[a:a + STRIDE] = np.searchsorted(xs[lo:hi], x[a:a + STRIDE], side="left")
            out[a:a + STRIDE] += lo
        return out

    def trapezoid_weight(self, x: np.ndarray) -> np.ndarray:
        """Half the spacings either side of each (untied) score, plus the stretch to the cutoff for
        the score nearest it: sum_k s2_k w_k is the trapezoid of s2 over the side's support."""
        xs, n = self.xs, self.n
        k = self.ranks(x)
        before = np.where(k > 0, xs[k] - xs[np.maximum(k - 1, 0)], 0.0)
        after = np.where(k < n - 1, xs[np.minimum(k + 1, n - 1)] - xs[k], 0.0)
        w = 0.5 * (before + after)
        nearest = n - 1 if self.side == "below" else 0
        gap = (self.cutoff - xs[-1]) if self.side == "below" else (xs[0] - self.cutoff)
        return w + np.where(k == nearest, gap, 0.0)

    def slope_sums(self) -> tuple[float, float]:
        """sum mu'(X_k)^2 and sum over interior k of mu'(X_k)^2 D_(k-1) D_k, from the scores alone."""
        xs, n = self.xs, self.n
        if len(self.power) <= 1:
            return 0.0, 0.0
        slope_power = np.polynomial.polynomial.polyder(self.power) * self.to_t[1]
        slope2 = spacings = 0.0
        g2 = np.empty(min(CHUNK, n))
        for rows, t in _t_chunks(xs, self.to_t):
            a, b = rows.start, rows.stop
            g = g2[:b - a]
            _horner(slope_power, t, g)
            np.square(g, out=g)
            slope2 += float(np.sum(g))
            lo, hi = max(a, 1), min(b, n - 1)
            if hi > lo:
                product = (xs[lo:hi] - xs[lo - 1:hi - 1]) * (xs[lo + 1:hi + 1] - xs[lo:hi])
                product *= g[lo - a:hi - a]
                spacings += float(np.sum(product))
        return slope2, spacings


def _pilot_chunk(cutoff: float, specs):
    """The pilot's normal equations, per side: ``specs`` (side, to_t, degree)."""
    def chunk(x, y, w, start):
        out = {}
        for side, to_t, deg in specs:
            keep = x < cutoff if side == "below" else x >= cutoff
            xs_, ys_ = x[keep], y[keep]
            ws_ = None if w is None else w[keep]
            gram = np.zeros((deg + 1, deg + 1))
            rhs = np.zeros(deg + 1)
            for rows, basis in _legendre_chunks(xs_, to_t, deg):
                weighted = basis if ws_ is None else basis * ws_[rows]
                # einsum, not a threaded BLAS call: the chunk runs on one of the scheduler's threads
                gram += np.einsum("ij,kj->ik", weighted, basis)
                rhs += np.einsum("ij,j->i", weighted, ys_[rows])
            out[f"{side}.gram"], out[f"{side}.rhs"] = gram, rhs
        return out
    return chunk


def pilot_chunk(cutoff: float, span_below: float, span_above: float):
    """The chunk function of pass 1 for a caller that folds it into a pass of its own.

    ``span_below``/``span_above``: each side's largest distance |x - cutoff| among the rows the bins
    keep (float64, as ``abs(x - cutoff)`` gives it). Fold its results with ``combine`` and hand
    ``(span_below, span_above, folded)`` to ``binned_means_streamed(pilot=...)``: it uses them when
    the spans equal those of the sorted scores, and runs the pass itself otherwise. The sums are
    made at degree ``PILOT_DEGREE``; a side of fewer distinct scores reads their leading block
    (the Legendre basis of a lower degree is the leading rows of this one).
    """
    cutoff = float(cutoff)
    return _pilot_chunk(cutoff, [(side, _to_t(cutoff, span, side), PILOT_DEGREE)
                                 for side, span in zip(SIDES, (span_below, span_above))])


def _residual_chunk(sides):
    def chunk(x, y, w, start):
        out = {}
        positions = None                              # input positions: only a tied side reads them
        for s in sides:
            keep = s.rows_of(x)
            xs_ = x[keep]
            s2 = np.square(y[keep] - s.pilot_at(xs_))
            out[f"{s.side}.sigma2"] = np.array([np.sum(s2)])
            # the chunk's scores sorted first: searching ascending keys walks the sorted side
            # once instead of jumping about it (several times faster on a large side)
            order = np.argsort(xs_)
            xo, so = xs_[order], s2[order]
            if not s.ties:
                out[f"{s.side}.trapezoid"] = np.array([np.sum(so * s.trapezoid_weight(xo))])
                continue
            # a score met once on the side has the untied weight; a tied run's first and last
            # members (least and greatest input position, kept by ``combine``) carry its weights
            j = np.searchsorted(s.tied, xo, side="left")
            in_run = (j < s.tied.size) & (s.tied[np.minimum(j, max(s.tied.size - 1, 0))] == xo) \
                if s.tied.size else np.zeros(xo.size, dtype=bool)
            alone = ~in_run
            out[f"{s.side}.trapezoid"] = np.array([np.sum(so[alone] * s.trapezoid_weight(xo[alone]))])
            if positions is None:
                positions = start + np.arange(x.size, dtype=float)
            run, pos, s2r = j[in_run], positions[keep][order][in_run], so[in_run]
            if run.size == 0:
                for end in ("first", "last"):
                    out[f"{s.side}.{end}_pos"] = out[f"{s.side}.{end}"] = np.full(s.tied.size, np.nan)
                continue
            order = np.lexsort((pos, run))
            run, pos, s2r = run[order], pos[order], s2r[order]
            heads = np.flatnonzero(np.r_[True, run[1:] != run[:-1]])
            tails = np.r_[heads[1:] - 1, run.size - 1]
            for end, at in (("first", heads), ("last", tails)):
                p = np.full(s.tied.size, np.nan)
                v = np.full(s.tied.size, np.nan)
                p[run[at]], v[run[at]] = pos[at], s2r[at]
                out[f"{s.side}.{end}_pos"], out[f"{s.side}.{end}"] = p, v
        return out
    return chunk


def _bin_chunk(sides, layouts, weighted: bool):
    """Per-bin sums (pass 3), with each chunk's w^2-weighted bin means and squared deviations
    about them ("c2", "mu2", "m2"; ``combine`` merges them)."""
    def chunk(x, y, w, start):
        out = {}
        for s, (edges, bounds, method, j) in zip(sides, layouts):
            keep = s.rows_of(x)
            xs_, ys_ = x[keep], y[keep]
            ws_ = None if w is None else w[keep]
            k = _bin_of(s, xs_, edges, bounds, method, j)
            count = out[f"{s.side}.count"] = np.bincount(k, minlength=j).astype(float)
            out[f"{s.side}.wsum"] = np.bincount(k, weights=ws_, minlength=j) if weighted else count.copy()
            wy = ys_ if ws_ is None else ws_ * ys_
            wx = xs_ if ws_ is None else ws_ * xs_
            out[f"{s.side}.ysum"] = np.bincount(k, weights=wy, minlength=j)
            out[f"{s.side}.xsum"] = np.bincount(k, weights=wx, minlength=j)
            out[f"{s.side}.m"] = (np.bincount(k, weights=(ws_ > 0).astype(float), minlength=j)
                                  if weighted else count.copy())
            w2 = None if ws_ is None else np.square(ws_)
            c2 = count.copy() if w2 is None else np.bincount(k, weights=w2, minlength=j)
            with np.errstate(invalid="ignore", divide="ignore"):
                mu2 = np.where(c2 > 0, (out[f"{s.side}.ysum"] if w2 is None else
                                        np.bincount(k, weights=w2 * ys_, minlength=j)) / c2, 0.0)
            dev = np.square(ys_ - mu2[k])
            if w2 is not None:
                dev *= w2
            out[f"{s.side}.c2"], out[f"{s.side}.mu2"] = c2, mu2
            out[f"{s.side}.m2"] = np.bincount(k, weights=dev, minlength=j)
        return out
    return chunk


def _bin_of(s: _Side, x: np.ndarray, edges: np.ndarray, bounds: np.ndarray, method: str, j: int) -> np.ndarray:
    """Each score's bin, as ``binning._sorted_bins`` places the sorted scores."""
    if method == "equal-width":
        if edges[0] == edges[-1]:          # every score at the cutoff: all in the first bin
            return np.zeros(x.size, dtype=np.int64)
        return np.searchsorted(edges[1:j], x, side="right")
    # equal-count: no bound falls inside a run of ties (checked), so the bin follows the score
    return np.searchsorted(s.xs[bounds[1:j]], x, side="right")


def binned_means_streamed(below, above, cutoff: float, passes, *, weighted: bool = False,
                          method: str = "equal-width", number: int | tuple[int, int] | None = None,
                          rule: str = "imse", scale: float = 1.0, level: float = 0.95,
                          pilot: tuple | None = None) -> BinnedMeans:
    """``binning.binned_means`` from each side's sorted scores and passes over the rows elsewhere.

    Parameters
    ----------
    below, above : each side's scores in ascending order (scores < cutoff, scores >= cutoff).
    cutoff : the cutoff c.
    passes : ``passes(chunk, combine)`` runs ``chunk(x, y, w, start)`` on every chunk of rows and
        folds the dicts it returns with ``combine`` (see the module docstring). Called three
        times, or twice when ``pilot`` is used.
    weighted : whether the caller's chunks carry weights (``w`` not None).
    method, number, rule, scale, level : as in ``binning.binned_means``.
    pilot : ``(span_below, span_above, sums)``, the folded results of ``pilot_chunk`` over the same
        rows (optional; ignored when its spans are not those of ``below`` and ``above``).

    Returns
    -------
    BinnedMeans
        Without ``assignment`` (no input positions).
    """
    cutoff = float(cutoff)
    level = check_level(level)
    method = check_option("method", method, BIN_METHODS)
    rule = check_option("rule", rule, BIN_RULES)
    scale = check_scale(scale)
    sample = sorted_sides(below, above, cutoff)
    sides = [_Side(part, cutoff, side) for part, side in zip(sample.parts, SIDES)]
    fixed = check_number_pair(number, (sides[0].n, sides[1].n))

    # pass 1: the pilot on each side (or the caller's sums of it, made at PILOT_DEGREE)
    if pilot is not None and (pilot[0], pilot[1]) == (sides[0].span, sides[1].span):
        got = pilot[2]
    else:
        got = passes(_pilot_chunk(cutoff, [(s.side, s.to_t, s.deg) for s in sides]), combine)
    for s in sides:
        gram, rhs = got[f"{s.side}.gram"][:s.deg + 1, :s.deg + 1], got[f"{s.side}.rhs"][:s.deg + 1]
        try:
            coef = np.linalg.solve(gram, rhs)
        except np.linalg.LinAlgError:
            coef = np.linalg.lstsq(gram, rhs, rcond=None)[0]
        s.power = np.polynomial.legendre.leg2poly(coef)
    # pass 2: squared residuals
    got = passes(_residual_chunk(sides), combine)
    consts = []
    for s in sides:
        slope2, spacings = s.slope_sums()
        sigma2 = float(got[f"{s.side}.sigma2"][0])
        int_sigma2 = float(got[f"{s.side}.trapezoid"][0])
        if s.ties:                 # sum over runs of (last_r + first_(r+1)) / 2 x spacing, by run
            w_first, w_last = s.tie_weights
            int_sigma2 += float(np.sum(got[f"{s.side}.first"] * w_first) + np.sum(got[f"{s.side}.last"] * w_last))
        average = sigma2 / s.n
        consts.append(BinConstants(
            bias_equal_width=s.span ** 2 / 12.0 * (slope2 / s.n),
            variance_equal_width=int_sigma2 / s.span if s.span > 0 else 0.0,
            bias_equal_count=s.n * spacings / 12.0, variance_equal_count=average,
            average_variance=average, support=s.support, n=int(s.n), pilot_degree=int(s.deg)))
    chosen = choose(consts, method, rule, scale, fixed)

    layouts = []
    for s, j in zip(sides, chosen.number):
        bounds, edges = _sorted_bins(s.xs, cutoff, s.side, method, j)
        if method == "equal-count":
            inner = bounds[1:j]
            split = inner[(inner > 0) & (inner < s.n)]
            if np.any(s.xs[split - 1] == s.xs[split]):
                raise InvalidOptionError(
                    f"`method` must be \"equal-width\" for bins from streamed sums when a bin bound "
                    f"falls inside a run of tied scores; got \"equal-count\" with such a run {s.side} the "
                    "cutoff. Use method=\"equal-width\", or binned_means on the rows in memory.")
        layouts.append((edges, bounds, method, j))
    # pass 3: per-bin sums, with sums of squares about the chunks' means
    got = passes(_bin_chunk(sides, layouts, weighted), combine)
    means, parts = {}, []
    with np.errstate(invalid="ignore", divide="ignore"):
        for s, (edges, bounds, _, j) in zip(sides, layouts):
            count = np.diff(bounds)
            if not np.array_equal(got[f"{s.side}.count"], count.astype(float)):
                raise InvalidOptionError(
                    f"`passes` must run over the rows whose scores are `{s.side}`; got "
                    f"{int(got[f'{s.side}.count'].sum())} rows {s.side} the cutoff for {s.n} sorted scores. "
                    "Pass the same rows (missing values dropped) to both.")
            means[s.side] = got[f"{s.side}.ysum"] / got[f"{s.side}.wsum"]
        for s, (edges, bounds, _, j) in zip(sides, layouts):
            wsum, m = got[f"{s.side}.wsum"], got[f"{s.side}.m"]
            mean = means[s.side].copy()
            score_mean = got[f"{s.side}.xsum"] / wsum
            # sum w^2 (y - mean)^2 = sum w^2 (y - mu2)^2 + c2 (mu2 - mean)^2, mu2 the w^2-weighted mean
            ss = got[f"{s.side}.m2"] + got[f"{s.side}.c2"] * np.square(got[f"{s.side}.mu2"] - mean)
            se = np.sqrt(ss / wsum ** 2 * m / (m - 1))
            se[m < 2] = np.nan
            empty = wsum <= 0
            mean[empty] = score_mean[empty] = se[empty] = np.nan
            parts.append((np.diff(bounds), wsum, mean, score_mean, se, edges))
    z = float(stats.norm.ppf(0.5 + level / 2.0))
    count, wsum, mean, score_mean, se = (np.concatenate([p[i] for p in parts]) for i in range(5))
    sides_words = [side for side, j in zip(SIDES, chosen.number) for _ in range(j)]
    return BinnedMeans(
        side=_frozen(sides_words, dtype="<U5"), left=_frozen(np.concatenate([p[5][:-1] for p in parts])),
        right=_frozen(np.concatenate([p[5][1:] for p in parts])), count=_frozen(count, dtype=np.int64),
        weight_sum=_frozen(wsum), mean=_frozen(mean), score_mean=_frozen(score_mean),
        std_error=_frozen(se), ci_low=_frozen(mean - z * se), ci_high=_frozen(mean + z * se),
        method=method, rule=chosen.rule, number=chosen.number, level=level, cutoff=cutoff,
        selection=chosen, positions=None)


def array_passes(x: np.ndarray, y: np.ndarray, w: np.ndarray | None = None, chunk_rows: int = 1 << 20):
    """``passes`` over arrays in memory, in chunks of input rows (for checks and small data)."""
    def passes(chunk, fold):
        result = None
        for start in range(0, x.size, chunk_rows):
            rows = slice(start, start + chunk_rows)
            part = chunk(x[rows], y[rows], None if w is None else w[rows], start)
            result = part if result is None else fold(result, part)
        return result
    return passes

