"""The ``Scenario`` record every invented generator returns, and the argument checks and small
formulas the generators share (``demo_data``, ``demo_scores``, ``demo_cutoffs``).

Import scenarios from ``seamline.demo_data``; this module holds no scenario of its own.
"""
from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any, Literal

import numpy as np
import pandas as pd

from .errors import shown

__all__ = ["Scenario"]

_MIN_ROWS = 100

# Nodes of Gauss-Hermite quadrature (probabilists' weight exp(-z^2/2)): exact expectations of
# smooth functions of a normal draw, used to state true effects on nonlinear outcomes.
_GH_NODES, _GH_WEIGHTS = np.polynomial.hermite_e.hermegauss(80)
_GH_WEIGHTS = _GH_WEIGHTS / _GH_WEIGHTS.sum()


@dataclass(frozen=True, eq=False)
class Scenario:
    """An invented data set together with the design that produced it.

    Attributes
    ----------
    data : pandas.DataFrame
        The invented observations (a new frame on every call of a generator).
    score : str
        Column holding the running variable.
    cutoff : float, str or tuple of float
        Where treatment assignment changes: a number, the name of a column holding each unit's own
        cutoff, or increasing cumulative cutoffs on one score (see ``seamline.demo_cutoffs``).
    treated : {"above", "below"}
        The side of the cutoff assigned to treatment ("above" includes the cutoff itself).
    outcome : tuple of str
        Outcome columns; the first is the primary outcome.
    takeup : str or None
        Column of treatment actually received (fuzzy designs), else None.
    covariates : tuple of str
        Pre-treatment columns, continuous at the cutoff by construction.
    cluster : str or None
        Column of cluster identifiers, if the scenario has clusters.
    weights : str or None
        Column of sampling weights, if the scenario has weights.
    true_effect : float
        The jump the generator built in for the primary outcome, signed as "limit on the treated
        side minus limit on the untreated side" (for fuzzy designs: the effect on those whose
        take-up follows their eligibility, i.e. the local average treatment effect).
    true_effects : Mapping[str, float]
        The true effect for every outcome column, keyed by column name.
    description : str
        A plain-language account of the invented story, its seed and what is true by construction.
    cutoff_effects : Mapping[float, float]
        For scenarios with several cutoffs, the true jump of the primary outcome at each cutoff;
        empty otherwise.
    """

    data: pd.DataFrame
    score: str
    cutoff: float | str | tuple[float, ...]
    treated: Literal["above", "below"]
    outcome: tuple[str, ...]
    takeup: str | None
    covariates: tuple[str, ...]
    cluster: str | None
    weights: str | None
    true_effect: float
    true_effects: Mapping[str, float]
    description: str
    cutoff_effects: Mapping[float, float] = field(default_factory=lambda: MappingProxyType({}))

    def design_kwargs(self) -> dict[str, Any]:
        """Return the keyword arguments for ``seamline.Design`` (everything but the data).

        Returns
        -------
        dict
            ``score``, ``cutoff``, ``outcome`` (a string for one outcome, else a list),
            ``treated``, ``takeup``, ``covariates`` (a list, or None when there are none),
            ``cluster`` and ``weights``.

        Examples
        --------
        >>> import seamline
        >>> from seamline.demo_data import fuzzy_scenario
        >>> scenario = fuzzy_scenario(seed=3)
        >>> design = seamline.Design(scenario.data, **scenario.design_kwargs())  # doctest: +SKIP
        """
        outcome: str | list[str] = (
            self.outcome[0] if len(self.outcome) == 1 else list(self.outcome)
        )
        return {
            "score": self.score,
            "cutoff": self.cutoff,
            "outcome": outcome,
            "treated": self.treated,
            "takeup": self.takeup,
            "covariates": list(self.covariates) if self.covariates else None,
            "cluster": self.cluster,
            "weights": self.weights,
        }


def _check_n(n: object) -> int:
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < _MIN_ROWS:
        raise ValueError(
            f"`n` must be an integer of at least {_MIN_ROWS}; got {shown(n)}. "
            "Ask for more rows, e.g. n=5000."
        )
    return int(n)


def _check_seed(seed: object) -> int:
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ValueError(
            f"`seed` must be a non-negative integer; got {shown(seed)}. "
            "Pass a whole number such as seed=0 so the data can be reproduced."
        )
    return int(seed)


def _check_unit_interval(name: str, value: object) -> float:
    if not isinstance(value, (int, float, np.floating, np.integer)) or not 0.0 <= value <= 1.0:
        raise ValueError(
            f"`{name}` must be a number between 0 and 1; got {shown(value)}. Pass a share such as 0.5."
        )
    return float(value)


def _expit(t: np.ndarray | float) -> np.ndarray:
    return 1.0 / (1.0 + np.exp(-np.asarray(t, dtype=float)))


def _describe(story: str, seed: int, truth: str) -> str:
    return (
        f"Invented data generated by seamline.demo_data (seed={seed}). {story} "
        f"{truth} No real programme, place or person is described."
    )
