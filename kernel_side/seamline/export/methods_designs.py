"""Sentences of the methods paragraph for several cutoffs, subgroup effects and power.

Numbers are formatted as the tables format them (``format_number``, three decimals), like the
rest of the paragraph (``seamline.export.methods``). Methods cited: Cattaneo, Keele, Titiunik and
Vazquez-Bare (2016) for several cutoffs and the pooled estimate's decomposition; Cattaneo,
Titiunik and Vazquez-Bare (2019) for power and sample size of the robust test.
"""
from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from .methods import _n, _p     # numbers and p-values as the rest of the paragraph writes them

__all__ = ["designs_sentences"]

_MULTIPLE = "Cattaneo, Keele, Titiunik and Vazquez-Bare (2016)"
_POWER = "Cattaneo, Titiunik and Vazquez-Bare (2019)"


def _label(value: Any) -> str:
    return f"{value:g}" if isinstance(value, float) else str(value)


def _rows_text(result, what: str) -> str:
    level = f"{100 * result.level:g}%"
    parts = []
    for r in result.rows:
        if r.fitted:
            parts.append(f"{_n(r.estimate)} at {what} {_label(r.label)} (robust {level} CI [{_n(r.robust_ci_low)}, "
                         f"{_n(r.robust_ci_high)}], {r.n_below:,} and {r.n_above:,} observations in the window)")
        else:
            parts.append(f"not estimated at {what} {_label(r.label)} ({r.note.split(':')[0]})")
    return "; ".join(parts)


def _equality_text(test, across: str) -> str:
    if not test.applies:
        return f"A test of equal effects across {across} was not computed ({test.reason})."
    return (f"A chi-square test of equal effects across {across}, built from the robust bias-corrected estimates "
            f"with precision weights, gives {test.statistic:.3f} on {test.df} degrees of freedom ({_p(test.p_value)}). "
            f"{test.assumption}")


def _cutoff_sentences(effects) -> list[str]:
    cutoffs = ", ".join(_label(r.label) for r in effects.rows)
    if effects.layout == "column":
        d = effects.decomposition
        weights = ", ".join(f"{w:.3f} at {c:g}" for c, w in zip(d.cutoffs, d.weights)) if d is not None else ""
        head = (f"The cutoff differs across units (column {effects.cutoff_column}; cutoffs {cutoffs}). Following "
                f"{_MULTIPLE}, the headline estimate pools all units on the normalised score (each unit's score "
                "minus its own cutoff, with cutoff 0); it is a weighted average of the cutoff-specific effects"
                + (f", with weights {weights} (each cutoff's share of the pooled fit's kernel weight)" if weights else "")
                + ".")
    else:
        head = (f"The score has cumulative cutoffs {cutoffs}, each treated as a design of its own on the "
                f"observations strictly between its neighbouring cutoffs ({_MULTIPLE}), with bandwidths "
                "selected there; each estimate is the increment of the treatment at that cutoff.")
    return [head, f"The cutoff-specific estimates are {_rows_text(effects, 'cutoff')}.",
            _equality_text(effects.equality, "cutoffs")]


def _group_sentences(groups) -> list[str]:
    return [f"By {groups.column} (a pre-treatment column), the default fit on each group's rows gives "
            f"{_rows_text(groups, groups.column)}.", _equality_text(groups.equality, "groups")]


def _power_sentences(report) -> list[str]:
    c = report.curve
    text = (f"For power we follow {_POWER}, using this sample as pilot data: with {c.n_pilot:,} observations the "
            f"two-sided robust test at size {1 - c.level:.3g} has 80% power against an effect of about "
            f"{_n(report.detectable)}")
    if report.effect is not None and report.power is not None:
        text += f", and {100 * report.power.power:.0f}% power against an effect of {_n(report.effect)}"
        if report.sample is not None:
            s = report.sample
            text += (f"; 80% power against that effect needs about {s.n_total:,} observations "
                     f"({s.n_window[0]:,} below and {s.n_window[1]:,} above the cutoff inside the bandwidth)")
    return [text + ".", f"The standard error is scaled with the sample size as {c.scaling_rule()}"]


def designs_sentences(results: Mapping[str, Any]) -> list[str]:
    """The sentences for a board's results "by_cutoff", "subgroups" and "power" that apply
    (a missing, failed or not-applicable result adds none; power only with an effect declared)."""
    def usable(key):
        value = results.get(key)
        return None if value is None or getattr(value, "applies", True) is False else value

    out: list[str] = []
    if usable("by_cutoff") is not None and hasattr(results["by_cutoff"], "rows"):
        out += _cutoff_sentences(results["by_cutoff"])
    if usable("subgroups") is not None and hasattr(results["subgroups"], "rows"):
        out += _group_sentences(results["subgroups"])
    # power enters the paragraph when the board plans for an effect (`effect:`), not by default
    power = usable("power")
    if power is not None and hasattr(power, "curve") and power.effect is not None:
        out += _power_sentences(results["power"])
    return out
