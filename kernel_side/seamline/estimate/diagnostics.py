"""Validity diagnostics of a cutoff design: manipulation, balance, sensitivity, placebos, donut,
binned scatter, score profile, and a design-level checks summary (METHODS sections 8, 9, 13).

Each function takes a Design and returns a frozen result from seamline.results.diagnostics (the
score profile lives in seamline.estimate.score_profile; the checks' rows in .check_rows). Row-level
estimates are ordinary ``design.fit`` calls, so every number here equals the fit a user would run.
"""
from __future__ import annotations

import inspect
import math

import numpy as np
import pandas as pd
from scipy import stats

from .. import streaming_diagnostics as streamed
from ..core.binning import binned_means
from ..core.density import density_test as core_density_test
from ..core.density import with_level as density_at_level
from ..core.density_sample import array_std
from ..errors import (InvalidOptionError, OneSidedDataError, SeamlineError, TooFewDistinctValuesError,
                      shown)
from ..options import BIN_METHODS, BIN_RULES, DENSITY_METHODS, check_level, check_option
from ..results.diagnostics import (Balance, Bins, Checks, DensityTest, Donut, Placebo, ScoreProfile,
                                   Sensitivity, fit_row, holm)
from .check_rows import ALPHA, check_rows
from .balance_joint import variance_option, joint_test
# score_profile is looked up here by Design._diagnostic and cache_key, like every diagnostic
from .score_profile import _clean_score, _sorted_score, score_profile  # noqa: F401

SCALE_GRID = (0.5, 0.75, 1.0, 1.25, 1.5, 2.0)          # common practice (METHODS 13.4)
PLACEBO_QUANTILES = (0.2, 0.4, 0.6, 0.8)                # convention (METHODS 13.2)
DONUT_FRACTIONS = (0.0, 0.05, 0.1, 0.15, 0.2, 0.25)     # convention: radii as shares of the bandwidth
MIN_PLACEBO_SIDE = 20                                   # convention: observations needed on each side
REFERENCE_LEVEL = 0.95      # density tests are computed at this level and re-reported at others


def _frozen_value(value):
    """A hashable stand-in for an argument value (lists and arrays become tuples); TypeError if none."""
    if isinstance(value, np.ndarray):
        value = value.tolist()
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, (list, tuple)):
        return tuple(_frozen_value(v) for v in value)
    if isinstance(value, dict):
        return tuple(sorted((k, _frozen_value(v)) for k, v in value.items()))
    hash(value)
    return value


def _fit_defaults() -> dict:
    from .design import Design
    return {name: par.default for name, par in inspect.signature(Design.fit).parameters.items()
            if par.kind is inspect.Parameter.KEYWORD_ONLY}


def cache_key(name: str, args: tuple, kwargs: dict):
    """The key under which a Design caches diagnostic ``name`` called with ``args`` and ``kwargs``.

    Arguments are bound to the function's signature with its defaults filled in, so
    ``density_test()`` and ``density_test("local-cdf", level=0.95)`` share a key; extra keyword
    options equal to ``Design.fit``'s defaults are left out for the same reason. None when an
    argument is not hashable even after turning lists and arrays into tuples (no caching then).
    """
    func = globals()[name]
    try:
        bound = inspect.signature(func).bind(None, *args, **kwargs)
    except TypeError:
        return None       # let the call itself raise its usual error
    bound.apply_defaults()
    defaults = _fit_defaults()
    parts = []
    params = inspect.signature(func).parameters
    for arg, value in list(bound.arguments.items())[1:]:
        if params[arg].kind is inspect.Parameter.VAR_KEYWORD:
            value = {k: v for k, v in value.items()
                     if not (k in defaults and _same(v, defaults[k]))}
        parts.append((arg, value))
    try:
        return (name, _frozen_value(parts))
    except TypeError:
        return None


def _same(a, b) -> bool:
    try:
        return type(a) is type(b) and bool(a == b)
    except (TypeError, ValueError):
        return False


# ---------------------------------------------------------------------------------------------
def density_test(design, method: str = "local-cdf", *, level: float = 0.95, **options) -> DensityTest:
    """Manipulation test of the score's density at the cutoff (see DensityTest)."""
    method = check_option("method", method, DENSITY_METHODS)
    checked = check_level(level)
    if checked != REFERENCE_LEVEL:
        # the level changes only the intervals: re-report the (cached) test at the reference level
        base = design.density_test(method, level=REFERENCE_LEVEL, **options)
        est = density_at_level(base.estimate, checked)
    elif design.streamed:
        # the bounded-memory route: only the sorted score is gathered (seamline.streaming_diagnostics)
        est = streamed.density_test(design._data, method, dict(options, level=level))
    else:
        data = design._data
        if method == "local-cdf" and data.weights is None and data.cluster_codes is None:
            # every row with a score, already sorted for the fits: the core need not sort again,
            # and the design's kept sorted score is read in place (the core copies nothing)
            rows = data.sorted_rows()[0]
            own = data._parent is None and rows is data._score_order()
            x = data._ordered_score() if own else data.arrays[design.score][rows]
        elif (method == "binned" and "bin_width" not in options and data.weights is None
              and data.cluster_codes is None and data._parent is None
              and not _has_nan(data.arrays[design.score])):
            # the kept sorted score, and the default bin width from the score in input order (the
            # sd numpy gives, chunk by chunk): the same test without a cleaned copy or a sort
            raw = data.arrays[design.score]
            options = dict(options, bin_width=float(2.0 * array_std(raw) / math.sqrt(raw.size)))
            x = data._ordered_score()
        else:
            x = _clean_score(design)
        est = core_density_test(x, design.cutoff, method=method, level=level, **options)
    warnings = []
    if est.p_value < ALPHA:
        warnings.append(f"The density of {design.score!r} jumps at the cutoff (p = {est.p_value:.3f}): evidence of "
                        "sorting around the cutoff, which threatens the design. Investigate how the score is set.")
    if est.tie_share > 0.5:
        warnings.append(f"{est.tie_share:.0%} of score values are tied (a discrete score): density tests assume a "
                        "continuous score; read the test with care and inspect the histogram.")
    if method == "binned":
        warnings.append("The binned test uses a rule-of-thumb bandwidth; check the histogram and try other "
                        "bandwidths (the rule can over-reject with heavy-tailed scores).")
    return DensityTest(method=method, score=design.score, cutoff=design.cutoff, statistic=float(est.statistic),
                       p_value=float(est.p_value), density_below=float(est.density_below),
                       density_above=float(est.density_above), ci_below=tuple(est.ci_below),
                       ci_above=tuple(est.ci_above), bandwidth=tuple(est.bandwidth), n_used=tuple(est.n_used),
                       n_total=(int(est.n_below), int(est.n_above)), level=level, tie_share=float(est.tie_share),
                       estimate=est, warnings=tuple(warnings))


# ---------------------------------------------------------------------------------------------
def _window_mean(design, column: str, h: tuple[float, float]) -> tuple[float, float]:
    """Mean of ``column`` on each side within the bandwidths (weighted by the design's weights)."""
    data = design._data
    if data.cluster_codes is None and data._only is None:
        # the covariate's prepared sides hold exactly these rows, sorted by distance: the means are
        # of their first rows, with no pass over every row (which, at 1e7, costs a fit)
        prep = data.prepare((column,))
        out = []
        for side, bw in ((prep.below, h[0]), (prep.above, h[1])):
            rows = slice(0, side.moments.count(bw))
            if rows.stop == 0:
                out.append(float("nan"))
                continue
            v = side.values[rows, 0]
            mean = float(np.mean(v) if side.weights is None else np.average(v, weights=side.weights[rows]))
            out.append(mean + float(side.offsets[0]))
        return out[0], out[1]
    x = design._data.arrays[design.score] - design.cutoff
    v = design._data.arrays[column]
    w = design._data.weights
    out = []
    for inside in ((x < 0) & (x >= -h[0]), (x >= 0) & (x <= h[1])):
        ok = inside & ~np.isnan(v)
        if w is not None:
            ok &= ~np.isnan(w) & (w > 0)
        out.append(float(np.average(v[ok], weights=None if w is None else w[ok])) if ok.any() else float("nan"))
    return out[0], out[1]


def balance(design, covariates=None, *, bandwidth="own", **fit_options) -> Balance:
    """Each pre-treatment covariate as the outcome of the same design (placebo outcomes).

    bandwidth : "own" (each covariate's own data-driven bandwidth, using ``fit_options['rule']`` or
        "mse"), "main" (the main outcome's bandwidth), or a number / pair in score units.
    """
    names = design.covariates if covariates is None else tuple([covariates] if isinstance(covariates, str)
                                                                else covariates)
    if not names:
        raise InvalidOptionError("`covariates` must name pre-treatment columns; got none. Declare them with "
                                 "Design(..., covariates=[...]).")
    unknown = [c for c in names if c not in design.covariates]
    if unknown:
        raise InvalidOptionError(f"`covariates` must be declared in the design; got {shown(unknown)}. Add them to "
                                 "Design(..., covariates=[...]) so they are validated once.")
    for name in names:
        values = design._data.arrays[name]
        if np.nanmin(values) == np.nanmax(values):      # constant (no n-long temporary, unlike nanstd)
            raise InvalidOptionError(f"`covariates` must vary; got {shown(name)} constant "
                                     f"({np.nanmax(values):g} everywhere). Drop it from the balance checks.")
    fit_options = {k: v for k, v in fit_options.items() if k not in ("adjust", "outcome")}
    rule = fit_options.pop("rule", "mse")
    if isinstance(bandwidth, str) and bandwidth == "main":
        h = design.fit(**fit_options, bandwidth=rule).bandwidth
        source, bw = "the main outcome's", h
    elif isinstance(bandwidth, str) and bandwidth == "own":
        source, bw = f"each covariate's own ({rule})", rule
    elif isinstance(bandwidth, str):
        raise InvalidOptionError(f'`bandwidth` must be "own", "main", a number or a pair; got {shown(bandwidth)}. '
                                 'Use bandwidth="own".')
    else:
        source, bw = "fixed by the user", bandwidth
    fits = [design.fit(c, bandwidth=bw, **fit_options) for c in names]
    p_robust = np.array([f.robust_p_value for f in fits])
    p_holm = holm(p_robust)
    rows = []
    for name, f, ph in zip(names, fits, p_holm):
        lo, hi = f.robust_conf_int
        mb, ma = _window_mean(design, name, f.bandwidth)
        rows.append({"covariate": name, "estimate": f.estimate, "std_error": f.std_error,
                     "robust_estimate": f.bias_corrected_estimate, "robust_std_error": f.robust_std_error,
                     "ci_low": lo, "ci_high": hi, "p_value": f.robust_p_value, "p_value_holm": ph,
                     "bandwidth_below": f.bandwidth[0], "bandwidth_above": f.bandwidth[1],
                     "mean_below": mb, "mean_above": ma, "n_below": f.n_used[0], "n_above": f.n_used[1]})
    stat, df, p_joint, n_joint = joint_test(design, names, fits)
    warnings = []
    flagged = [r["covariate"] for r in rows if r["p_value_holm"] < ALPHA]
    if flagged:
        warnings.append(f"Covariates jump at the cutoff (Holm-adjusted p < {ALPHA}): {flagged}. Pre-treatment "
                        "imbalance suggests sorting or a compound treatment; covariate adjustment cannot "
                        "repair an invalid design.")
    if np.isfinite(p_joint) and p_joint < ALPHA:
        warnings.append(f"The joint test rejects balance of all covariates (p = {p_joint:.3f}).")
    return Balance(rows=tuple(rows), joint_statistic=stat, joint_df=df, joint_p_value=p_joint, joint_n=n_joint,
                   bandwidth_source=source, level=fits[0].level, fits=tuple(fits), warnings=tuple(warnings))


# ---------------------------------------------------------------------------------------------
def sensitivity(design, bandwidths=None, kernels=None, degrees=None, **fit_options) -> Sensitivity:
    """Re-estimate over a grid of bandwidths (and kernels, degrees); each row is a ``design.fit`` call."""
    outcome = fit_options.pop("outcome", None)
    base_rule = fit_options.pop("bandwidth", "mse")
    kernels = [fit_options.pop("kernel", "triangular")] if kernels is None else list(kernels)
    degrees = [fit_options.pop("degree", 1)] if degrees is None else list(degrees)
    fit_options.pop("kernel", None)
    fit_options.pop("degree", None)
    rows, fits, warnings = [], [], []
    selected = None
    for kernel in kernels:
        for degree in degrees:
            main = design.fit(outcome, bandwidth=base_rule, kernel=kernel, degree=degree, **fit_options)
            if selected is None:
                selected = main.bandwidth
            if bandwidths is None:
                grid = [(f"x{m:g}", (main.bandwidth[0] * m, main.bandwidth[1] * m)) for m in SCALE_GRID]
                rules = ["mse", "mse-split", "coverage"]
                if degree == 1 and fit_options.get("derivative", 0) == 0:
                    rules.append("ik")
                grid += [(r, r) for r in rules]
            else:
                grid = [(str(b), b) for b in bandwidths]
            for label, bw in grid:
                try:
                    f = design.fit(outcome, bandwidth=bw, kernel=kernel, degree=degree, **fit_options)
                except TooFewDistinctValuesError as exc:
                    if bandwidths is not None:
                        raise
                    warnings.append(f"Row {label} ({kernel}, degree {degree}) skipped: {exc}")
                    continue
                rows.append({"label": label, **fit_row(f)})
                fits.append(f)
    return Sensitivity(rows=tuple(rows), outcome=fits[0].outcome, selected=selected, fits=tuple(fits),
                       warnings=tuple(warnings))


# ---------------------------------------------------------------------------------------------
def placebo_cutoffs(design, cutoffs=None, **fit_options) -> Placebo:
    """Estimates at fake cutoffs using only the observations on one side of the true cutoff."""
    outcome = design._outcome(fit_options.pop("outcome", None))
    fit_options.pop("adjust", None)
    user = cutoffs is not None
    ladder = _placebo_ladder(design, None if cutoffs is None else [float(c) for c in np.atleast_1d(cutoffs)])
    rows, fits, skipped = [], [], []
    for c, side, n_left, n_right, (lo, hi) in ladder:
        if min(n_left, n_right) < MIN_PLACEBO_SIDE:
            msg = (f"placebo cutoff {c:g} leaves {n_left} and {n_right} observations on its two sides within the "
                   f"{side} side (at least {MIN_PLACEBO_SIDE} each are needed)")
            if user:
                raise OneSidedDataError(f"`cutoffs` must leave at least {MIN_PLACEBO_SIDE} observations on each side "
                                        f"of a placebo; got {msg}. Choose a value well inside [{lo:g}, {hi:g}].")
            skipped.append(msg)
            continue
        sub = _placebo_design(design, side, c, outcome)
        try:
            f = sub.fit(**fit_options)
        except SeamlineError as exc:
            if user:
                raise
            skipped.append(f"placebo cutoff {c:g}: {exc}")
            continue
        rows.append({"cutoff": c, "side": side, **fit_row(f)})
        fits.append(f)
    warnings = []
    rejected = [r["cutoff"] for r in rows if r["robust_p_value"] < ALPHA]
    if rows and len(rejected) > max(1, ALPHA * len(rows) * 3):
        warnings.append(f"{len(rejected)} of {len(rows)} placebo cutoffs show a significant jump ({rejected}); "
                        "the outcome may jump away from the cutoff too, or the specification is too rigid.")
    return Placebo(rows=tuple(rows), outcome=outcome, skipped=tuple(skipped), fits=tuple(fits),
                   warnings=tuple(warnings))


def _placebo_ladder(design, requested: list[float] | None) -> list[tuple]:
    """(cutoff, side, observations left and right of it within the side, the side's score range)
    for each placebo cutoff: the requested ones, or by default the quantiles PLACEBO_QUANTILES of
    each side's scores. Read off the design's sorted score; the default ladder is kept on the
    design (it depends on the score alone, not on any fit option)."""
    if requested is None and ("placebo ladder",) in design._diagnostics:
        return design._diagnostics[("placebo ladder",)]
    xs = _sorted_score(design)
    split = int(np.searchsorted(xs, design.cutoff, side="left"))
    side_scores = {"below": xs[:split], "above": xs[split:]}
    default = requested is None
    if default:
        # numpy's quantiles of each side (sorting does not change them)
        requested = [float(v) for part in side_scores.values() if len(part)
                     for v in np.quantile(part, PLACEBO_QUANTILES)]
    ladder = []
    for c in requested:
        if c == design.cutoff:
            raise InvalidOptionError(f"`cutoffs` must differ from the true cutoff {design.cutoff:g}; got {c:g}. "
                                     "Placebo cutoffs lie strictly on one side.")
        side = "above" if c > design.cutoff else "below"
        score = side_scores[side]
        n_left = int(np.searchsorted(score, c, side="left"))
        span = (float(score[0]), float(score[-1])) if len(score) else (float("nan"), float("nan"))
        ladder.append((c, side, n_left, len(score) - n_left, span))
    if default:
        design._diagnostics[("placebo ladder",)] = ladder
    return ladder


def _placebo_design(design, side: str, c: float, outcome: str):
    """The design of one placebo cutoff, kept on ``design`` (``Design._placebos``) for the next call.

    It is one side of the design's own validated data, sharing its arrays and its sorted order
    (``DesignData.one_side``: no copy, no sort). Kept, it keeps its prepared sides, their moment
    tables, neighbour residuals and bandwidth selections, so the next ladder at another bandwidth
    (a board's slider) costs the placebo fits only, not their preparation.
    """
    from .design import Design
    key = (side, float(c), outcome)
    sub = design._placebos.get(key)
    if sub is None:
        sub = design._placebos[key] = Design(design._data.one_side(side, c), score=design.score, cutoff=c,
                                             outcome=outcome, treated=design.treated, cluster=design.cluster,
                                             weights=design.weights)
    return sub


def donut(design, radii=None, **fit_options) -> Donut:
    """Re-estimate excluding observations within each radius of the cutoff (bandwidth re-selected)."""
    outcome = fit_options.pop("outcome", None)
    fit_options.pop("donut", None)
    if radii is None:
        h = design.fit(outcome, **fit_options).bandwidth
        radii = [m * min(h) for m in DONUT_FRACTIONS]
    rows, fits = [], []
    for r in np.atleast_1d(radii):
        r = float(r)
        if not np.isfinite(r) or r < 0:
            raise InvalidOptionError(f"`radii` must be non-negative numbers; got {shown(r)}. Use e.g. radii=[0, 0.5, 1].")
        try:
            f = design.fit(outcome, donut=r, **fit_options)
        except OneSidedDataError as exc:
            raise OneSidedDataError(f"`radii` value {r:g} empties a side of the cutoff: {exc} Use a smaller radius.") from None
        rows.append({"radius": r, "n_excluded": f.n_donut, **fit_row(f)})
        fits.append(f)
    return Donut(rows=tuple(rows), outcome=fits[0].outcome, fits=tuple(fits))


# ---------------------------------------------------------------------------------------------
def bins(design, outcome=None, method: str = "equal-width", number=None, *, rule: str = "imse",
         scale: float = 1.0, global_degree: int | None = None, **fit_options) -> Bins:
    """Binned means for an RD plot plus the fitted local polynomial curves with CI bands."""
    method = check_option("method", method, BIN_METHODS)
    rule = check_option("rule", rule, BIN_RULES)
    outcome = design._outcome(outcome)
    level = fit_options.get("level", 0.95)
    # The binned means read the score, the outcome and the bin options only: kept on the design, so
    # bins at another bandwidth (a board's slider) redraw the fitted curves and nothing else.
    key = ("binned_means", outcome, method, _frozen_value(number), rule, float(scale), float(level))
    binned = design._diagnostics.get(key)
    if binned is None:
        options = dict(method=method, number=number, rule=rule, scale=scale, level=level)
        if design.streamed:
            try:   # the bounded-memory route: the sorted score in memory, the outcome in passes
                binned = streamed.binned_means(design._data, outcome, **options)
            except InvalidOptionError:
                if method != "equal-count":
                    raise
                # equal-count bounds inside a run of tied scores need the input order: gathered route
        if binned is None:
            x, y, w, ok = _bins_rows(design, outcome)
            data = design._data
            order = _sorted_positions(data, ok)
            # every row in the design's one sort: its sorted score is kept (the fit's preparation made it)
            sorted_score = data._ordered_score() if order is not None and order is data._score_order() else None
            binned = binned_means(x[ok], y[ok], design.cutoff, weights=None if w is None else w[ok], order=order,
                                  sorted_score=sorted_score, **options)
        design._diagnostics[key] = binned
    fit = design.fit(outcome, **fit_options)
    spec = design._spec(outcome, **_spec_options(fit, fit_options))
    engine, _, _, _ = design._engine(spec)
    lam = np.eye(engine.n_main)[0]
    variance = variance_option(fit) if fit.variance != "cluster" else "hc0"
    z = stats.norm.ppf(0.5 + level / 2)
    parts = []
    for sign, rel, fitted, se in engine.curve(lam, variance, design.cluster is not None):
        order = np.argsort(rel)
        parts.append(pd.DataFrame({"side": "below" if sign < 0 else "above", "x": design.cutoff + rel[order],
                                   "fit": fitted[order], "ci_low": fitted[order] - z * se[order],
                                   "ci_high": fitted[order] + z * se[order]}))
    curve = pd.concat(parts, ignore_index=True)
    global_frame = None
    if global_degree is not None:
        x, y, _, ok = _bins_rows(design, outcome)
        global_frame = _global_polynomial(x[ok], y[ok], design.cutoff, int(global_degree))
    number_used = tuple(int(v) for v in np.atleast_1d(binned.number)) if np.ndim(binned.number) else (
        int(binned.number), int(binned.number))
    return Bins(outcome=outcome, score=design.score, cutoff=design.cutoff, method=method, rule=binned.rule,
                number=number_used, level=level, binned=binned, curve_frame=curve, global_frame=global_frame,
                fit=fit, warnings=fit.warnings)


def _bins_rows(design, outcome: str) -> tuple:
    """(score, outcome, weights, rows kept) of the in-memory bins: rows with a score, an outcome and
    a positive weight (a slice when every row is kept)."""
    data = design._data
    x, y = data.arrays[design.score], data.arrays[outcome]
    w = data.weights
    if w is None and not (_has_nan(x) or _has_nan(y)):
        return x, y, w, slice(None)    # views, not copies (read only: the user's data is never modified)
    ok = ~np.isnan(x) & ~np.isnan(y)
    if w is not None:
        ok &= ~np.isnan(w) & (w > 0)
    return x, y, w, slice(None) if ok.all() else ok


def _has_nan(v: np.ndarray, chunk: int = 1 << 16) -> bool:
    """Any NaN, chunk by chunk (no n-long mask)."""
    return any(bool(np.isnan(v[s:s + chunk]).any()) for s in range(0, v.size, chunk))


def _sorted_positions(data, ok) -> np.ndarray | None:
    """Positions that sort the score of the rows ``ok`` selects, read off the design's one sort
    (None when that sort left out rows ``ok`` keeps: a missing cluster code)."""
    if data.cluster_codes is not None:
        return None
    rows = data.sorted_rows()[0]
    if isinstance(ok, slice):           # every row: the sorted rows are the positions
        return rows if len(rows) == data.n_rows else None
    position = np.empty(ok.size, dtype=np.int64)
    position[ok] = np.arange(np.count_nonzero(ok))
    return position[rows[ok[rows]]]


def _spec_options(fit, fit_options: dict) -> dict:
    """The resolve() keywords of a fit made with ``fit_options`` (so its cached engine is found)."""
    opts = dict(bandwidth="mse", kernel="triangular", degree=1, bias_degree=None, pilot_bandwidth=None,
                variance="bias-reduced", level=0.95, donut=0.0, derivative=0, adjust=False)
    opts.update({k: v for k, v in fit_options.items() if k in opts})
    return opts


def _global_polynomial(x, y, cutoff, degree, points: int = 60) -> pd.DataFrame:
    """Global polynomial on each side, for display only."""
    parts = []
    for side, mask in (("below", x < cutoff), ("above", x >= cutoff)):
        xs, ys = x[mask] - cutoff, y[mask]
        if len(np.unique(xs)) <= degree:
            continue
        scale = np.max(np.abs(xs)) or 1.0
        coef = np.polynomial.polynomial.polyfit(xs / scale, ys, degree)
        grid = np.linspace(xs.min(), xs.max(), points)
        parts.append(pd.DataFrame({"side": side, "x": cutoff + grid,
                                   "fit": np.polynomial.polynomial.polyval(grid / scale, coef)}))
    return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=["side", "x", "fit"])


# ---------------------------------------------------------------------------------------------
def checks(design, **fit_options) -> Checks:
    """Gather the flags a careful analyst would raise, each with its evidence (or why it is missing).
    The fit, density test, balance and score profile come from the design's caches (a board's
    panels share them); the rows are built by ``estimate.check_rows``."""
    def attempt(compute):
        try:
            return compute()
        except SeamlineError as exc:
            return str(exc)

    fit = attempt(lambda: design.fit(**fit_options))
    density = attempt(design.density_test)
    balance = attempt(lambda: design.balance(**{k: v for k, v in fit_options.items() if k != "bandwidth"})) \
        if design.covariates else None
    profile = attempt(lambda: design.score_profile(**fit_options))
    return check_rows(fit, density, balance, profile, adjust=bool(fit_options.get("adjust")))
