"""The declaration of a board: its keys, their defaults, and the check of each value.

``coerce_value`` turns a literal from a ``%%cutoff`` cell or a notebook variable's value into the
canonical form the board stores (floats, ints, tuples, canonical spellings), or raises an
``InvalidOptionError`` that names the key and the variable. ``lookup`` reads a notebook variable
without evaluating anything. ``NotApplicable`` and ``Failure`` are the two non-results a panel
can hold. Nothing here imports IPython, widgets or charts.
"""
from __future__ import annotations

import html
import math
from collections.abc import Mapping
from dataclasses import dataclass
from numbers import Integral, Real
from typing import Any

import numpy as np
import pandas as pd

from ..time_score import is_time_value, looks_like_date
from ..errors import InvalidOptionError, shown
from ..options import BANDWIDTH_RULES, KERNELS, PILOT_RULES, SCORE_UNITS, SIDES, VARIANCES, check_option
from .inference_keys import INFERENCE_DEFAULTS, coerce_inference

__all__ = ["BOARD_KEYS", "DESIGN_KEYS", "FIT_DEFAULTS", "OPTION_DEFAULTS", "REQUIRED_KEYS", "SPEC_KEYS", "Failure", "NotApplicable",
           "coerce_value", "lookup"]

#: Keys of the design declaration (names and numbers given to ``seamline.Design``).
DESIGN_KEYS: tuple[str, ...] = ("score", "cutoff", "treated", "outcome", "takeup", "covariates",
                                "cluster", "weights", "score_unit")
#: Keys of the board that are neither given to ``seamline.Design`` nor fit options: the subgroup
#: column, the effect for power and sample size, and the headline cutoff of cumulative cutoffs
#: (see ``designs_spec``).
BOARD_KEYS: tuple[str, ...] = ("groups", "effect", "headline_cutoff")
#: Fit options and their defaults (the engine's defaults).
FIT_DEFAULTS: dict[str, Any] = {
    "bandwidth": "mse", "kernel": "triangular", "degree": 1, "bias_degree": None,
    "pilot_bandwidth": None, "variance": "bias-reduced", "level": 0.95, "donut": 0.0,
    "derivative": 0, "adjust": False,
}
#: Every board option: the fit options, then the inference settings (``inference_keys``), which
#: only the inference panels read and which are never passed to ``Design.fit``.
OPTION_DEFAULTS: dict[str, Any] = {**FIT_DEFAULTS, **INFERENCE_DEFAULTS}
#: Every key a declaration may hold.
SPEC_KEYS: tuple[str, ...] = ("data", *DESIGN_KEYS, *BOARD_KEYS, *OPTION_DEFAULTS)
#: Keys a declaration must hold.
REQUIRED_KEYS: tuple[str, ...] = ("data", "score", "cutoff", "outcome")


@dataclass(frozen=True)
class NotApplicable:
    """A panel that does not apply to this design, with the reason (e.g. a first stage for a sharp
    design). ``applies`` is always False, so views can test for it without importing this class."""

    reason: str
    applies: bool = False

    def _repr_html_(self) -> str:
        return f'<p class="seamline-not-applicable">{html.escape(self.reason)}</p>'

    def __str__(self) -> str:
        return self.reason


@dataclass(frozen=True)
class Failure:
    """A computation error kept like a result (the same inputs give the same error, so it is not
    retried). ``message`` is shown in the panel; ``detail`` is the exception's own text and
    ``ours`` whether it was a seamline input error (the checks summary reports only those)."""
    message: str
    detail: str = ""
    ours: bool = True


# ---- values of the declaration -----------------------------------------------------------------
def _where(key: str, variable: str | None) -> str:
    return f"`{key}`" + (f" (from the notebook variable `{variable}`)" if variable else "")


def _is_real(value: Any) -> bool:
    return isinstance(value, Real) and not isinstance(value, (bool, np.bool_))


def _as_float(key: str, value: Any, variable: str | None, example: str) -> float:
    if isinstance(value, np.ndarray) and value.ndim == 0:
        value = value.item()
    if not _is_real(value):
        raise InvalidOptionError(f"{_where(key, variable)} must be a number; got {shown(value)}. "
                                 f"Use e.g. `{key}: {example}`.")
    return float(value)


def _as_int(key: str, value: Any, variable: str | None) -> int:
    if isinstance(value, Integral) and not isinstance(value, (bool, np.bool_)):
        return int(value)
    if _is_real(value) and float(value).is_integer():
        return int(value)
    raise InvalidOptionError(f"{_where(key, variable)} must be a whole number; got {shown(value)}. "
                             f"Use e.g. `{key}: 1`.")


def _as_name(key: str, value: Any, variable: str | None, optional: bool) -> str | None:
    if value is None and optional:
        return None
    if isinstance(value, str) and value.strip():
        return value.strip()
    fix = "a column name" + (" (or leave the key out)" if optional else "")
    raise InvalidOptionError(f"{_where(key, variable)} must be {fix}; got {shown(value)}. "
                             f"Name a column of the data, e.g. `{key}: {_EXAMPLE_COLUMN[key]}`.")


def _as_names(key: str, value: Any, variable: str | None) -> tuple[str, ...]:
    if value is None and key == "covariates":
        return ()
    if isinstance(value, str):
        value = [value]
    if isinstance(value, pd.Index):
        value = list(value)
    if isinstance(value, (list, tuple)) and all(isinstance(v, str) and v.strip() for v in value):
        names = tuple(v.strip() for v in value)
        if names or key == "covariates":
            return names
    raise InvalidOptionError(f"{_where(key, variable)} must be a column name or a list of names; got "
                             f"{shown(value)}. Use e.g. `{key}: {_EXAMPLE_COLUMN[key]}`.")


def _as_pair_or_number(key: str, value: Any, variable: str | None) -> float | tuple[float, float]:
    if isinstance(value, (list, tuple, np.ndarray)) and len(value) == 2 and all(map(_is_real, value)):
        return (float(value[0]), float(value[1]))
    if _is_real(value):
        return float(value)
    raise InvalidOptionError(f"{_where(key, variable)} must be a number or two numbers (below, above); "
                             f"got {shown(value)}. Use e.g. `{key}: 2.5` or `{key}: 2.0, 3.0`.")


def _as_rule_or_width(key: str, value: Any, variable: str | None, rules: tuple[str, ...],
                      examples: tuple[str, str]) -> str | float | tuple[float, float]:
    """A bandwidth-like value: the name of one of ``rules``, a number, or two numbers."""
    if isinstance(value, str):
        try:
            return check_option(key, value, rules)
        except InvalidOptionError:
            names = ", ".join(f'"{a}"' for a in rules)
            raise InvalidOptionError(f"{_where(key, variable)} must be one of {names}, a number or two "
                                     f"numbers; got {shown(value)}. Use e.g. `{key}: {examples[0]}` or "
                                     f"`{key}: {examples[1]}`.") from None
    return _as_pair_or_number(key, value, variable)


_EXAMPLE_COLUMN = {"score": "reading_score", "outcome": "math_gain", "takeup": "attended",
                   "covariates": "age, prior_math", "cluster": "school", "weights": "sample_weight"}


def coerce_value(key: str, value: Any, variable: str | None = None) -> Any:
    """Check one declaration value and return it in canonical form.

    Parameters
    ----------
    key : one of ``SPEC_KEYS`` except "data"
    value : the Python value (a literal from a ``%%cutoff`` cell or a notebook variable's value)
    variable : the notebook variable it came from, named in error messages

    Returns
    -------
    The value: floats for numbers, ints for degrees, tuples for lists and pairs, canonical
    spellings for choices.

    Raises
    ------
    InvalidOptionError
        With the key, the variable, the value and how to fix it.
    """
    if key in INFERENCE_DEFAULTS:
        return coerce_inference(key, value, variable)
    if key == "cutoff" and (looks_like_date(value) or is_time_value(value)):
        return value      # a cutoff date: checked against the score by seamline.Design
    if key == "cutoff" or key in BOARD_KEYS:
        from .designs_spec import coerce_designs_value
        done, value = coerce_designs_value(key, value, variable)   # several cutoffs, groups, effect
        if done:
            return value
    if key in ("cutoff", "level", "donut"):
        number = _as_float(key, value, variable, {"cutoff": "40", "level": "0.95", "donut": "0.5"}[key])
        if key == "level" and not 0 < number < 1:
            raise InvalidOptionError(f"{_where(key, variable)} must be between 0 and 1; got {shown(value)}. "
                                     "Use e.g. `level: 0.95`.")
        if key == "cutoff" and not math.isfinite(number):
            raise InvalidOptionError(f"{_where(key, variable)} must be a finite number; got {shown(value)}. "
                                     "Use e.g. `cutoff: 40`.")
        return number
    if key in ("degree", "derivative"):
        return _as_int(key, value, variable)
    if key == "bias_degree":
        return None if value is None else _as_int(key, value, variable)
    if key in ("score", "takeup", "cluster", "weights"):
        return _as_name(key, value, variable, optional=key != "score")
    if key in ("outcome", "covariates"):
        return _as_names(key, value, variable)
    if key == "score_unit" and value is None:
        return None       # a date score then counts days; a numeric score has no unit
    if key in ("treated", "kernel", "variance", "score_unit"):
        allowed = {"treated": SIDES, "kernel": KERNELS, "variance": VARIANCES, "score_unit": SCORE_UNITS}[key]
        try:
            return check_option(key, value, allowed)
        except InvalidOptionError:
            choices = ", ".join(f'"{a}"' for a in allowed)
            raise InvalidOptionError(f"{_where(key, variable)} must be one of {choices}; got {shown(value)}. "
                                     "Pick one of the listed values.") from None
    if key == "bandwidth":
        return _as_rule_or_width(key, value, variable, BANDWIDTH_RULES, ("mse", "2.5"))
    if key == "pilot_bandwidth":
        if value is None:
            return None
        return _as_rule_or_width(key, value, variable, PILOT_RULES, ("two-step", "4.0"))
    if key == "adjust":
        if isinstance(value, (bool, np.bool_)):
            return bool(value)
        raise InvalidOptionError(f"{_where(key, variable)} must be true or false; got {shown(value)}. "
                                 "Use `adjust: true` to adjust for the covariates.")
    raise InvalidOptionError(f"`key` must be one of {', '.join(SPEC_KEYS)}; got {shown(key)}. "
                             "Check the spelling of the setting.")


def lookup(namespace: Mapping[str, Any], name: str) -> Any:
    """The value of a notebook variable, or of a dotted attribute path (``config.cutoff``).

    Only names and attribute access are followed; nothing is evaluated.

    Raises
    ------
    NameError
        When the variable (or an attribute on the path) does not exist.
    """
    head, *rest = name.split(".")
    if head not in namespace:
        raise NameError(f"`{head}` must be a variable defined in the notebook; got no such variable. "
                        "Define it in a cell above.")
    value = namespace[head]
    for i, attribute in enumerate(rest):
        try:
            value = getattr(value, attribute)
        except AttributeError:
            path = ".".join([head, *rest[:i]])
            raise NameError(f"`{name}` must name an existing attribute; got no attribute {shown(attribute)} "
                            f"on `{path}`. Check the spelling.") from None
    return value
