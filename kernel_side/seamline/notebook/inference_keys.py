"""The ``%%cutoff`` keys of the inference beyond the robust interval, and the check of each value.

``smoothness`` is the bound M of the bias-aware interval (``Design.bias_aware``); ``window``,
``statistic``, ``permutations`` and ``seed`` set the local randomization tab
(``Design.local_randomization``). Values are plain English: ``smoothness: rule of thumb`` or a
number (a fuzzy board may give two, outcome then take-up), ``window: by balance``, a half-width
or two scores ``low, high``, ``statistic: rank sum``, ``permutations: 10000``, ``seed: 20260314``
(or ``seed: none`` to draw one, which the results and the replication script record).

``parse_text`` turns the text of a cell line into a value (the magic names the line on error);
``coerce_inference`` checks a Python value (from a cell, a notebook variable or a control) and
returns it in canonical form. Nothing here imports IPython, widgets or charts.
"""
from __future__ import annotations

import re
from numbers import Integral, Real
from typing import Any

import numpy as np

from ..core.randomization import STATISTICS
from ..errors import InvalidOptionError, shown

__all__ = ["INFERENCE_DEFAULTS", "INFERENCE_EXAMPLES", "coerce_inference", "parse_text", "MIN_PERMUTATIONS"]

#: The keys and their defaults (None: the rule of thumb, the window chosen by balance, a drawn seed).
INFERENCE_DEFAULTS: dict[str, Any] = {
    "smoothness": None, "window": None, "statistic": "difference in means", "permutations": 10_000,
    "seed": None,
}
INFERENCE_EXAMPLES = {"smoothness": "0.5", "window": "2.5", "statistic": "rank sum", "permutations": "10000",
                      "seed": "20260314"}
#: The engine's floor for Monte Carlo draws (``estimate.local_randomization``).
MIN_PERMUTATIONS = 99
_AUTO = {"smoothness": ("rule of thumb", "rule-of-thumb", "auto", "default", "none"),
         "window": ("by balance", "balance", "auto", "default", "none"),
         "seed": ("none", "random", "auto")}


def _where(key: str, variable: str | None) -> str:
    return f"`{key}`" + (f" (from the notebook variable `{variable}`)" if variable else "")


def _real(value: Any) -> bool:
    return isinstance(value, Real) and not isinstance(value, (bool, np.bool_)) and bool(np.isfinite(value))


def _numbers(text: str) -> list[float] | None:
    parts = [p for p in re.split(r"[,\s]+", text.strip().strip("()[]")) if p]
    try:
        return [float(p.replace("_", "")) for p in parts] or None
    except ValueError:
        return None


def parse_text(key: str, text: str) -> Any:
    """The value written on a ``key: text`` line, or the text itself when it is none of the
    literals of the key (the magic then reads a notebook variable of that name)."""
    lowered = " ".join(text.strip().lower().split())
    if lowered in _AUTO.get(key, ()):
        return None
    if key == "statistic":
        for name in STATISTICS:
            if lowered in (name.lower(), name.lower().replace("-", " ")):
                return name
        return text.strip()
    numbers = _numbers(text.replace(",", "") if key in ("permutations", "seed") else text)
    if numbers is None:
        return text.strip()
    if key in ("permutations", "seed"):
        return int(numbers[0]) if len(numbers) == 1 and numbers[0].is_integer() else numbers[0] if \
            len(numbers) == 1 else tuple(numbers)
    return numbers[0] if len(numbers) == 1 else tuple(numbers)


def coerce_inference(key: str, value: Any, variable: str | None = None) -> Any:
    """Check one inference setting and return it in canonical form.

    Raises
    ------
    InvalidOptionError
        Naming the key (and the notebook variable it came from), the value and the fix.
    """
    where = _where(key, variable)
    if isinstance(value, np.ndarray) and value.ndim == 0:
        value = value.item()
    if isinstance(value, str) and key != "statistic":
        parsed = parse_text(key, value)
        if not isinstance(parsed, str):
            return coerce_inference(key, parsed, variable)
    if key == "smoothness":
        if value is None:
            return None
        if isinstance(value, (list, tuple)) and len(value) == 2 and all(_real(v) and v > 0 for v in value):
            return (float(value[0]), float(value[1]))
        if _real(value) and value > 0:
            return float(value)
        raise InvalidOptionError(f"{where} must be a positive number (the bound M on the curvature of the "
                                 "outcome, in outcome units per squared score unit), two of them for a fuzzy "
                                 f"board (outcome, take-up), or `rule of thumb`; got {shown(value)}. Use e.g. "
                                 "`smoothness: 0.5`.")
    if key == "window":
        if value is None:
            return None
        if _real(value) and value > 0:
            return float(value)
        if isinstance(value, (list, tuple)) and len(value) == 2 and all(_real(v) for v in value) and \
                value[0] < value[1]:
            return (float(value[0]), float(value[1]))
        raise InvalidOptionError(f"{where} must be `by balance`, a positive half-width (the window is cutoff "
                                 "minus to plus it) or two scores `low, high` with low below high; got "
                                 f"{shown(value)}. Use e.g. `window: 2.5` or `window: 37.5, 42.5`.")
    if key == "statistic":
        if isinstance(value, str):
            lowered = " ".join(value.strip().lower().split())
            for name in STATISTICS:
                if lowered in (name.lower(), name.lower().replace("-", " ")):
                    return name
        choices = ", ".join(STATISTICS)
        raise InvalidOptionError(f"{where} must be one of {choices}; got {shown(value)}. Use e.g. "
                                 "`statistic: rank sum`.")
    if key in ("permutations", "seed"):
        if key == "seed" and value is None:
            return None
        whole = isinstance(value, Integral) and not isinstance(value, (bool, np.bool_)) or \
            (_real(value) and float(value).is_integer())
        low = MIN_PERMUTATIONS if key == "permutations" else 0
        if whole and int(value) >= low:
            return int(value)
        what = (f"a whole number of at least {MIN_PERMUTATIONS} (random assignments drawn when a window has "
                "too many to enumerate)" if key == "permutations" else "a whole number of at least 0, or `none` "
                "to draw one (it is recorded)")
        raise InvalidOptionError(f"{where} must be {what}; got {shown(value)}. Use e.g. "
                                 f"`{key}: {INFERENCE_EXAMPLES[key]}`.")
    raise InvalidOptionError(f"`key` must be one of {', '.join(INFERENCE_DEFAULTS)}; got {shown(key)}. "
                             "Check the spelling of the setting.")
