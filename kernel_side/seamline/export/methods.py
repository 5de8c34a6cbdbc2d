"""The methods paragraph: a fit and its diagnostics written as prose for a working paper.

Every number is formatted exactly as the tables format it (``format_number`` with the tables'
three decimals), so the paragraph and the tables agree digit for digit. The paragraph names the
published method behind each choice and ends with the cautions sentence every seamline table
carries.
"""
from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any

from ..results.fit import CAUTION
from ..results.inference import window_text   # the window as the result's own title prints it
from ..time_score import TIME_CAUTION
from .table_model import format_number

__all__ = ["methods_paragraph"]

DECIMALS = 3     # the tables' default (export.table_model.from_dataframe)
ALPHA = 0.05     # common practice: the 5% level for "significant"

_DEGREE_NAMES = {0: "local constant", 1: "local linear", 2: "local quadratic", 3: "local cubic",
                 4: "local quartic", 5: "local quintic", 6: "local sextic"}
_VARIANCE_TEXT = {
    "neighbors": "the nearest-neighbour residual variance estimator (three nearest neighbours on the same "
                 "side of the cutoff)",
    "hc0": "the heteroskedasticity-robust HC0 variance estimator",
    "hc1": "the heteroskedasticity-robust HC1 variance estimator",
    "hc2": "the heteroskedasticity-robust HC2 variance estimator",
    "hc3": "the heteroskedasticity-robust HC3 variance estimator",
    "bias-reduced": "the bias-reduced (HC2) variance estimator with t critical values on Bell-McCaffrey "
                    "degrees of freedom (Imbens and Kolesar 2016)",
}


def _n(value: float) -> str:
    return format_number(float(value), DECIMALS)


def _count(value: int) -> str:
    return f"{int(value):,}"


def _p(value: float) -> str:
    text = _n(value)
    if value == value and float(text) == 0.0:
        return f"p < {10 ** -DECIMALS:.{DECIMALS}f}"
    return f"p = {text}"


def _pair(values, unit: str = "") -> str:
    below, above = values
    if below == above:
        return f"{_n(below)}{unit} on both sides"
    return f"{_n(below)}{unit} below and {_n(above)}{unit} above the cutoff"


def _percent(level: float) -> str:
    return f"{100 * level:g}%"


def _bandwidth_sentence(fit) -> str:
    rule, h = fit.bandwidth_rule, fit.bandwidth
    scale = getattr(fit, "time_scale", None)
    units = f" (in units of {fit.score})" if scale is None else ""   # a date score: the unit follows each length
    if rule == "mse":
        return (f"The bandwidth is the common mean-squared-error-optimal bandwidth of Calonico, Cattaneo and "
                f"Titiunik (2014), {_pair(h, _unit(scale))}{units}.")
    if rule == "mse-split":
        return (f"The bandwidths are mean-squared-error optimal for each side separately (Calonico, Cattaneo "
                f"and Titiunik 2014): {_pair(h, _unit(scale))}{units}.")
    if rule == "coverage":
        return (f"The bandwidth minimises the coverage error of the robust confidence interval (Calonico, "
                f"Cattaneo and Farrell 2020): {_pair(h, _unit(scale))}{units}.")
    if rule == "ik":
        return f"The bandwidth is the Imbens and Kalyanaraman (2012) bandwidth, {_pair(h, _unit(scale))}{units}."
    return f"The bandwidth is fixed by the analyst at {_pair(h, _unit(scale))}{units}."


def _design_sentence(fit) -> str:
    what = "change in the slope" if fit.derivative == 1 else "jump"
    side = ("at or above the cutoff" if fit.treated == "above" else "below the cutoff")
    # The cutoff is written as the tables' titles write it (``:g``).
    scale = getattr(fit, "time_scale", None)
    dated = "" if scale is None else f" (a date score, measured in {scale.unit} from the cutoff date)"
    text = (f"We estimate the {what} in {fit.outcome} at the cutoff {fit.score} = {fit.cutoff_label}{dated}, "
            f"where units with a score {side} are assigned to treatment")
    if fit.kind == "fuzzy" and fit.first_stage is not None:
        text += (f". Take-up ({fit.first_stage.outcome}) is partial, so the design is fuzzy: the estimate is the "
                 f"ratio of the {what} in {fit.outcome} to the {what} in take-up, a local average effect for "
                 "units whose take-up follows their eligibility at the cutoff.")
    else:
        text += "; treatment follows assignment exactly (a sharp design)."
    return text


def _estimator_sentence(fit) -> str:
    name = _DEGREE_NAMES.get(fit.degree, f"degree-{fit.degree} local polynomial")
    text = (f"The estimator is a {name} regression (polynomial of degree {fit.degree}) fitted separately on "
            f"each side of the cutoff with a {fit.kernel} kernel")
    if fit.adjusted and fit.covariates:
        text += (f", adjusting for {', '.join(fit.covariates)} (Calonico, Cattaneo, Farrell and Titiunik 2019)")
    return text + "."


def _unit(scale) -> str:
    """" days" after a length of a date score (``_pair(h, _unit(scale))`` -> "41.5 days on both sides")."""
    return "" if scale is None else f" {scale.unit}"


def _bias_sentence(fit) -> str:
    name = _DEGREE_NAMES.get(fit.bias_degree, f"degree-{fit.bias_degree}")
    same = (" (equal to the main bandwidth, the default with clusters; Calonico, Cattaneo and Farrell 2018)"
            if getattr(fit, "n_clusters", None) and tuple(fit.pilot_bandwidth) == tuple(fit.bandwidth) else "")
    if getattr(fit, "pilot_rule", None) == "two-step":
        same = (", selected as MSE-optimal for the bias term by the two-step procedure of Calonico, Cattaneo "
                "and Titiunik (2014)")
    return (f"The bias correction uses a {name} fit (degree {fit.bias_degree}) with pilot bandwidth "
            f"{_pair(fit.pilot_bandwidth, _unit(getattr(fit, 'time_scale', None)))}{same}, and inference uses "
            f"robust bias-corrected confidence intervals (Calonico, Cattaneo and Titiunik 2014).")


def _variance_sentence(fit, weights: str | None) -> str:
    if fit.variance == "cluster":
        clusters = f" with {_count(fit.n_clusters)} clusters" if fit.n_clusters else ""
        text = f"Standard errors are cluster-robust{clusters}"
    else:
        text = f"Standard errors use {_VARIANCE_TEXT.get(fit.variance, f'the {fit.variance} variance estimator')}"
    if weights:
        text += f"; observations are weighted by {weights}"
    return text + "."


def _sample_sentence(fit) -> str:
    text = (f"The estimation uses {_count(fit.n_used[0])} observations below and {_count(fit.n_used[1])} above "
            f"the cutoff inside the bandwidth, out of {_count(fit.n_total[0])} and {_count(fit.n_total[1])} "
            f"usable observations")
    parts = []
    if fit.n_dropped:
        parts.append(f"{_count(fit.n_dropped)} rows with missing values were dropped")
    if fit.donut > 0:
        parts.append(f"{_count(fit.n_donut)} observations within {_n(fit.donut)} of the cutoff were excluded "
                     "(a donut)")
    return text + ("; " + " and ".join(parts) if parts else "") + "."


def _result_sentence(fit) -> str:
    what = "change in slope" if fit.derivative == 1 else "jump"
    lo, hi = fit.robust_conf_int
    subject = f"estimated effect (the ratio of the two {what}s)" if fit.kind == "fuzzy" else f"estimated {what}"
    text = (f"The {subject} is {_n(fit.estimate)} (standard error {_n(fit.std_error)}); the "
            f"bias-corrected estimate is {_n(fit.bias_corrected_estimate)} with robust standard error "
            f"{_n(fit.robust_std_error)}, robust {_percent(fit.level)} confidence interval "
            f"[{_n(lo)}, {_n(hi)}] and {_p(fit.robust_p_value)}.")
    fs = fit.first_stage
    if fs is not None:
        flo, fhi = fs.robust_conf_int
        text += (f" The first-stage {what} in take-up is {_n(fs.estimate)} (standard error {_n(fs.std_error)}, "
                 f"robust {_percent(fs.level)} confidence interval [{_n(flo)}, {_n(fhi)}]")
        if fit.first_stage_f is not None:
            text += f", F statistic {format_number(float(fit.first_stage_f), 1)}"
        text += ")."
        if fit.first_stage_f is not None and fit.first_stage_f < 10:
            text += (" The first stage is weak by the common F < 10 rule (Staiger and Stock 1997), so the ratio "
                     "estimate and its interval should be read with caution.")
    return text


def _density_sentence(d) -> str:
    method = ("the local polynomial density test of Cattaneo, Jansson and Ma (2020)" if d.method == "local-cdf"
              else "the binned density test of McCrary (2008)")
    finding = "evidence of" if d.p_value < ALPHA else "no evidence of"
    return (f"Using {method}, we find {finding} a discontinuity in the density of {d.score} at the cutoff "
            f"(statistic {_n(d.statistic)}, {_p(d.p_value)}).")


def _balance_sentence(b) -> str:
    rows = list(b.rows)
    k = len(rows)
    flagged = [r["covariate"] for r in rows if r["p_value_holm"] < ALPHA]
    smallest = min(r["p_value_holm"] for r in rows)
    noun = "covariate" if k == 1 else "covariates"
    if flagged:
        found = f"{len(flagged)} of them ({', '.join(flagged)}) jump significantly"
    else:
        found = "none jumps significantly" if k > 1 else "it does not jump significantly"
    text = (f"Treating the {k} pre-treatment {noun} ({', '.join(r['covariate'] for r in rows)}) as placebo "
            f"outcomes, {found} at the {100 * ALPHA:g}% level after Holm adjustment (smallest adjusted "
            f"{_p(smallest)})")
    if b.joint_p_value == b.joint_p_value:
        text += f"; the joint test of no jump in any covariate gives {_p(b.joint_p_value)}"
    return text + "."


def _sensitivity_sentence(s) -> str:
    rows = [r for r in s.rows if str(r.get("label", "")).startswith("x")] or list(s.rows)
    if not rows:
        return ""
    est = [r["estimate"] for r in rows]
    h = [r["bandwidth_below"] for r in rows] + [r["bandwidth_above"] for r in rows]
    labels = [r["label"] for r in rows]
    span = f"{labels[0][1:]} to {labels[-1][1:]} times the selected bandwidth" if labels[0].startswith("x") else \
        "the bandwidths in the sensitivity table"
    significant = sum(r["robust_p_value"] < ALPHA for r in rows)
    return (f"Across bandwidths from {_n(min(h))} to {_n(max(h))} ({span}), the estimate ranges from "
            f"{_n(min(est))} to {_n(max(est))}, and the robust interval excludes zero in {significant} of "
            f"{len(rows)} cases.")


def _placebo_sentence(p) -> str:
    rows = list(p.rows)
    if not rows:
        return ""
    significant = [r for r in rows if r["robust_p_value"] < ALPHA]
    cutoffs = ", ".join(_n(r["cutoff"]) for r in rows)
    return (f"At {len(rows)} placebo cutoffs ({cutoffs}), each estimated on one side of the true cutoff only, "
            f"{_how_many(len(significant))} a significant jump (robust p < {ALPHA:g}).")


def _how_many(k: int) -> str:
    return "none shows" if k == 0 else ("one shows" if k == 1 else f"{k} show")


def _donut_sentence(d) -> str:
    rows = [r for r in d.rows if r["radius"] > 0]
    if not rows:
        return ""
    est = [r["estimate"] for r in rows]
    return (f"Excluding observations within {_n(min(r['radius'] for r in rows))} to "
            f"{_n(max(r['radius'] for r in rows))} of the cutoff (donut estimates) gives estimates from "
            f"{_n(min(est))} to {_n(max(est))}.")


_DIAGNOSTIC_WRITERS = {
    "density": _density_sentence,
    "balance": _balance_sentence,
    "sensitivity": _sensitivity_sentence,
    "placebo": _placebo_sentence,
    "donut": _donut_sentence,
}




def _end(value: float) -> str:
    return "minus infinity" if value == float("-inf") else "plus infinity" if value == float("inf") else _n(value)


def _set(intervals) -> str:
    return " and ".join(f"[{_end(lo)}, {_end(hi)}]" for lo, hi in intervals)


def _bias_aware_sentence(b) -> str:
    bound = f"M = {_n(b.smoothness)}" + (f" on the outcome and {_n(b.takeup_smoothness)} on take-up"
                                         if b.takeup_smoothness is not None else "")
    rule = (" (a rule of thumb: the largest curvature of a global quartic fitted on each side)"
            if b.smoothness_rule == "rule of thumb" else "")
    interval = (f"[{_n(b.conf_int[0])}, {_n(b.conf_int[1])}]" if b.kind == "sharp" or len(b.intervals) == 1
                else _set(b.intervals))
    return (f"A bias-aware {_percent(b.level)} confidence interval (Armstrong and Kolesár 2018, 2020), valid "
            f"for any regression function whose first-order expansion at the cutoff errs by at most M x^2 / 2 "
            f"on each side, with {bound}{rule}, is {interval} (worst-case bias {_n(b.max_bias)}, bandwidth "
            f"{_pair(b.bandwidth)}, chosen to minimise the interval's length).")


def _weak_iv_sentence(w) -> str:
    from ..results.inference import SHAPE_WORDS
    return (f"The weak-instrument-robust {_percent(w.level)} confidence set of Feir, Lemieux and Marmer (2016), "
            f"which inverts the robust bias-corrected test of no jump in the outcome minus the effect times "
            f"take-up, is {_set(w.intervals)}: {SHAPE_WORDS[w.shape]}")


def _local_randomization_sentence(r) -> str:
    how = ("chosen by covariate balance as the largest window in which it and every smaller window have a "
           f"smallest balance p-value of at least {r.balance_threshold:g}" if r.window_rule == "covariate balance"
           else "set by the analyst")
    fuzzy = any(w.startswith("The design is fuzzy") for w in r.warnings)
    assigned = " (the effect of assignment to treatment, not of take-up)" if fuzzy else ""
    method = ("exact over all assignments" if r.exact else
              f"from {r.assignments:,} random assignments with seed {r.seed}")
    return (f"Treating units in the window {window_text(r.window, r.cutoff)} of {r.score} ({how}; "
            f"{_count(r.n_below)} below and {_count(r.n_above)} above the cutoff) as randomly assigned "
            f"(Cattaneo, Frandsen and Titiunik 2015), the difference in mean outcomes is {_n(r.estimate)}"
            f"{assigned}, "
            f"with a randomization {_p(r.p_value)} for the {r.statistic} statistic ({method}) and a "
            f"{_percent(r.level)} interval of [{_n(r.conf_int[0])}, {_n(r.conf_int[1])}] under a constant "
            "additive effect.")


_DIAGNOSTIC_WRITERS.update({"bias_aware": _bias_aware_sentence, "weak_iv": _weak_iv_sentence,
                            "local_randomization": _local_randomization_sentence})


def methods_paragraph(fit, *, diagnostics: Mapping[str, Any] | None = None, weights: str | None = None,
                      extra: Iterable[str] = ()) -> str:
    """Describe a fit and its diagnostics in prose, with the numbers the tables show.

    Parameters
    ----------
    fit : seamline.Fit
        The main estimate.
    diagnostics : mapping, optional
        Any of "density" (DensityTest), "balance" (Balance), "sensitivity" (Sensitivity),
        "placebo" (Placebo), "donut" (Donut), "bias_aware" (BiasAwareInterval), "weak_iv" (WeakIVSet),
        "local_randomization" (LocalRandomization); each present result adds its sentence.
    weights : str, optional
        Name of the weights column, if the design is weighted (a Fit does not record it).
    extra : sentences placed before the cautions (several cutoffs, subgroups, power:
        ``seamline.export.methods_designs``)

    Returns
    -------
    str
        One paragraph: design, estimator, bandwidth rule and values per side, bias correction,
        variance estimator, observations used, the estimate with its robust interval, the
        diagnostics' outcomes, and the cautions sentence.

    Examples
    --------
    >>> import seamline
    >>> from seamline.demo_data import sharp_scenario
    >>> s = sharp_scenario(n=2000, seed=1)
    >>> fit = seamline.Design(s.data, score=s.score, cutoff=s.cutoff, outcome=s.outcome[0]).fit()
    >>> methods_paragraph(fit).startswith("We estimate the jump")
    True
    """
    sentences = [_design_sentence(fit), _estimator_sentence(fit), _bandwidth_sentence(fit), _bias_sentence(fit),
                 _variance_sentence(fit, weights), _sample_sentence(fit), _result_sentence(fit)]
    for key, writer in _DIAGNOSTIC_WRITERS.items():
        result = (diagnostics or {}).get(key)
        if result is not None and getattr(result, "applies", True) is not False:
            sentence = writer(result)
            if sentence:
                sentences.append(sentence)
    sentences.extend(extra)
    sentences.append(CAUTION)
    if getattr(fit, "time_scale", None) is not None:
        sentences.append(TIME_CAUTION)
    return " ".join(sentences)
