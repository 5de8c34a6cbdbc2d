"""Local randomization inference (Cattaneo, Frandsen & Titiunik 2015) for ``Design.local_randomization``.

Units with scores in a small window around the cutoff are analysed as a completely randomized
experiment: Fisher randomization p-values (``seamline.core.randomization``), a confidence interval
by inverting randomization tests under a constant additive effect, and Neyman's large-sample
interval for the window average effect next to them. Without a given window, one is chosen by
covariate balance in nested windows: the largest window such that it and every smaller window have a
minimum balance p-value of at least ``balance_threshold`` (Cattaneo, Frandsen & Titiunik 2015;
Cattaneo, Titiunik & Vazquez-Bare 2016, 2017).
"""
from __future__ import annotations

import copy
from functools import lru_cache
from math import comb
from numbers import Real

import numpy as np
import pandas as pd
from scipy import special

from ..core.randomization import (CHUNK, EXACT_LIMIT, STATISTICS, RandomizationTest, ShiftedDifference,
                                  differences_in_means, draw_assignments, invert, p_value, prefix_assignments,
                                  prefix_treated_sums, statistic_values)
from ..errors import InvalidOptionError, NoBalancedWindowError, WindowTooSmallError, shown
from ..options import check_level
from ..results.inference import LocalRandomization

MIN_UNITS = 5             # every analysed window needs at least this many units on each side
FIRST_WINDOW_UNITS = 10   # the nested sequence starts at this many units per side (convention)
WINDOW_STEPS = 20         # nested windows w_j = w_1 (1 + (j - 1) / 2), j = 1..20 (convention)
BALANCE_THRESHOLD = 0.15  # Cattaneo, Titiunik & Vazquez-Bare (2016); from memory
SENSITIVITY_EXTRA = 3     # sensitivity rows beyond the chosen window
WINDOW_TOLERANCE = 1e-10  # relative slack at the window's ends for floating-point scores
#: A window test of a statistic other than the difference in means holds its assignments (one byte
#: per unit and draw); up to this size it is kept on the design, so that a level change re-inverts it
#: from the p-values it already has instead of drawing again (10,000 draws of 6,400 units).
KEEP_ASSIGNMENTS_BYTES = 64 * 2 ** 20


def _check_statistic(value) -> str:
    if isinstance(value, str):
        for name in STATISTICS:
            if value.strip().lower() == name.lower():
                return name
    choices = ", ".join(f'"{s}"' for s in STATISTICS)
    raise InvalidOptionError(f"`statistic` must be one of {choices}; got {shown(value)}. Pick one of the listed values.")


def _check_count(argument: str, value, low: int) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < low:
        raise InvalidOptionError(f"`{argument}` must be an integer of at least {low}; got {shown(value)}. "
                                 f"Pass e.g. {argument}=10_000.")
    return int(value)


class _Units:
    """Distances, treatment and columns of the usable rows (score and outcome present).

    A window's units are found by binary search on the sorted distances; they are then taken in row
    order, the order the assignments' columns refer to. Windows holding the same units (scores
    rounded to a grid put several nested windows on the same rows) share every computed piece."""

    def __init__(self, design, outcome: str):
        data = design._data
        score = data.arrays[design.score]
        y = data.arrays[outcome]
        keep = ~np.isnan(score) & ~np.isnan(y)
        self.cutoff = design.cutoff
        self.x = score[keep] - design.cutoff
        self.y = y[keep]
        above = self.x >= 0
        self.treated = above if design.treated == "above" else ~above
        self.above = above
        self.covariates = {c: data.arrays[c][keep] for c in design.covariates if c != outcome}
        self._order = self._score_order(data, outcome, keep)
        self._sorted = self.x[self._order]
        self._zero = int(np.searchsorted(self._sorted, 0.0, side="left"))   # first unit above
        # the order of distance to the cutoff (nearest first): a symmetric window is a prefix of it.
        # The sides in score order are two sorted runs of distances (below reversed), which a stable
        # sort (timsort) merges in one pass
        runs = np.r_[self._order[: self._zero][::-1], self._order[self._zero:]]
        merged = np.argsort(np.abs(self.x[runs]), kind="stable")
        self.by_distance = runs[merged]
        self._distance_sorted = np.abs(self.x[self.by_distance])

    def _score_order(self, data, outcome: str, keep: np.ndarray) -> np.ndarray:
        """Positions (among the kept units) in ascending score order: the design's own sort when it
        keeps the same rows, else a sort of its own (the order of tied scores matters nowhere: a
        window's units are read back in row order, or in the distance order built from this one)."""
        rows, _ = data.sorted_rows((outcome,))
        if len(rows) == int(keep.sum()):
            position = np.cumsum(keep) - 1
            if np.all(keep[rows]):
                return position[rows]
        return np.argsort(self.x, kind="stable")

    def span(self, low: float, high: float) -> tuple[int, int]:
        """Positions [start, stop) in the sorted distances of the window [low, high]: both ends
        included, up to rounding (a score of 40.3 minus a cutoff of 40 is 0.29999...)."""
        tol = WINDOW_TOLERANCE * max(abs(self.cutoff), abs(low), abs(high))
        return (int(np.searchsorted(self._sorted, low - tol, side="left")),
                int(np.searchsorted(self._sorted, high + tol, side="right")))

    @property
    def lowest(self) -> float:
        return float(self._sorted[0])

    @property
    def highest(self) -> float:
        return float(self._sorted[-1])

    def prefix_length(self, span: tuple[int, int]) -> int | None:
        """n when the window's units are exactly the n nearest the cutoff (a symmetric window), else None."""
        start, stop = span
        if stop <= start:
            return None
        reach = max(-self._sorted[start], self._sorted[stop - 1])
        n = int(np.searchsorted(self._distance_sorted, reach, side="right"))
        return n if n == stop - start else None

    def rows(self, span: tuple[int, int]) -> np.ndarray:
        """The window's units as row positions in row order (the order a boolean mask gives)."""
        return np.sort(self._order[span[0]: span[1]])

    def counts(self, span: tuple[int, int]) -> tuple[int, int]:
        start, stop = span
        below = max(0, min(stop, self._zero) - start)
        return below, (stop - start) - below

    def half_width_for(self, units: int) -> float:
        """Smallest symmetric half-width holding ``units`` units on each side (nan if impossible)."""
        if min(self._zero, len(self._sorted) - self._zero) < units:
            return float("nan")
        return float(max(-self._sorted[self._zero - units], self._sorted[self._zero + units - 1]))


@lru_cache(maxsize=4)
def _assignments(n: int, n_treated: int, permutations: int, seed: int) -> tuple[np.ndarray, bool]:
    """The draws of a window that is not a prefix of the distance order (or is enumerated exactly)."""
    assign, exact = draw_assignments(n, n_treated, permutations, np.random.default_rng(seed))
    assign.setflags(write=False)
    return assign, exact


def _kept_units(design, outcome: str) -> _Units:
    """The usable units of an outcome, sorted once per design (two sorts of every row at 1e6 rows
    cost more than a level change may); callers copy it before choosing covariates."""
    key = ("local randomization units", outcome)
    found = design._inference.get(key)
    if found is None:
        found = design._inference[key] = _Units(design, outcome)
    return found


def _exact(n: int, n_treated: int) -> bool:
    return comb(n, n_treated) <= EXACT_LIMIT


def _window_rows(units: _Units, span) -> tuple[np.ndarray, int | None]:
    """A window's units and, when they are the first n in order of distance, n: in distance order
    then (the order the shared Monte Carlo keys refer to), in row order otherwise."""
    n = units.prefix_length(span)
    return (units.by_distance[:n], n) if n is not None else (units.rows(span), None)


def _treated_sums(units: _Units, windows: list[tuple[np.ndarray, int | None, np.ndarray]], permutations: int,
                  seed: int) -> list[tuple[np.ndarray, np.ndarray, bool]]:
    """For windows (rows, prefix length or None, columns (rows, k)): the sums of each column over the
    treated of every assignment, the observed ones, and whether the assignments are enumerated.
    Windows that are prefixes of the distance order share one pass over shared keys
    (``core.randomization.prefix_treated_sums``); the others draw as ``draw_assignments`` does."""
    out: list = [None] * len(windows)
    shared = []
    for i, (rows, prefix, cols) in enumerate(windows):
        treated = units.treated[rows]
        observed = treated.astype(float) @ cols
        n, n1 = len(rows), int(treated.sum())
        if prefix is not None and not _exact(n, n1):
            shared.append((i, (n, n1, cols), observed))
            continue
        assign, exact = _assignments(n, n1, permutations, seed)
        sums = np.concatenate([assign[j: j + CHUNK].astype(float) @ cols for j in range(0, len(assign), CHUNK)])
        out[i] = (sums, observed, exact)
    for (i, _, observed), sums in zip(shared, prefix_treated_sums([w for _, w, _ in shared], permutations, seed)):
        out[i] = (sums, observed, False)
    return out


def _differences(sums: np.ndarray, total: np.ndarray, n: int, n1: int) -> np.ndarray:
    """Signed differences in means (treated - control) from the treated sums (as the statistic's own
    formula computes them)."""
    return sums / n1 - (total - sums) / (n - n1)


class _WindowOutcome:
    """What the outcome's test in one window gives at every level: the estimate, the Neyman standard
    error, the p-value, and p(tau0) for the inversion. For the difference in means p(tau0) needs
    only two vectors (and the interval at any level is a threshold on their step table,
    ``ShiftedDifference.accepted_hull``), so the record stays small enough to keep on the design."""

    def __init__(self, y: np.ndarray, treated: np.ndarray, statistic: str, exact: bool, assignments: int,
                 p: float, statistic_value: float, shifted: ShiftedDifference | None = None,
                 test: RandomizationTest | None = None):
        y1, y0 = y[treated], y[~treated]
        self.estimate = float(y1.mean() - y0.mean())
        self.se = float(np.sqrt(y1.var(ddof=1) / len(y1) + y0.var(ddof=1) / len(y0)))
        self.statistic, self.exact, self.assignments = statistic, exact, assignments
        self.p, self.statistic_value = p, statistic_value
        self.shifted = shifted
        self.p_value_shifted = shifted.p_value_shifted if shifted is not None else test.p_value_shifted
        self.steps = test.steps if test is not None else (lambda: None)   # where p(tau0) can change
        # other statistics hold the assignments: kept on the design (for a level change) while small
        self.keep = shifted is not None or test.assignments.nbytes <= KEEP_ASSIGNMENTS_BYTES

    @classmethod
    def from_sums(cls, y, treated, sums, observed, exact) -> "_WindowOutcome":
        """From the treated sums of (y, T) over the assignments (difference in means)."""
        n, n1 = len(y), int(treated.sum())
        total = np.array([y.sum(), float(n1)])
        null = _differences(sums, total, n, n1)
        obs = _differences(observed, total, n, n1)
        shifted = ShiftedDifference(null[:, 0], null[:, 1], float(obs[0]), float(obs[1]), exact)
        return cls(y, treated, "difference in means", exact, len(sums), p_value(abs(obs[0]), np.abs(null[:, 0]), exact),
                   abs(float(obs[0])), shifted=shifted)


def _outcome_columns(units: _Units, rows: np.ndarray) -> np.ndarray:
    return np.column_stack([units.y[rows], units.treated[rows].astype(float)])


def _window_outcome(design, units: _Units, outcome: str, span, statistic: str, permutations: int,
                    seed) -> _WindowOutcome:
    key = ("local randomization window", outcome, span, statistic, permutations, seed)
    found = design._inference.get(key)
    if found is None:
        rows, prefix = _window_rows(units, span)
        y, treated = units.y[rows], units.treated[rows]
        if statistic == "difference in means":
            [(sums, observed, exact)] = _treated_sums(units, [(rows, prefix, _outcome_columns(units, rows))],
                                                      permutations, seed)
            found = _WindowOutcome.from_sums(y, treated, sums, observed, exact)
        else:
            n, n1 = len(rows), int(treated.sum())
            if prefix is not None and not _exact(n, n1):
                assign, exact = prefix_assignments(n, n1, permutations, seed), False
            else:
                assign, exact = _assignments(n, n1, permutations, seed)
            test = RandomizationTest(y, treated, statistic, assign, exact)
            found = _WindowOutcome(y, treated, statistic, exact, len(assign), test.p_value(y), test.observed(y),
                                   test=test)
        if found.keep:
            design._inference[key] = found
    return found


def _outcome_row(part: _WindowOutcome, level: float) -> dict:
    estimate, se, p = part.estimate, part.se, part.p
    z = float(special.ndtri(0.5 + level / 2.0))   # = stats.norm.ppf, without its checks
    if part.shifted is not None:
        # the difference in means: p(tau0) is a step function whose steps are known, so the interval is
        # exact at any level (a threshold on the kept step table)
        (low, high), contiguous = part.shifted.accepted_hull(1.0 - level)
    else:
        # other statistics recompute the test at each tau0: a grid, then bisection at each end
        (low, high), contiguous = invert(part.p_value_shifted, estimate, se if se > 0 else 1.0, 1.0 - level,
                                         points=33, refine=16, steps=part.steps())
    n = part.assignments
    return {"estimate": estimate, "statistic_value": part.statistic_value, "p_value": p,
            "p_value_std_error": 0.0 if part.exact else float(np.sqrt(p * (1 - p) / n)),
            "exact": part.exact, "assignments": n, "ci_low": low, "ci_high": high, "contiguous": contiguous,
            "neyman_std_error": se, "neyman_ci_low": estimate - z * se, "neyman_ci_high": estimate + z * se}


def _balance_rows(design, units: _Units, outcome: str, widths: list[float], permutations: int,
                  seed) -> list[dict]:
    """The balance of each nested window: it depends on neither the level, the statistic nor a given
    window, so it is kept on the design (a board's level change reuses it). The same pass over the
    draws gives each window's difference-in-means test of the outcome, kept for the main result and
    the sensitivity over windows."""
    key = ("local randomization balance", outcome, tuple(units.covariates), tuple(widths), permutations, seed)
    found = design._inference.get(key)
    if found is None:
        rows, outcomes = _nested_balance(units, widths, permutations, seed)
        for span, part in outcomes.items():
            design._inference[("local randomization window", outcome, span, "difference in means", permutations,
                               seed)] = part
        found = design._inference[key] = rows
    return found


def _nested_balance(units: _Units, widths: list[float], permutations: int,
                    seed) -> tuple[list[dict], dict]:
    """The balance table of the nested windows, and each window's outcome test (difference in means).

    Balance uses the difference in means whatever the outcome's statistic (convention), so that the
    chosen window depends on the covariates only. Every distinct window is one entry of a single pass
    over the draws, its columns the covariates observed on all its units, the outcome and the
    treatment indicator; a covariate missing on some units of a window is tested on the units that
    have it (its own draws)."""
    names = list(units.covariates)
    spans = []
    if names:      # without covariates there is no balance to test (and the outcome is tested on demand)
        for span in dict.fromkeys(units.span(-w, w) for w in widths):
            n_below, n_above = units.counts(span)
            if min(n_below, n_above) >= 1:
                spans.append(span)
    windows, partial = [], []
    for span in spans:
        rows, prefix = _window_rows(units, span)
        complete = [c for c in names if not np.isnan(units.covariates[c][rows]).any()]
        cols = np.column_stack([*(units.covariates[c][rows] for c in complete), _outcome_columns(units, rows)])
        windows.append((rows, prefix, cols))
        partial.append([c for c in names if c not in complete])
    results = _treated_sums(units, windows, permutations, seed)
    by_span, outcomes = {}, {}
    for span, (rows, _, cols), (sums, observed, exact), missing in zip(spans, windows, results, partial):
        treated = units.treated[rows]
        n, n1 = len(rows), int(treated.sum())
        total = cols.sum(axis=0)
        null, obs = _differences(sums, total, n, n1), _differences(observed, total, n, n1)
        complete = [c for c in names if c not in missing]
        p_values = {c: p_value(abs(obs[j]), np.abs(null[:, j]), exact) for j, c in enumerate(complete)}
        p_values.update(_partial_balance(units, rows, missing, permutations, seed))
        best = (np.nan, None)
        for name in names:
            if name in p_values and not p_values[name] >= best[0]:   # also replaces nan
                best = (p_values[name], name)
        by_span[span] = best
        if min(n1, n - n1) >= 2:
            outcomes[span] = _WindowOutcome.from_sums(units.y[rows], treated, sums[:, -2:], observed[-2:], exact)
    table = []
    for w in widths:
        span = units.span(-w, w)
        n_below, n_above = units.counts(span)
        p_min, worst = by_span.get(span, (np.nan, None))
        table.append({"half_width": w, "n_below": n_below, "n_above": n_above, "balance_p_value": p_min,
                      "least_balanced": worst})
    return table, outcomes


def _partial_balance(units: _Units, rows: np.ndarray, names: list[str], permutations: int, seed) -> dict:
    """Balance p-values of covariates missing on some units of the window, each on the units that have
    it (covariates present on the same units share their draws)."""
    by_rows: dict[bytes, list] = {}
    for name in names:
        z = units.covariates[name]
        ok = np.sort(rows[~np.isnan(z[rows])])
        below = int(np.sum(~units.above[ok]))
        if min(below, len(ok) - below) >= 1:
            by_rows.setdefault(ok.tobytes(), [ok, []])[1].append(name)
    p_values = {}
    for ok, group in by_rows.values():
        treated = units.treated[ok]
        assign, exact = _assignments(len(ok), int(treated.sum()), permutations, seed)
        columns = [units.covariates[name][ok] for name in group]
        for name, z, null in zip(group, columns, differences_in_means(assign, columns)):
            observed = float(statistic_values("difference in means", treated[None, :], z)[0])
            p_values[name] = p_value(observed, null, exact)
    return p_values


def _sequence(units: _Units, candidates) -> list[float]:
    if candidates is not None:
        widths = sorted(float(w) for w in candidates)
        if not widths or not all(np.isfinite(w) and w > 0 for w in widths):
            raise InvalidOptionError(f"`candidates` must be positive half-widths; got {shown(candidates)}. "
                                     "Pass e.g. candidates=[0.5, 1.0, 1.5].")
        return widths
    first = units.half_width_for(FIRST_WINDOW_UNITS)
    if not np.isfinite(first):
        first = units.half_width_for(MIN_UNITS)
    if not np.isfinite(first):
        raise WindowTooSmallError(f"`window` must hold at least {MIN_UNITS} units on each side of the cutoff; "
                                  "got fewer on one side in all the data. Local randomization needs more "
                                  "units near the cutoff.")
    reach = min(-units.lowest, units.highest)
    widths = [first * (1 + 0.5 * j) for j in range(WINDOW_STEPS)]
    return [w for w in widths if w <= reach] or [first]


def _resolve_window(window, cutoff: float) -> tuple[float, float] | None:
    """None, or (low, high) relative to the cutoff."""
    if window is None:
        return None
    if isinstance(window, Real) and not isinstance(window, bool) and np.isfinite(window) and window > 0:
        return (-float(window), float(window))
    if (isinstance(window, (tuple, list)) and len(window) == 2
            and all(isinstance(v, Real) and not isinstance(v, bool) and np.isfinite(v) for v in window)
            and window[0] < cutoff <= window[1]):
        return (float(window[0]) - cutoff, float(window[1]) - cutoff)
    raise InvalidOptionError(f"`window` must be None, a positive half-width, or a pair (low, high) of scores "
                             f"with low < cutoff <= high; got {shown(window)}. Pass e.g. window=0.5 or "
                             f"window=({cutoff - 0.5:g}, {cutoff + 0.5:g}).")


def local_randomization(design, outcome=None, *, window=None, statistic="difference in means",
                        permutations=10_000, seed=None, level=0.95, covariates=None, candidates=None,
                        balance_threshold=BALANCE_THRESHOLD) -> LocalRandomization:
    """Local randomization inference for ``Design.local_randomization`` (see its docstring)."""
    outcome = design._outcome(outcome)
    statistic = _check_statistic(statistic)
    permutations = _check_count("permutations", permutations, 99)
    level = check_level(level)
    balance_threshold = check_level(balance_threshold, "balance_threshold")
    if seed is None:    # draw one and record it, so that the result can be reproduced
        seed = int(np.random.SeedSequence().entropy % (2 ** 63))
    seed = _check_count("seed", seed, 0)
    units = copy.copy(_kept_units(design, outcome))
    if covariates is not None:
        names = (covariates,) if isinstance(covariates, str) else tuple(covariates)
        unknown = [c for c in names if c not in units.covariates]
        if unknown:
            raise InvalidOptionError(f"`covariates` must be covariates declared in Design(...) (other than the "
                                     f"outcome); got {shown(unknown)}. Declare them with covariates=[...].")
        units.covariates = {c: units.covariates[c] for c in names}
    given = _resolve_window(window, design.cutoff)
    widths = _sequence(units, candidates)
    rows = _balance_rows(design, units, outcome, widths, permutations, seed)
    windows = pd.DataFrame(rows, columns=["half_width", "n_below", "n_above", "balance_p_value",
                                          "least_balanced"])
    passes = windows["balance_p_value"] >= balance_threshold
    windows["passes"] = passes
    windows["nested_pass"] = passes.cummin()   # it and every smaller window pass
    warnings = []
    if given is None:
        if not units.covariates:
            raise NoBalancedWindowError("`window` must be given when the design has no covariates; got None. "
                                        "Declare covariates=[...] in Design(...) for the choice by balance, or "
                                        "pass window=half-width.")
        if not windows["nested_pass"].iloc[0]:
            raise NoBalancedWindowError(
                f"`window` must be given: the smallest window (half-width {widths[0]:.4g}) already has a minimum "
                f"balance p-value of {windows['balance_p_value'].iloc[0]:.3g} < {balance_threshold:g}; got no "
                "balanced window. Inspect the covariates near the cutoff, or pass window=half-width (its result's "
                "`windows` table lists the balance p-values of the sequence).")
        chosen = int(np.flatnonzero(windows["nested_pass"])[-1])
        low, high = -widths[chosen], widths[chosen]
        rule = "covariate balance"
        if chosen == len(widths) - 1:
            warnings.append("Every window in the sequence passed the balance check: the chosen window is the "
                            "largest one tried, not a data-determined limit. Pass candidates=[...] to go further.")
    else:
        low, high = given
        rule = "given"
        chosen = int(np.searchsorted(widths, max(-low, high), side="right")) - 1
    windows["chosen"] = np.arange(len(widths)) == chosen if given is None else False
    span = units.span(low, high)
    n_below, n_above = units.counts(span)
    if min(n_below, n_above) < MIN_UNITS:
        need = units.half_width_for(MIN_UNITS)
        fix = (f"Use a window of half-width at least {need:.4g}" if np.isfinite(need)
               else "There are too few units near the cutoff for this analysis")
        raise WindowTooSmallError(f"`window` must hold at least {MIN_UNITS} units on each side of the cutoff; "
                                  f"got {n_below} below and {n_above} above. {fix}.")
    main = _outcome_row(_window_outcome(design, units, outcome, span, statistic, permutations, seed), level)
    if not main["contiguous"]:
        warnings.append("The values not rejected by the randomization test are not contiguous; the interval "
                        "reported is their hull.")
    if not main["exact"]:
        warnings.append(f"Monte Carlo p-value from {main['assignments']:,} random assignments (simulation "
                        f"standard error {main['p_value_std_error']:.2g}) with seed {seed}; the same seed reproduces it.")
    if design.takeup:
        warnings.append(f"The design is fuzzy: this is the effect of being assigned (the side of the cutoff) on "
                        f"{outcome!r}, not of take-up.")
    if design.weights is not None:
        warnings.append("Sampling weights are ignored: every unit in the window counts once.")
    if design.cluster is not None:
        warnings.append("Units are randomized one by one; clusters are ignored by this assignment model.")

    def sensitivity() -> pd.DataFrame:
        out = []
        last = min(len(widths), max(chosen, 0) + 1 + SENSITIVITY_EXTRA)
        for w in widths[:last]:
            m = units.span(-w, w)
            counts = units.counts(m)
            if min(counts) < MIN_UNITS:
                continue
            r = _outcome_row(_window_outcome(design, units, outcome, m, statistic, permutations, seed), level)
            out.append({"half_width": w, "n_below": counts[0], "n_above": counts[1],
                        **{k: r[k] for k in ("estimate", "p_value", "ci_low", "ci_high", "neyman_ci_low",
                                             "neyman_ci_high")}})
        return pd.DataFrame(out)

    return LocalRandomization(
        outcome=outcome, statistic=statistic, window=(low + design.cutoff, high + design.cutoff),
        window_rule=rule, estimate=main["estimate"], statistic_value=main["statistic_value"],
        p_value=main["p_value"], p_value_std_error=main["p_value_std_error"], exact=main["exact"],
        assignments=main["assignments"], conf_int=(main["ci_low"], main["ci_high"]), level=level,
        n_below=n_below, n_above=n_above, neyman_std_error=main["neyman_std_error"],
        neyman_conf_int=(main["neyman_ci_low"], main["neyman_ci_high"]), balance_threshold=balance_threshold,
        windows=windows, score=design.score, cutoff=design.cutoff, treated=design.treated, seed=seed,
        warnings=tuple(warnings), sensitivity_fn=sensitivity)
