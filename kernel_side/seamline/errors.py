"""Every error seamline raises on bad input.

Messages follow one grammar: "`<argument or column>` must be <rule>; got <value>. <How to fix>."
All classes subclass ValueError or TypeError so callers can catch them generically.
"""
from __future__ import annotations

import math
import numbers
from collections.abc import Mapping

_LONGEST = 80     # characters of a value shown in a message before it is summarised by its type
_ITEMS = 6        # items of a long sequence shown before "..."


def as_python(value):
    """A numpy scalar (or 0-d array) as the Python value it holds; anything else unchanged."""
    if type(value).__module__ == "numpy" and hasattr(value, "item") and getattr(value, "ndim", None) == 0:
        return value.item()
    return value


def shown(value) -> str:
    """A value as a user would have typed it, for the "got <value>" part of a message.

    numpy scalars and arrays lose their wrappers (``2.0``, not ``np.float64(2.0)``), containers are
    shown item by item, text keeps its quotes, and a long or opaque object (a DataFrame, a
    function) is named by its type so the message stays one readable line.

    Examples
    --------
    >>> import numpy as np
    >>> shown(np.float64(2.0)), shown((np.int64(1), 2.5)), shown("gaussian")
    ('2.0', '(1, 2.5)', "'gaussian'")
    """
    if isinstance(value, str):
        return repr(str(value))
    if isinstance(value, (bool, type(None))):
        return repr(value)
    value = as_python(value)
    if isinstance(value, (str, bool)):
        return repr(value)
    if isinstance(value, numbers.Integral):
        return str(int(value))
    if isinstance(value, numbers.Real):
        number = float(value)
        return repr(number) if math.isfinite(number) else str(number)
    if isinstance(value, Mapping):
        items = list(value.items())
        body = ", ".join(f"{shown(k)}: {shown(v)}" for k, v in items[:_ITEMS])
        return "{" + body + (", ..." if len(items) > _ITEMS else "") + "}"
    if isinstance(value, (list, tuple, set, frozenset)) or type(value).__name__ == "ndarray":
        items = list(value) if not isinstance(value, (set, frozenset)) else sorted(value, key=repr)
        body = ", ".join(shown(v) for v in items[:_ITEMS]) + (", ..." if len(items) > _ITEMS else "")
        if isinstance(value, tuple):
            return f"({body},)" if len(items) == 1 else f"({body})"
        return "{" + body + "}" if isinstance(value, (set, frozenset)) else f"[{body}]"
    text = repr(value)
    if len(text) > _LONGEST or "\n" in text:
        return f"a {type(value).__name__}"
    return text


class SeamlineError(ValueError):
    """Base class for seamline's input errors."""


class InvalidOptionError(SeamlineError):
    """An option (kernel, bandwidth rule, variance, side, ...) is not one of the allowed values."""


class ColumnNotFoundError(SeamlineError, KeyError):
    """A named column is not in the data."""

    def __str__(self) -> str:  # KeyError would wrap the message in quotes
        return str(self.args[0]) if self.args else ""


class DuplicateColumnError(SeamlineError):
    """The data holds two columns with the same name, so a name is ambiguous."""


class DataSourceError(SeamlineError):
    """A data source named by path (Parquet files) cannot be found or read."""


class ColumnTypeError(SeamlineError, TypeError):
    """A column that must be numeric is not."""


class EmptyColumnError(SeamlineError):
    """A column has no usable (non-missing) values."""


class NonFiniteValueError(SeamlineError):
    """A column holds +inf or -inf."""


class CutoffOutOfRangeError(SeamlineError):
    """The cutoff lies outside the observed range of the score."""


class OneSidedDataError(SeamlineError):
    """All observations lie on one side of the cutoff (after dropping missing rows or a donut)."""


class TooFewDistinctValuesError(SeamlineError):
    """A side has too few distinct score values inside the bandwidth for the polynomial degree."""


class CollinearCovariatesError(SeamlineError):
    """Covariates are collinear (with each other or with the local polynomial) inside the window."""


class TakeupRangeError(SeamlineError):
    """The take-up column has values outside [0, 1]."""


class TooFewClustersError(SeamlineError):
    """A side of the cutoff has fewer than two clusters inside the window."""


class InvalidWeightsError(SeamlineError):
    """Weights are negative, all zero, or otherwise unusable."""


class InvalidBandwidthError(SeamlineError):
    """A manual bandwidth is not a positive finite number (or pair of numbers)."""


class DesignSpecError(SeamlineError):
    """A design declaration (for example a %%cutoff cell) is malformed."""


class CutoffTypeError(SeamlineError, TypeError):
    """The cutoff's type does not fit the score: a date for a numeric score, a number for a date score,
    or a time-zone mismatch between a date score and its cutoff."""
class SingleCutoffError(SeamlineError):
    """A multiple-cutoff request on a design with only one cutoff (or a cutoff column with one value)."""


class CutoffOrderError(SeamlineError):
    """Cumulative cutoffs on one score are not strictly increasing numbers."""


class TooFewUnitsError(SeamlineError):
    """Too few observations between two cumulative cutoffs (or beyond the outer ones)."""


class CutoffChoiceError(SeamlineError):
    """A call that needs one cutoff was made on a design with cumulative cutoffs; pick one first."""


class InvalidEffectError(SeamlineError):
    """An effect size for power or sample-size calculations is zero, missing or not a number."""
class InvalidSmoothnessError(SeamlineError):
    """A smoothness bound (the curvature bound M of a bias-aware interval) is not a positive number."""


class NotFuzzyError(SeamlineError):
    """An inference that needs a first stage (a take-up column with a jump) was asked of a sharp design."""


class WindowTooSmallError(SeamlineError):
    """A local randomization window holds fewer than the minimum number of units on a side."""


class NoBalancedWindowError(SeamlineError):
    """Window selection by covariate balance cannot run (no covariates) or no window passes."""
class WaitTimeoutError(TimeoutError):
    """``Board.wait`` gave up: the named panels were still computing when the timeout passed."""
