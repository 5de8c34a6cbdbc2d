"""Every error seamline raises on bad input.

Messages follow one grammar: "`<argument or column>` must be <rule>; got <value>. <How to fix>."
All classes subclass ValueError or TypeError so callers can catch them generically.
"""
from __future__ import annotations


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


class WaitTimeoutError(TimeoutError):
    """``Board.wait`` gave up: the named panels were still computing when the timeout passed."""
