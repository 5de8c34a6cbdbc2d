"""Binned means for the scatter of a cutoff-design plot: pure numerical core.

Bins are built on each side of the cutoff separately and never straddle it (Calonico, Cattaneo &
Titiunik 2015, JASA 110(512): 1753-1769; METHODS section 9):

* "equal-width" (evenly spaced): J bins of equal width on [min, c) below and [c, max] above;
* "equal-count" (quantile spaced): J bins holding n_s/J observations each (counts differ by at
  most one).

The number of bins per side is chosen by the IMSE-optimal rule (METHODS 9.2) or the
mimicking-variance rule (METHODS 9.3), each estimated with spacings of the sorted scores and a
global polynomial pilot, or fixed by the user. Sides: "below" is X < c, "above" is X >= c.
Results are frozen dataclasses of numbers and read-only arrays; nothing is printed here.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats

from ..errors import InvalidOptionError, InvalidWeightsError, OneSidedDataError, shown
from ..options import BIN_METHODS, BIN_RULES, check_level, check_option

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

SIDES = ("below", "above")
PILOT_DEGREE = 4  # global polynomial pilot order; "order 4 is customary" (METHODS 9.2, from memory)


def _frozen(a, dtype=float) -> np.ndarray:
    out = np.array(a, dtype=dtype)
    out.setflags(write=False)
    return out


# ---------------------------------------------------------------------------------------------
# Result objects
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class BinConstants:
    """Spacings estimates of the IMSE constants on one side (METHODS 9.2).

    Attributes
    ----------
    bias_equal_width, variance_equal_width : B_ES = (L^2/12) int mu'^2 f_s, V_ES = (1/L) int sigma^2.
    bias_equal_count, variance_equal_count : B_QS = (1/12) int mu'^2 / f_s, V_QS = int sigma^2 f_s.
    average_variance : int sigma^2 f_s (the raw-data variance that the mimicking rule matches;
        equal to ``variance_equal_count``).
    support : (lower, upper) support of the side ([min, c] below, [c, max] above).
    n : observations on the side.
    pilot_degree : order of the global polynomial pilot actually used.
    """

    bias_equal_width: float
    variance_equal_width: float
    bias_equal_count: float
    variance_equal_count: float
    average_variance: float
    support: tuple[float, float]
    n: int
    pilot_degree: int


@dataclass(frozen=True, eq=False)
class BinSelection:
    """Number of bins on each side and the rules behind it.

    Attributes
    ----------
    method : "equal-width" or "equal-count".
    rule : "imse", "mimic-variance" or "user" (numbers given by hand).
    number : (below, above) number of bins used.
    imse_number, mimic_variance_number : (below, above) what each data-driven rule selects for
        ``method`` (before ``scale``).
    scale : factor applied to the selected numbers (1 unless the user asked otherwise).
    below, above : the spacings constants of each side (:class:`BinConstants`).
    """

    method: str
    rule: str
    number: tuple[int, int]
    imse_number: tuple[int, int]
    mimic_variance_number: tuple[int, int]
    scale: float
    below: BinConstants
    above: BinConstants


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
    assignment : for each input observation (input order), the row of its bin.
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
    assignment: np.ndarray
    method: str
    rule: str
    number: tuple[int, int]
    level: float
    cutoff: float
    selection: BinSelection


# ---------------------------------------------------------------------------------------------
# Pure formulas
# ---------------------------------------------------------------------------------------------
def imse_number(bias_constant: float, variance_constant: float, n: float) -> float:
    """Unrounded IMSE-optimal number of bins (2 B / V)^(1/3) n^(1/3) (METHODS 9.2).

    Minimises IMSE(J) = B / J^2 + J V / n. B and V are the side's constants for the binning
    method (``BinConstants``) and n the side's number of observations.
    """
    b, v, n = float(bias_constant), float(variance_constant), float(n)
    if not (math.isfinite(b) and b >= 0):
        raise InvalidOptionError(
            f"`bias_constant` must be a finite number >= 0; got {shown(bias_constant)}. "
            "Pass the integrated squared slope constant B.")
    if not (math.isfinite(v) and v > 0):
        raise InvalidOptionError(
            f"`variance_constant` must be a positive finite number; got {shown(variance_constant)}. "
            "Pass the integrated variance constant V.")
    if not (math.isfinite(n) and n > 0):
        raise InvalidOptionError(
            f"`n` must be a positive number of observations; got {shown(n)}. Pass the side's count.")
    return (2.0 * b / v) ** (1.0 / 3.0) * n ** (1.0 / 3.0)


def imse_bins(bias_constant: float, variance_constant: float, n: float) -> int:
    """IMSE-optimal number of bins, ceil((2 B / V)^(1/3) n^(1/3)), at least 1 (METHODS 9.2)."""
    return max(1, math.ceil(imse_number(bias_constant, variance_constant, n)))


def mimic_variance_bins(average_variance: float, bin_variance: float, n: float) -> int:
    """Mimicking-variance number of bins ceil((Vbar / V_bins) n / log(n)^2), at least 1.

    (METHODS 9.3, from memory; n is the side's count.) For equal-count bins V_bins = Vbar and the
    rule is ceil(n / log(n)^2). Returns 1 when n < 3, where log(n)^2 is too small to mean anything.
    """
    a, v, n = float(average_variance), float(bin_variance), float(n)
    if not (math.isfinite(n) and n > 0):
        raise InvalidOptionError(
            f"`n` must be a positive number of observations; got {shown(n)}. Pass the side's count.")
    if n < 3:
        return 1
    if not (math.isfinite(a) and a >= 0 and math.isfinite(v) and v > 0):
        raise InvalidOptionError(
            f"`bin_variance` must be positive and `average_variance` >= 0; got {shown(bin_variance)} "
            f"and {shown(average_variance)}. Pass the variance constants of the side.")
    return max(1, math.ceil(a / v * n / math.log(n) ** 2))


# ---------------------------------------------------------------------------------------------
# Spacings estimates of the constants
# ---------------------------------------------------------------------------------------------
def _n_distinct(sorted_values: np.ndarray) -> int:
    return 0 if sorted_values.size == 0 else 1 + int(np.count_nonzero(np.diff(sorted_values)))


def bin_constants(score, outcome, cutoff: float, side: str, *, weights=None,
                  degree: int = PILOT_DEGREE) -> BinConstants:
    """Spacings estimates of the IMSE constants on one side of the cutoff (METHODS 9.2).

    Parameters
    ----------
    score, outcome : 1-D float arrays of the same length (all observations; only ``side`` is used).
    cutoff : the cutoff c.
    side : "below" (X < c) or "above" (X >= c).
    weights : optional non-negative weights for the pilot fit.
    degree : order of the global polynomial pilot (default 4); lowered to
        min(degree, distinct scores - 1, n_s - 2) (not below 0) on sides with few values.

    Returns
    -------
    BinConstants

    Notes
    -----
    With the side's sorted scores X_(1) < ... < X_(n_s), spacings D_k = X_(k+1) - X_(k) ~ 1/(n_s f_s),
    mu' from the pilot polynomial and sigma^2 = squared pilot residuals:
      int mu'^2 f_s      ~ (1/n_s) sum_k mu'(X_k)^2
      int sigma^2 dx     ~ sum_k (sigma^2_k + sigma^2_(k+1))/2 D_k, plus the gap to the cutoff
      int mu'^2 / f_s    ~ n_s sum_k mu'(X_(k+1))^2 D_k D_(k+1)
      int sigma^2 f_s    ~ (1/n_s) sum_k sigma^2_k
    (derived) The equal-count bias uses products of adjacent spacings: a single squared spacing
    has mean 2/(n f)^2 (exponential spacings), which would double B_QS; adjacent spacings are
    nearly independent, so their product has mean 1/(n f)^2. Spacings sums are unweighted
    (convention); weights enter the pilot fit only.
    """
    x, y, w = _arrays(score, outcome, weights)
    side = check_option("side", side, SIDES)
    cutoff = float(cutoff)
    mask = x < cutoff if side == "below" else x >= cutoff
    if not np.any(mask):
        raise OneSidedDataError(
            f"`score` must have observations {side} the cutoff; got none {side} {cutoff:g}. "
            "Check the cutoff value or the sample filter.")
    return _side_constants(x[mask], y[mask], None if w is None else w[mask], cutoff, side, degree)


def _side_constants(x: np.ndarray, y: np.ndarray, w: np.ndarray | None, cutoff: float, side: str,
                    degree: int, order: np.ndarray | None = None) -> BinConstants:
    """Spacings constants of one side; ``order`` sorts ``x`` (ties in any order; sorted here if None).

    The sums follow the side's scores in ascending order with ties in input order (a stable sort).
    Only the trapezoid of sigma^2 depends on the order within ties, through the first and last
    member of each run of equal scores, so those are found as the least and greatest input
    position in the run and no stable sort is needed. The pilot is fitted in input order.
    """
    if order is None:
        order = np.argsort(x)
    xs = x[order]
    n = x.size
    far = float(xs[0]) if side == "below" else float(xs[-1])
    span = abs(far - cutoff)
    support = (far, cutoff) if side == "below" else (cutoff, far)
    starts = np.flatnonzero(np.r_[True, xs[1:] != xs[:-1]])       # first position of each run
    deg = max(0, min(degree, len(starts) - 1, n - 2))
    if span == 0.0:
        deg = 0
    scale = span if span > 0 else 1.0
    resid, slope = _pilot_fit(x, y, w, cutoff, scale, side, deg)
    sigma2 = resid ** 2
    slope2 = slope ** 2
    first = np.minimum.reduceat(order, starts)          # stable order: least input position first
    last = np.maximum.reduceat(order, starts)
    int_slope2_f = float(np.mean(slope2))
    gaps = np.diff(xs[starts])
    int_sigma2 = float(np.sum(0.5 * (sigma2[last[:-1]] + sigma2[first[1:]]) * gaps))
    # the support runs to the cutoff: add the stretch between the nearest observation and c
    if side == "below":
        int_sigma2 += float(sigma2[last[-1]] * (cutoff - xs[-1]))
    else:
        int_sigma2 += float(sigma2[first[0]] * (xs[0] - cutoff))
    if n >= 3:
        spacing = np.diff(xs)
        int_slope2_over_f = float(n * np.sum(slope2[order[1:-1]] * spacing[:-1] * spacing[1:]))
    else:
        int_slope2_over_f = 0.0
    average_variance = float(np.mean(sigma2))
    return BinConstants(
        bias_equal_width=span ** 2 / 12.0 * int_slope2_f,
        variance_equal_width=int_sigma2 / span if span > 0 else 0.0,
        bias_equal_count=int_slope2_over_f / 12.0,
        variance_equal_count=average_variance,
        average_variance=average_variance,
        support=support, n=int(n), pilot_degree=int(deg))


def _pilot_fit(x, y, w, cutoff: float, scale: float, side: str, deg: int) -> tuple[np.ndarray, np.ndarray]:
    """Residuals and slope of the weighted global polynomial of degree ``deg`` on one side.

    The polynomial is fitted in the Legendre basis of t in [-1, 1] (the side's span mapped onto
    it), whose Gram matrix is well conditioned, so the normal equations lose no accuracy that
    matters (the same fit as least squares on powers of the score, up to rounding) and the fit
    costs a few passes over the data instead of a factorisation of the n x (deg + 1) basis.
    """
    n = x.size
    # u = (x - c)/span lies in [-1, 0] below the cutoff and [0, 1] above; t maps it onto [-1, 1]
    t = 2.0 * (x - cutoff) / scale + (1.0 if side == "below" else -1.0)
    gram = np.zeros((deg + 1, deg + 1))
    rhs = np.zeros(deg + 1)
    for rows, basis, _ in _legendre_chunks(t, deg, slopes=False):      # pass 1: normal equations
        weighted = basis if w is None else basis * w[rows]
        gram += weighted @ basis.T
        rhs += weighted @ y[rows]
    try:
        coef = np.linalg.solve(gram, rhs)
    except np.linalg.LinAlgError:      # e.g. zero weights leaving too few distinct scores
        full = np.concatenate([b for _, b, _ in _legendre_chunks(t, deg, slopes=False)], axis=1)
        sw = np.ones(n) if w is None else np.sqrt(w)
        coef = np.linalg.lstsq((full * sw).T, y * sw, rcond=None)[0]
    resid = np.empty(n)
    slope = np.empty(n)
    for rows, basis, slopes in _legendre_chunks(t, deg, slopes=True):   # pass 2: residuals, slope
        np.subtract(y[rows], coef @ basis, out=resid[rows])
        np.multiply(coef @ slopes, 2.0 / scale, out=slope[rows])        # dt/dx = 2 / span
    return resid, slope


def _legendre_chunks(t: np.ndarray, deg: int, slopes: bool, chunk: int = 1 << 15):
    """(rows, P_k(t) for k <= deg, and their derivatives if ``slopes``) chunk by chunk.

    Rows of P are contiguous and chunks small enough to stay in cache; the recurrences are
    P_(k+1) = ((2k + 1) t P_k - k P_(k-1)) / (k + 1) and P_(k+1)' = P_(k-1)' + (2k + 1) P_k.
    """
    n = t.size
    basis = np.empty((deg + 1, min(chunk, n)))
    deriv = np.empty((deg + 1, min(chunk, n))) if slopes else None
    scratch = np.empty(min(chunk, n))
    for start in range(0, n, chunk):
        rows = slice(start, min(start + chunk, n))
        tc = t[rows]
        m = tc.size
        b, tmp = basis[:, :m], scratch[:m]
        b[0] = 1.0
        if deg >= 1:
            b[1] = tc
        for k in range(1, deg):
            np.multiply(tc, b[k], out=tmp)
            tmp *= (2 * k + 1) / (k + 1)
            np.multiply(b[k - 1], k / (k + 1), out=b[k + 1])
            np.subtract(tmp, b[k + 1], out=b[k + 1])
        d = None
        if slopes:
            d = deriv[:, :m]
            d[0] = 0.0
            if deg >= 1:
                d[1] = 1.0
            for k in range(1, deg):
                np.multiply(b[k], 2 * k + 1, out=d[k + 1])
                d[k + 1] += d[k - 1]
        yield rows, b, d


def _rule_numbers(k: BinConstants, method: str) -> tuple[float, int]:
    """(unrounded IMSE number, mimicking-variance number) for one side, guarded for degenerate fits."""
    if k.support[0] == k.support[1]:  # every score on this side sits at the cutoff
        return 1.0, 1
    if method == "equal-width":
        b, v = k.bias_equal_width, k.variance_equal_width
    else:
        b, v = k.bias_equal_count, k.variance_equal_count
    if v > 0:
        j_imse = imse_number(b, v, k.n)
        j_mv = float(mimic_variance_bins(k.average_variance, v, k.n))
    else:  # the pilot fits the side exactly (no noise): as many bins as observations
        j_imse = j_mv = float(k.n)
    return j_imse, int(j_mv)


# ---------------------------------------------------------------------------------------------
# Validation
# ---------------------------------------------------------------------------------------------
def _arrays(score, outcome, weights):
    x = np.asarray(score, dtype=float)
    y = np.asarray(outcome, dtype=float)
    if x.ndim != 1 or y.shape != x.shape:
        raise InvalidOptionError(
            f"`outcome` must be a one-dimensional array as long as `score`; got shapes {y.shape} "
            f"and {x.shape}. Pass one value per observation.")
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
        raise InvalidOptionError(
            "`score` and `outcome` must hold only finite values; got NaN or infinity. "
            "Drop or fill the missing rows before binning.")
    if weights is None:
        return x, y, None
    w = np.asarray(weights, dtype=float)
    if w.shape != x.shape:
        raise InvalidWeightsError(
            f"`weights` must have one value per observation; got shape {w.shape} for {x.size} "
            "observations. Pass a weight column of the same length.")
    if not np.all(np.isfinite(w)) or np.any(w < 0):
        bad = w[~np.isfinite(w) | (w < 0)][0]
        raise InvalidWeightsError(
            f"`weights` must be finite and non-negative; got {shown(float(bad))}. Fix or drop those rows.")
    return x, y, w


def _number_pair(number, counts: tuple[int, int]) -> tuple[int, int] | None:
    if number is None:
        return None
    if isinstance(number, (tuple, list, np.ndarray)):
        if len(number) != 2:
            raise InvalidOptionError(
                f"`number` must be one whole number or a pair (below, above); got {shown(number)}. "
                "Pass e.g. 20 or (20, 15).")
        pair = tuple(number)
    else:
        pair = (number, number)
    out = []
    for value, side, n_side in zip(pair, SIDES, counts):
        if not (isinstance(value, (int, np.integer)) and not isinstance(value, bool)):
            raise InvalidOptionError(
                f"`number` must be a whole number of bins; got {shown(value)}. Pass an integer such as 20.")
        if value < 1:
            raise InvalidOptionError(
                f"`number` must be at least 1 bin per side; got {value} {side} the cutoff. "
                "Pass 1 or more, or leave `number` unset to choose it from the data.")
        if value > n_side:
            raise InvalidOptionError(
                f"`number` must not exceed the {n_side} observations {side} the cutoff; got {value}. "
                f"Pass at most {n_side} bins {side} the cutoff, or leave `number` unset.")
        out.append(int(value))
    return out[0], out[1]


def _check_scale(scale) -> float:
    ok = (isinstance(scale, (int, float, np.integer, np.floating)) and not isinstance(scale, bool)
          and math.isfinite(scale) and scale > 0)
    if not ok:
        raise InvalidOptionError(
            f"`scale` must be a positive finite number; got {shown(scale)}. "
            "Use 1 for the selected number of bins, 2 for twice as many.")
    return float(scale)


def _split_sides(x: np.ndarray, cutoff: float) -> tuple[np.ndarray, np.ndarray]:
    below = x < cutoff
    n_below = int(np.count_nonzero(below))
    if n_below == 0 or n_below == x.size:
        empty = "below" if n_below == 0 else "above"
        raise OneSidedDataError(
            f"`score` must have observations on both sides of the cutoff; got none {empty} {cutoff:g}. "
            "Check the cutoff value or the sample filter.")
    return below, ~below


# ---------------------------------------------------------------------------------------------
# Selection and binned means
# ---------------------------------------------------------------------------------------------
def select_bin_number(score, outcome, cutoff: float, *, method: str = "equal-width",
                      rule: str = "imse", weights=None, scale: float = 1.0,
                      number: int | tuple[int, int] | None = None,
                      order: np.ndarray | None = None) -> BinSelection:
    """Number of bins on each side of the cutoff (Calonico, Cattaneo & Titiunik 2015).

    Parameters
    ----------
    score, outcome : 1-D float arrays of the same length.
    cutoff : the cutoff c.
    method : "equal-width" (evenly spaced) or "equal-count" (quantile spaced).
    rule : "imse" (IMSE-optimal, METHODS 9.2) or "mimic-variance" (METHODS 9.3); each side is
        chosen separately.
    weights : optional non-negative weights (used in the pilot fit).
    scale : multiplies the selected (unrounded) numbers before rounding up.
    number : fix the numbers by hand: an int for both sides or a pair (below, above); each must be
        between 1 and the side's number of observations. Overrides ``rule`` and ``scale``.
    order : optional positions that sort ``score`` ascending (ties in any order), e.g. from a sort
        the caller already made; the result is the same, without sorting again.

    Returns
    -------
    BinSelection
        Selected numbers are clipped to [1, n_s].
    """
    x, y, w = _arrays(score, outcome, weights)
    cutoff = float(cutoff)
    method = check_option("method", method, BIN_METHODS)
    rule = check_option("rule", rule, BIN_RULES)
    scale = _check_scale(scale)
    masks = _split_sides(x, cutoff)
    return _selection(x, y, w, cutoff, method, rule, scale, number, masks, _side_orders(order, masks))


def _side_orders(order: np.ndarray | None, masks) -> list[np.ndarray | None]:
    """Positions within ``x[mask]`` that sort it, per side, from positions that sort all of ``x``."""
    if order is None:
        return [None for _ in masks]
    n_below = int(np.count_nonzero(masks[0]))
    out = []
    # sorted scores below the cutoff come first: each side's part of ``order`` is a slice
    for mask, part in zip(masks, (order[:n_below], order[n_below:])):
        local = np.empty(mask.size, dtype=np.int64)
        local[mask] = np.arange(np.count_nonzero(mask))
        out.append(local[part])
    return out


def _selection(x, y, w, cutoff: float, method: str, rule: str, scale: float, number, masks,
               side_orders) -> BinSelection:
    """select_bin_number on validated arrays and options."""
    counts = (int(np.count_nonzero(masks[0])), int(np.count_nonzero(masks[1])))
    fixed = _number_pair(number, counts)
    consts = [_side_constants(x[m], y[m], None if w is None else w[m], cutoff, s, PILOT_DEGREE, o)
              for s, m, o in zip(SIDES, masks, side_orders)]
    imse, mimic, chosen = [], [], []
    for k in consts:
        j_imse, j_mv = _rule_numbers(k, method)
        imse.append(int(min(max(1, math.ceil(j_imse)), k.n)))
        mimic.append(int(min(max(1, j_mv), k.n)))
        base = j_imse if rule == "imse" else float(j_mv)
        chosen.append(int(min(max(1, math.ceil(scale * base - 1e-9)), k.n)))
    if fixed is not None:
        chosen, rule = list(fixed), "user"
    return BinSelection(method=method, rule=rule, number=(chosen[0], chosen[1]),
                        imse_number=(imse[0], imse[1]), mimic_variance_number=(mimic[0], mimic[1]),
                        scale=scale if fixed is None else 1.0, below=consts[0], above=consts[1])


def _side_bins(x: np.ndarray, cutoff: float, side: str, method: str, j: int,
               order: np.ndarray | None = None):
    """Bin index (0..j-1) of each observation of one side, and the j+1 edges.

    ``order`` (positions that sort ``x``, ties in any order) lets equal-width bins be assigned by
    ranges of the sorted scores instead of one search per observation; the indices are the same.
    """
    n = x.size
    if method == "equal-width":
        if side == "below":
            lower, upper = float(x.min()), cutoff
        else:
            lower, upper = cutoff, float(x.max())
        edges = lower + (upper - lower) * np.arange(j + 1) / j
        edges[0], edges[-1] = lower, upper
        if upper == lower:
            idx = np.zeros(n, dtype=np.int64)
        elif order is None:
            # searchsorted on the reported edges keeps assignment and edges consistent
            idx = np.clip(np.searchsorted(edges, x, side="right") - 1, 0, j - 1)
        else:
            # bin k holds the sorted scores in [edges[k], edges[k+1]) (the last bin also takes
            # the top edge): the same as searching each score among the edges, clipped
            starts = np.searchsorted(x[order], edges[1:j], side="left")
            sizes = np.diff(np.concatenate(([0], starts, [n])))
            idx = np.empty(n, dtype=np.int64)
            idx[order] = np.repeat(np.arange(j), sizes)
        return idx, edges
    # equal-count: by rank (stable sort, ties broken by input order), so counts differ by <= 1
    order = np.argsort(x, kind="stable")
    rank_bin = (np.arange(n) * j) // n
    idx = np.empty(n, dtype=np.int64)
    idx[order] = rank_bin
    xs = x[order]
    first = np.searchsorted(rank_bin, np.arange(j), side="left")   # first rank of each bin
    edges = np.empty(j + 1)
    edges[1:j] = 0.5 * (xs[first[1:] - 1] + xs[first[1:]])
    edges[0] = float(xs[0]) if side == "below" else cutoff
    edges[j] = cutoff if side == "below" else float(xs[-1])
    return idx, edges


def binned_means(score, outcome, cutoff: float, *, method: str = "equal-width",
                 number: int | tuple[int, int] | None = None, rule: str = "imse",
                 scale: float = 1.0, weights=None, level: float = 0.95,
                 order: np.ndarray | None = None) -> BinnedMeans:
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
    order : optional positions that sort ``score`` (ties in any order), passed to
        :func:`select_bin_number` so that it need not sort.

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
    x, y, w = _arrays(score, outcome, weights)
    cutoff = float(cutoff)
    level = check_level(level)
    method = check_option("method", method, BIN_METHODS)
    rule = check_option("rule", rule, BIN_RULES)
    scale = _check_scale(scale)
    masks = _split_sides(x, cutoff)
    side_orders = _side_orders(order, masks)
    selection = _selection(x, y, w, cutoff, method, rule, scale, number, masks, side_orders)
    z = float(stats.norm.ppf(0.5 + level / 2.0))
    assignment = np.empty(x.size, dtype=np.int64)
    sides, lefts, rights = [], [], []
    offset = 0
    for side, mask, j, side_order in zip(SIDES, masks, selection.number, side_orders):
        idx, edges = _side_bins(x[mask], cutoff, side, method, j, side_order)
        assignment[mask] = idx + offset
        sides += [side] * j
        lefts.append(edges[:-1])
        rights.append(edges[1:])
        offset += j
    rows = offset
    wt = np.ones(x.size) if w is None else w
    count = np.bincount(assignment, minlength=rows)
    wsum = np.bincount(assignment, weights=wt, minlength=rows)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.bincount(assignment, weights=wt * y, minlength=rows) / wsum
        score_mean = np.bincount(assignment, weights=wt * x, minlength=rows) / wsum
        resid = y - mean[assignment]
        ss = np.bincount(assignment, weights=(wt * resid) ** 2, minlength=rows)
        # small-sample factor m/(m-1) over observations that carry weight, so that without
        # weights this is exactly s/sqrt(count)
        m = np.bincount(assignment, weights=(wt > 0).astype(float), minlength=rows)
        se = np.sqrt(ss / wsum ** 2 * m / (m - 1))
    se[m < 2] = np.nan
    mean[wsum <= 0] = np.nan
    score_mean[wsum <= 0] = np.nan
    se[wsum <= 0] = np.nan
    return BinnedMeans(
        side=_frozen(sides, dtype="<U5"), left=_frozen(np.concatenate(lefts)),
        right=_frozen(np.concatenate(rights)), count=_frozen(count, dtype=np.int64),
        weight_sum=_frozen(wsum), mean=_frozen(mean), score_mean=_frozen(score_mean),
        std_error=_frozen(se), ci_low=_frozen(mean - z * se), ci_high=_frozen(mean + z * se),
        assignment=_frozen(assignment, dtype=np.int64), method=method, rule=selection.rule,
        number=selection.number, level=level, cutoff=cutoff, selection=selection)
