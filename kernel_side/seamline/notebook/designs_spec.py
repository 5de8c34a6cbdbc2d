"""The declaration keys of boards with several cutoffs, subgroups and a power calculation.

``cutoff`` may name a column of per-unit cutoffs or list increasing numbers (cumulative cutoffs
on one score); ``groups`` names a pre-treatment column for subgroup effects; ``effect`` is the
effect the power panel plans for; ``headline_cutoff`` picks which of several cumulative cutoffs
the headline (and every single-cutoff panel) shows. :func:`coerce_designs_value` checks these
values for ``spec.coerce_value``; the other helpers read a declaration's layout. Nothing here
imports IPython, widgets or charts.
"""
from __future__ import annotations

import math
from collections.abc import Mapping
from numbers import Real
from typing import Any

import numpy as np
import pandas as pd

from ..errors import InvalidOptionError, shown
from ..time_score import looks_like_date

__all__ = ["coerce_designs_value", "cutoff_column", "cutoff_layout", "cutoff_text", "headline_of"]


def _where(key: str, variable: str | None) -> str:
    return f"`{key}`" + (f" (from the notebook variable `{variable}`)" if variable else "")


def _real(value: Any) -> bool:
    return isinstance(value, Real) and not isinstance(value, (bool, np.bool_)) and math.isfinite(float(value))


def _cutoffs(value: Any, variable: str | None) -> tuple[float, ...] | float:
    values = list(np.ravel(np.asarray(value, dtype=object)))
    if not values or not all(_real(v) for v in values):
        raise InvalidOptionError(f"{_where('cutoff', variable)} must be a number, a column name or increasing "
                                 f"numbers; got {shown(value)}. Use e.g. `cutoff: 30, 60`.")
    numbers = tuple(float(v) for v in values)
    if len(numbers) == 1:
        return numbers[0]
    if any(b <= a for a, b in zip(numbers, numbers[1:])):
        fixed = ", ".join(f"{v:g}" for v in sorted(set(numbers)))
        raise InvalidOptionError(f"{_where('cutoff', variable)} must list cumulative cutoffs in increasing order "
                                 f"without repeats; got {', '.join(f'{v:g}' for v in numbers)}. Write "
                                 f"`cutoff: {fixed}`.")
    return numbers


def coerce_designs_value(key: str, value: Any, variable: str | None = None) -> tuple[bool, Any]:
    """Check a value of ``cutoff`` (several cutoffs or a column) or of a key in ``BOARD_KEYS``.

    Returns
    -------
    (done, value)
        ``done`` is False when ``cutoff`` holds a single number, which ``coerce_value`` checks.

    Raises
    ------
    InvalidOptionError
        Naming the key, the notebook variable, the value and the fix.
    """
    if key == "cutoff":
        if isinstance(value, str) and value.strip() and not looks_like_date(value) and variable is None:
            return True, value.strip()   # a column of per-unit cutoffs (named in the cell, not by a variable)
        if isinstance(value, (list, tuple, np.ndarray, pd.Series)):
            return True, _cutoffs(value, variable)
        return False, value
    if key == "groups":
        if value is None:
            return True, None
        if isinstance(value, str) and value.strip():
            return True, value.strip()
        raise InvalidOptionError(f"{_where(key, variable)} must name a pre-treatment column of the data; got "
                                 f"{shown(value)}. Use e.g. `groups: region`.")
    if value is None:
        return True, None
    if isinstance(value, np.ndarray) and value.ndim == 0:
        value = value.item()
    if not _real(value):
        example = "0.2" if key == "effect" else "60"
        what = ("a finite number in the outcome's units (the effect to plan for)" if key == "effect"
                else "one of the cumulative cutoffs")
        raise InvalidOptionError(f"{_where(key, variable)} must be {what}; got {shown(value)}. Use e.g. "
                                 f"`{key}: {example}`, or leave the key out.")
    return True, float(value)


def cutoff_layout(spec: Mapping[str, Any]) -> str:
    """"single", "column" (a column of per-unit cutoffs) or "cumulative" (increasing numbers)."""
    cutoff = spec.get("cutoff")
    if isinstance(cutoff, tuple):
        return "cumulative"
    if isinstance(cutoff, str) and not looks_like_date(cutoff):
        return "column"
    return "single"


def cutoff_column(spec: Mapping[str, Any]) -> str | None:
    """The column of per-unit cutoffs, or None."""
    return spec["cutoff"] if cutoff_layout(spec) == "column" else None


def headline_of(spec: Mapping[str, Any]) -> float | None:
    """The cumulative cutoff the headline shows (the chosen one, else the first); None otherwise.

    Raises
    ------
    InvalidOptionError
        When ``headline_cutoff`` is set on a board without cumulative cutoffs, or is not one of them.
    """
    chosen = spec.get("headline_cutoff")
    layout = cutoff_layout(spec)
    if layout != "cumulative":
        if chosen is not None:
            pooled = " (with a cutoff column the headline is the pooled fit)" if layout == "column" else ""
            raise InvalidOptionError(f"`headline_cutoff` applies to cumulative cutoffs only{pooled}; got "
                                     f"{chosen:g} with `cutoff: {cutoff_text(spec['cutoff'])}`. Remove the line.")
        return None
    cutoffs = spec["cutoff"]
    if chosen is None:
        return cutoffs[0]
    if chosen not in cutoffs:
        raise InvalidOptionError(f"`headline_cutoff` must be one of the cutoffs {', '.join(f'{c:g}' for c in cutoffs)}; "
                                 f"got {chosen:g}. Pick one of them.")
    return chosen


def cutoff_text(cutoff: Any) -> str:
    """A cutoff as a reader would write it: 40, "30, 60", or a column name."""
    if isinstance(cutoff, tuple):
        return ", ".join(f"{c:g}" for c in cutoff)
    if isinstance(cutoff, float):
        return f"{cutoff:g}"
    return str(cutoff)
