"""How many bins a cutoff-design plot uses on each side: pure numerical core.

The number of bins per side is chosen by the IMSE-optimal rule (METHODS 9.2) or the
mimicking-variance rule (METHODS 9.3), each estimated with spacings of the sorted scores and a
global polynomial pilot, or fixed by the user (Calonico, Cattaneo & Titiunik 2015, JASA 110(512):
1753-1769). The binned means themselves are in ``seamline.core.binning``.

Everything here works on the observations in ascending score order (``sorted_sample.SortedSample``:
both sides' scores, and their outcomes and weights read run by run along one sort, which a design
hands over from its own), so nothing is sorted twice and nothing of length n is gathered. Sides: "below" is X < c, "above" is X >= c.
Results are frozen dataclasses of numbers; nothing is printed here.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import InvalidOptionError, InvalidWeightsError, OneSidedDataError, shown
from ..options import BIN_METHODS, BIN_RULES, check_option
from .legendre import legendre_rows
from .sorted_sample import (  # noqa: F401  (importable from here, as before)
    CHUNK,
    Gathered,
    SortedSample,
    is_ascending,
    n_runs,
    run_starts,
    sorted_sample,
    take,
)

__all__ = [
    "BinConstants",
    "BinSelection",
    "SortedSample",
    "bin_constants",
    "imse_bins",
    "imse_number",
    "mimic_variance_bins",
    "select_bin_number",
    "sorted_sample",
]

SIDES = ("below", "above")
PILOT_DEGREE = 4  # global polynomial pilot order; "order 4 is customary" (METHODS 9.2, from memory)


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
    x, y, w = check_arrays(score, outcome, weights)
    side = check_option("side", side, SIDES)
    cutoff = float(cutoff)
    mask = x < cutoff if side == "below" else x >= cutoff
    if not np.any(mask):
        raise OneSidedDataError(
            f"`score` must have observations {side} the cutoff; got none {side} {cutoff:g}. "
            "Check the cutoff value or the sample filter.")
    return _side_constants(x[mask], y[mask], None if w is None else w[mask], cutoff, side, degree)


def _side_constants(x: np.ndarray, y: np.ndarray, w: np.ndarray | None, cutoff: float, side: str,
                    degree: int) -> BinConstants:
    """Spacings constants of one side's observations given in input order."""
    order = np.argsort(x)
    return sorted_constants(x[order], y[order], None if w is None else w[order], order, y, cutoff,
                            side, degree)


def sorted_constants(xs: np.ndarray, ys: np.ndarray, ws: np.ndarray | None, positions: np.ndarray,
                     source_y: np.ndarray, cutoff: float, side: str,
                     degree: int = PILOT_DEGREE) -> BinConstants:
    """Spacings constants of one side from its observations in ascending score order.

    ``positions`` are the observations' positions in ``source_y`` (the outcome in input order).
    The sums follow the side's scores in ascending order with ties in input order (a stable sort).
    Only the trapezoid of sigma^2 depends on the order within ties, through the first and last
    member of each run of equal scores: the members with the least and the greatest input
    position. Their residuals are their outcomes (read at those positions) minus the pilot at the
    run's score, so no stable sort is needed and no per-row residual is kept.
    """
    n = xs.size
    far = float(xs[0]) if side == "below" else float(xs[-1])
    span = abs(far - cutoff)
    support = (far, cutoff) if side == "below" else (cutoff, far)
    runs = n_runs(xs)
    ties = runs < n
    starts = run_starts(xs) if ties else None        # every row is its own run otherwise
    deg = max(0, min(degree, runs - 1, n - 2))
    if span == 0.0:
        deg = 0
    to_t = (cutoff, 2.0 / (span if span > 0 else 1.0), 1.0 if side == "below" else -1.0)
    power = _pilot_power(xs, ys, ws, to_t, deg)
    sums = _residual_sums(xs, ys, power, to_t, trapezoid=not ties)
    if ties:
        at_run = np.empty(len(starts))              # the pilot at each run's score
        for rows, t in _t_chunks(xs[starts], to_t):
            _horner(power, t, at_run[rows])
        first = (source_y[np.minimum.reduceat(positions, starts)] - at_run) ** 2
        last = (source_y[np.maximum.reduceat(positions, starts)] - at_run) ** 2
        int_sigma2 = float(np.sum(0.5 * (last[:-1] + first[1:]) * np.diff(xs[starts])))
        nearest = last[-1] if side == "below" else first[0]
    else:
        int_sigma2 = sums["trapezoid"]
        nearest = sums["last"] if side == "below" else sums["first"]
    # the support runs to the cutoff: add the stretch between the nearest observation and c
    int_sigma2 += float(nearest * (cutoff - xs[-1] if side == "below" else xs[0] - cutoff))
    average_variance = sums["sigma2"] / n
    return BinConstants(
        bias_equal_width=span ** 2 / 12.0 * (sums["slope2"] / n),
        variance_equal_width=int_sigma2 / span if span > 0 else 0.0,
        bias_equal_count=n * sums["slope2_spacings"] / 12.0,
        variance_equal_count=average_variance,
        average_variance=average_variance,
        support=support, n=int(n), pilot_degree=int(deg))


def _pilot_power(x, y, w, to_t: tuple[float, float, float], deg: int) -> np.ndarray:
    """Power coefficients in t of the weighted global polynomial of degree ``deg`` on one side.

    The polynomial is fitted in the Legendre basis of t in [-1, 1] (the side's span mapped onto
    it), whose Gram matrix is well conditioned, so the normal equations lose no accuracy that
    matters (the same fit as least squares on powers of the score, up to rounding) and the fit
    costs one pass over the data instead of a factorisation of the n x (deg + 1) basis. Its power
    coefficients in t are bounded by a few times the Legendre ones on [-1, 1], so evaluating them
    by Horner's rule loses nothing either.
    """
    gram = np.zeros((deg + 1, deg + 1))
    rhs = np.zeros(deg + 1)
    for rows, basis in _legendre_chunks(x, to_t, deg):
        weighted = basis if w is None else basis * take(w, rows.start, rows.stop)
        gram += weighted @ basis.T
        rhs += weighted @ take(y, rows.start, rows.stop)
    try:
        coef = np.linalg.solve(gram, rhs)
    except np.linalg.LinAlgError:      # e.g. zero weights leaving too few distinct scores
        full = np.concatenate([b.copy() for _, b in _legendre_chunks(x, to_t, deg)], axis=1)
        sw = np.ones(x.size) if w is None else np.sqrt(np.asarray(w))
        coef = np.linalg.lstsq((full * sw).T, np.asarray(y) * sw, rcond=None)[0]
    return np.polynomial.legendre.leg2poly(coef)


def _residual_sums(xs, ys, power: np.ndarray, to_t: tuple[float, float, float],
                   trapezoid: bool) -> dict[str, float]:
    """Sums over one sorted side of the pilot's squared residuals sigma^2 and squared slopes
    mu'^2, chunk by chunk (no full-length array): sum sigma^2, sum mu'^2, sum_k mu'(X_k)^2 D_(k-1)
    D_k (interior k), and, if ``trapezoid`` (no ties), sum_k (sigma^2_k + sigma^2_(k+1))/2 D_k with
    the first and last sigma^2."""
    n = xs.size
    slope_power = np.polynomial.polynomial.polyder(power) * to_t[1]      # dt/dx = 2 / span
    out = {"sigma2": 0.0, "slope2": 0.0, "slope2_spacings": 0.0, "trapezoid": 0.0}
    buffers = np.empty((2, min(CHUNK, n)))
    previous = 0.0
    for rows, t in _t_chunks(xs, to_t):
        a, b = rows.start, rows.stop
        s2, g2 = buffers[0, :b - a], buffers[1, :b - a]
        _horner(power, t, s2)
        np.subtract(take(ys, a, b), s2, out=s2)
        np.square(s2, out=s2)
        out["sigma2"] += float(np.sum(s2))
        if trapezoid:
            if a == 0:
                out["first"] = float(s2[0])
            else:                       # the pair straddling the chunk boundary
                out["trapezoid"] += 0.5 * (previous + float(s2[0])) * float(xs[a] - xs[a - 1])
            out["trapezoid"] += float(np.sum(0.5 * (s2[:-1] + s2[1:]) * (xs[a + 1:b] - xs[a:b - 1])))
            previous = float(s2[-1])
        if len(power) > 1:
            _horner(slope_power, t, g2)
            np.square(g2, out=g2)
            out["slope2"] += float(np.sum(g2))
            lo, hi = max(a, 1), min(b, n - 1)           # interior rows: both spacings exist
            if hi > lo:                 # (np.dot would call a threaded BLAS for a plain sum)
                product = (xs[lo:hi] - xs[lo - 1:hi - 1]) * (xs[lo + 1:hi + 1] - xs[lo:hi])
                product *= g2[lo - a:hi - a]
                out["slope2_spacings"] += float(np.sum(product))
    out["last"] = previous
    return out


def _horner(coef: np.ndarray, t: np.ndarray, out: np.ndarray) -> None:
    """out = sum_k coef[k] t^k by Horner's rule, in place."""
    out.fill(coef[-1])
    for c in coef[-2::-1]:
        out *= t
        out += c


def _t_chunks(x: np.ndarray, to_t: tuple[float, float, float]):
    """(rows, t = (x - c) * 2/span + shift) chunk by chunk, in one reused buffer."""
    n = x.size
    buffer = np.empty(min(CHUNK, n))
    centre, factor, shift = to_t
    for start in range(0, n, CHUNK):
        rows = slice(start, min(start + CHUNK, n))
        t = buffer[:rows.stop - start]
        np.subtract(x[rows], centre, out=t)
        t *= factor
        t += shift
        yield rows, t


def _legendre_chunks(x: np.ndarray, to_t: tuple[float, float, float], deg: int):
    """(rows, P_k(t) for k <= deg) chunk by chunk, in one reused buffer (rows of P contiguous)."""
    basis = np.empty((deg + 1, min(CHUNK, x.size)))
    scratch = np.empty(min(CHUNK, x.size))
    for rows, tc in _t_chunks(x, to_t):
        m = tc.size
        yield rows, legendre_rows(tc, deg, out=basis[:, :m], scratch=scratch[:m])


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
def check_arrays(score, outcome, weights):
    x = np.asarray(score, dtype=float)
    y = np.asarray(outcome, dtype=float)
    if x.ndim != 1 or y.shape != x.shape:
        raise InvalidOptionError(
            f"`outcome` must be a one-dimensional array as long as `score`; got shapes {y.shape} "
            f"and {x.shape}. Pass one value per observation.")
    if not (_finite(x) and _finite(y)):
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


def _finite(v: np.ndarray) -> bool:
    return all(bool(np.isfinite(v[s:s + CHUNK]).all()) for s in range(0, v.size, CHUNK))


def check_number_pair(number, counts: tuple[int, int]) -> tuple[int, int] | None:
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


def check_scale(scale) -> float:
    ok = (isinstance(scale, (int, float, np.integer, np.floating)) and not isinstance(scale, bool)
          and math.isfinite(scale) and scale > 0)
    if not ok:
        raise InvalidOptionError(
            f"`scale` must be a positive finite number; got {shown(scale)}. "
            "Use 1 for the selected number of bins, 2 for twice as many.")
    return float(scale)


# ---------------------------------------------------------------------------------------------
# Selection
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
    x, y, w = check_arrays(score, outcome, weights)
    cutoff = float(cutoff)
    method = check_option("method", method, BIN_METHODS)
    rule = check_option("rule", rule, BIN_RULES)
    scale = check_scale(scale)
    return selection(sorted_sample(x, y, w, cutoff, order), cutoff, method, rule, scale, number)


def selection(sample: SortedSample, cutoff: float, method: str, rule: str, scale: float,
              number) -> BinSelection:
    """select_bin_number on a sorted sample and validated options."""
    fixed = check_number_pair(number, sample.counts)
    consts = [sorted_constants(*sample.side(i), sample.source_y, cutoff, s) for i, s in enumerate(SIDES)]
    return choose(consts, method, rule, scale, fixed)


def choose(consts: list[BinConstants], method: str, rule: str, scale: float,
           fixed: tuple[int, int] | None) -> BinSelection:
    """The numbers of bins from both sides' constants (or the numbers fixed by hand)."""
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
