"""Invented, seeded cutoff-design scenarios for demos, tutorials and documentation.

Every data set here is made up by this module's own code: the stories (a tutoring grant, a benefit,
a programme that starts at 65, an exam pass mark) are illustrations, not real programmes, and every
frame says so in its scenario's ``description``. Each generator takes an explicit ``seed`` and
draws only from a ``numpy.random.Generator`` built from it, so the same seed gives the same rows.

The conditional means are smooth, the noise is heteroskedastic, and covariates are continuous at
the cutoff, so the only discontinuity at the cutoff is the one the generator puts there. That jump
is returned as ``Scenario.true_effect``; use it to see how close an estimate lands, never as a
reference value for tests of the estimator (invented data is for demos only).

Examples
--------
>>> from seamline.demo_data import sharp_scenario
>>> scenario = sharp_scenario(2000, seed=1)
>>> scenario.data.shape
(2000, 8)
>>> scenario.true_effect
3.0
"""
from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any, Literal

import numpy as np
import pandas as pd

from .errors import shown

__all__ = [
    "Scenario",
    "sharp_scenario",
    "fuzzy_scenario",
    "discrete_scenario",
    "manipulated_scenario",
]

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


def sharp_scenario(n: int = 5000, *, seed: int = 0, effect: float = 3.0) -> Scenario:
    """Invented sharp design: a tutoring grant for pupils who read below a score of 40.

    Pupils in ``n_schools = 80`` invented schools sit a reading test (``reading_score``, 0-100,
    two decimals). Those scoring strictly below 40 get the grant (``treated="below"``). Outcomes:
    ``math_gain`` (points gained on a later maths test; jumps by ``effect``) and ``attendance``
    (percent of days attended, bounded in (0, 100); a nonlinear outcome whose jump is computed
    exactly by quadrature). Covariates ``age``, ``prior_math`` and ``free_lunch`` (0/1) vary
    smoothly with the score; ``school`` is a cluster identifier with a school effect shared by its
    pupils; ``sample_weight`` is an invented survey weight (free-lunch pupils oversampled).

    Parameters
    ----------
    n : int, default 5000
        Number of pupils (at least 100).
    seed : int, default 0
        Seed of the ``numpy.random.Generator`` that draws every value.
    effect : float, default 3.0
        The true jump in expected ``math_gain`` at the cutoff (grant minus no grant).

    Returns
    -------
    Scenario
        ``true_effect`` is ``effect``; ``true_effects`` also holds the attendance effect.

    Examples
    --------
    >>> scenario = sharp_scenario(3000, seed=7)
    >>> scenario.treated, scenario.cutoff
    ('below', 40.0)
    """
    n = _check_n(n)
    seed = _check_seed(seed)
    effect = float(effect)
    rng = np.random.default_rng(seed)
    cutoff = 40.0
    n_schools = 80

    quality = rng.normal(0.0, 1.0, n_schools)
    school = rng.integers(0, n_schools, n)
    q = quality[school]
    # Latent reading ability mixes school quality and the pupil's own draw; the logistic map keeps
    # the score inside (0, 100) with a smooth density and no piles at the ends.
    latent = 0.5 * q + np.sqrt(0.75) * rng.standard_normal(n)
    reading = np.round(100.0 * _expit(0.05 + 0.65 * latent), 2)
    x = reading - cutoff
    grant = (reading < cutoff).astype(float)

    age = np.round(9.6 - 0.004 * (reading - 50.0) + 0.35 * rng.standard_normal(n), 2)
    prior_math = np.round(45.0 + 0.55 * (reading - 50.0) + 3.0 * q + 7.0 * rng.standard_normal(n), 1)
    free_lunch = (rng.random(n) < _expit(0.6 - 0.045 * x - 0.4 * q)).astype(np.int64)
    sample_weight = np.round(
        np.where(free_lunch == 1, 0.8, 1.6) * np.exp(0.15 * rng.standard_normal(n)), 3
    )

    noise_sd = 2.5 + 0.03 * np.abs(x - 10.0)
    math_gain = (
        4.0
        + 0.06 * x
        - 0.0012 * x**2
        + 1.0 * np.sin(x / 12.0)
        + 0.12 * (prior_math - 45.0)
        - 0.8 * free_lunch
        + 1.2 * q
        + effect * grant
        + noise_sd * rng.standard_normal(n)
    )
    math_gain = np.round(math_gain, 2)

    # Attendance share = expit(index + 0.5 * e), e ~ N(0, 1) independent of everything else, so
    # E[attendance | score] is a smooth function of the score plus the grant's shift of the index.
    att_index = 2.2 + 0.012 * x + 0.35 * grant
    attendance = np.round(100.0 * _expit(att_index + 0.5 * rng.standard_normal(n)), 1)
    att_effect = float(
        100.0
        * _GH_WEIGHTS
        @ (_expit(2.2 + 0.35 + 0.5 * _GH_NODES) - _expit(2.2 + 0.5 * _GH_NODES))
    )

    data = pd.DataFrame(
        {
            "reading_score": reading,
            "math_gain": math_gain,
            "attendance": attendance,
            "age": age,
            "prior_math": prior_math,
            "free_lunch": free_lunch,
            "school": school.astype(np.int64),
            "sample_weight": sample_weight,
        }
    )
    description = _describe(
        "Invented sharp design: pupils scoring below 40 on a reading test receive a tutoring "
        "grant; outcomes are the later maths gain and the attendance rate.",
        seed,
        f"By construction the grant raises expected math_gain by {effect:g} points and expected "
        f"attendance by {att_effect:.3f} percentage points at the cutoff.",
    )
    return Scenario(
        data=data,
        score="reading_score",
        cutoff=cutoff,
        treated="below",
        outcome=("math_gain", "attendance"),
        takeup=None,
        covariates=("age", "prior_math", "free_lunch"),
        cluster="school",
        weights="sample_weight",
        true_effect=effect,
        true_effects=MappingProxyType({"math_gain": effect, "attendance": att_effect}),
        description=description,
    )


def fuzzy_scenario(
    n: int = 5000,
    *,
    seed: int = 0,
    effect: float = 4.0,
) -> Scenario:
    """Invented fuzzy design: a benefit households may claim when an income index is below 0.

    Households have an ``income_index`` (standardised, three decimals); those below 0 are eligible
    (``treated="below"``). Take-up is partial: 15% of households obtain the benefit whatever their
    eligibility (through another route), 60% claim it exactly when eligible, 25% never claim. So the
    take-up probability jumps from 0.15 (ineligible side) to 0.75 (eligible side) at the cutoff.
    The outcome ``food_security`` depends on take-up; households who claim only when eligible gain
    ``effect`` points, the others who take up gain 2.5, and the groups differ in their levels, so a
    naive comparison of takers and non-takers is biased while the ratio of jumps is not.
    Covariates: ``household_size``, ``head_age``, ``urban``; clusters: ``district``.

    Parameters
    ----------
    n : int, default 5000
        Number of households (at least 100).
    seed : int, default 0
        Seed of the ``numpy.random.Generator`` that draws every value.
    effect : float, default 4.0
        The true local average treatment effect (effect on those whose take-up follows
        eligibility) at the cutoff.

    Returns
    -------
    Scenario
        ``takeup`` is ``"received_benefit"`` (0/1); ``true_effect`` is ``effect``.

    Examples
    --------
    >>> scenario = fuzzy_scenario(seed=2)
    >>> scenario.takeup
    'received_benefit'
    """
    n = _check_n(n)
    seed = _check_seed(seed)
    effect = float(effect)
    rng = np.random.default_rng(seed)
    cutoff = 0.0
    n_districts = 50

    district_effect = rng.normal(0.0, 1.0, n_districts)
    district = rng.integers(0, n_districts, n)
    dq = district_effect[district]
    income = np.round(0.3 + 0.4 * dq + np.sqrt(0.84) * rng.standard_normal(n), 3)
    x = income - cutoff
    eligible = income < cutoff

    # Compliance types are drawn independently of the score, so their shares are the same on both
    # sides of the cutoff and the ratio of jumps identifies the compliers' effect.
    u = rng.random(n)
    always = u < 0.15
    complier = (u >= 0.15) & (u < 0.75)
    takeup = (always | (complier & eligible)).astype(np.int64)

    household_size = (1 + rng.poisson(np.exp(0.9 - 0.15 * x))).astype(np.int64)
    head_age = np.clip(np.round(44.0 + 3.0 * x + 11.0 * rng.standard_normal(n)), 18, 90).astype(
        np.int64
    )
    urban = (rng.random(n) < _expit(0.2 + 0.5 * x + 0.3 * dq)).astype(np.int64)

    type_level = np.where(always, -1.5, np.where(complier, 0.0, 1.0))
    gain = np.where(always, 2.5, effect)
    noise_sd = 5.0 * np.sqrt(1.0 + 0.3 * x**2)
    food_security = (
        50.0
        + 4.0 * x
        - 0.8 * x**2
        + 2.0 * np.sin(x)
        + 0.6 * (household_size - 3)
        + 1.5 * dq
        + type_level
        + gain * takeup
        + noise_sd * rng.standard_normal(n)
    )
    food_security = np.round(food_security, 2)

    data = pd.DataFrame(
        {
            "income_index": income,
            "food_security": food_security,
            "received_benefit": takeup,
            "household_size": household_size,
            "head_age": head_age,
            "urban": urban,
            "district": district.astype(np.int64),
        }
    )
    description = _describe(
        "Invented fuzzy design: households with an income index below 0 are eligible for a "
        "benefit; take-up is partial (probability 0.15 when ineligible, 0.75 when eligible).",
        seed,
        f"By construction the take-up probability jumps by 0.60 and the local average treatment "
        f"effect on food_security is {effect:g} points at the cutoff.",
    )
    return Scenario(
        data=data,
        score="income_index",
        cutoff=cutoff,
        treated="below",
        outcome=("food_security",),
        takeup="received_benefit",
        covariates=("household_size", "head_age", "urban"),
        cluster="district",
        weights=None,
        true_effect=effect,
        true_effects=MappingProxyType({"food_security": effect}),
        description=description,
    )


def discrete_scenario(
    n: int = 4000,
    *,
    seed: int = 0,
    relative_effect: float = 0.25,
) -> Scenario:
    """Invented discrete-score design: a health programme that starts at age 65.

    People aged 50 to 84 are observed with ``age`` in whole years, so the score has mass points
    (35 distinct values, fewer people at older ages). Everyone aged 65 or more is covered
    (``treated="above"``). The outcome ``doctor_visits`` is a yearly count (Poisson with a
    person-level frailty) whose mean rises smoothly with age and is multiplied by
    ``1 + relative_effect`` under the programme. Covariates: ``female`` (0/1) and
    ``chronic_conditions`` (a count rising with age).

    Parameters
    ----------
    n : int, default 4000
        Number of people (at least 100).
    seed : int, default 0
        Seed of the ``numpy.random.Generator`` that draws every value.
    relative_effect : float, default 0.25
        Proportional rise in expected visits caused by the programme.

    Returns
    -------
    Scenario
        ``true_effect`` is the jump in expected visits per year at age 65, in visits.

    Examples
    --------
    >>> scenario = discrete_scenario(seed=4)
    >>> int(scenario.data["age"].nunique()) <= 35
    True
    """
    n = _check_n(n)
    seed = _check_seed(seed)
    relative_effect = float(relative_effect)
    if not relative_effect > -1.0:
        raise ValueError(
            f"`relative_effect` must be greater than -1; got {shown(relative_effect)}. "
            "Pass a proportional change such as 0.25 (a 25% rise)."
        )
    rng = np.random.default_rng(seed)
    cutoff = 65.0
    ages = np.arange(50, 85)
    p_age = np.exp(-0.035 * (ages - 50))
    age = rng.choice(ages, size=n, p=p_age / p_age.sum()).astype(np.int64)
    a = age - cutoff
    covered = (age >= cutoff).astype(float)

    female = (rng.random(n) < np.clip(0.52 + 0.004 * a, 0.0, 1.0)).astype(np.int64)
    chronic_rate = np.exp(0.075 + 0.045 * a)
    chronic = rng.poisson(chronic_rate).astype(np.int64)

    gamma, frailty_sd, log_jump = 0.15, 0.4, np.log1p(relative_effect)
    log_mean = (
        0.9
        + 0.02 * a
        + 0.0004 * a**2
        + 0.05 * female
        + gamma * chronic
        + log_jump * covered
        + frailty_sd * rng.standard_normal(n)
    )
    visits = rng.poisson(np.exp(log_mean)).astype(np.int64)

    # E[visits | age] = exp(f(a) + log_jump*covered) * E[exp(0.05 female)] * E[exp(gamma C)]
    # * E[exp(frailty)]: a Poisson count C with rate lambda has E[exp(gamma C)] =
    # exp(lambda (e^gamma - 1)); a normal frailty contributes exp(sd^2 / 2).
    p_female = 0.52
    base_at_cutoff = (
        np.exp(0.9)
        * (1.0 - p_female + p_female * np.exp(0.05))
        * np.exp(np.exp(0.075) * np.expm1(gamma))
        * np.exp(frailty_sd**2 / 2.0)
    )
    true_effect = float(base_at_cutoff * relative_effect)

    data = pd.DataFrame(
        {
            "age": age,
            "doctor_visits": visits,
            "female": female,
            "chronic_conditions": chronic,
        }
    )
    description = _describe(
        "Invented discrete-score design: a health programme covers everyone aged 65 or more; "
        "age is recorded in whole years, so the score has mass points.",
        seed,
        f"By construction the programme multiplies expected doctor visits by "
        f"{1.0 + relative_effect:g}, a jump of {true_effect:.4f} visits per year at age 65.",
    )
    return Scenario(
        data=data,
        score="age",
        cutoff=cutoff,
        treated="above",
        outcome=("doctor_visits",),
        takeup=None,
        covariates=("female", "chronic_conditions"),
        cluster=None,
        weights=None,
        true_effect=true_effect,
        true_effects=MappingProxyType({"doctor_visits": true_effect}),
        description=description,
    )


def manipulated_scenario(
    n: int = 5000,
    *,
    seed: int = 0,
    share_moved: float = 0.5,
    reach: float = 2.0,
    effect: float = 2.0,
) -> Scenario:
    """Invented sharp design whose score was manipulated just below the cutoff.

    Candidates sit a certification exam (``exam_score``, two decimals) with a pass mark of 60
    (``treated="above"``). A share ``share_moved`` of the candidates whose honest score lies within
    ``reach`` points below the pass mark are re-graded to a score spread evenly over the ``reach``
    points just above it. The score density therefore dips below and bunches above the cutoff, and
    the movers (weaker candidates) pull the covariate ``prior_gpa`` and the outcome ``earnings``
    (thousands per year) slightly down just above the pass mark. Use it to demonstrate density
    tests; a cutoff estimate on it is biased by design.

    Parameters
    ----------
    n : int, default 5000
        Number of candidates (at least 100).
    seed : int, default 0
        Seed of the ``numpy.random.Generator`` that draws every value.
    share_moved : float, default 0.5
        Share (0 to 1) of the candidates within ``reach`` below the pass mark who are moved.
        ``share_moved=0`` gives an honest sharp design.
    reach : float, default 2.0
        Width, in score points, of the band below the pass mark that is manipulated, and of the
        band above it where movers land.
    effect : float, default 2.0
        The causal effect of passing on expected earnings, which an analysis of the manipulated
        score does not recover.

    Returns
    -------
    Scenario
        ``true_effect`` is ``effect`` (the effect of passing, not what a naive estimate finds).

    Examples
    --------
    >>> honest = manipulated_scenario(seed=5, share_moved=0.0)
    >>> honest.cutoff
    60.0
    """
    n = _check_n(n)
    seed = _check_seed(seed)
    share_moved = _check_unit_interval("share_moved", share_moved)
    if not isinstance(reach, (int, float, np.floating, np.integer)) or not 0.0 < reach <= 20.0:
        raise ValueError(
            f"`reach` must be a number greater than 0 and at most 20; got {shown(reach)}. "
            "Pass a width in score points such as 2.0."
        )
    reach = float(reach)
    effect = float(effect)
    rng = np.random.default_rng(seed)
    cutoff = 60.0

    # A logistic map keeps the honest score inside (0, 100) with a smooth density (median about 58).
    honest = np.round(100.0 * _expit(0.32 + 0.5 * rng.standard_normal(n)), 2)
    near_below = (honest >= cutoff - reach) & (honest < cutoff)
    moved = near_below & (rng.random(n) < share_moved)
    landing = cutoff + reach * rng.random(n)
    exam_score = np.round(np.where(moved, landing, honest), 2)
    passed = (exam_score >= cutoff).astype(float)

    # Outcome and covariate follow the honest score (ability); only the recorded score is moved.
    h = honest - cutoff
    prior_gpa = np.round(2.8 + 0.03 * h + 0.35 * rng.standard_normal(n), 2)
    earnings = np.round(
        32.0
        + 0.35 * h
        + 0.004 * h**2
        + effect * passed
        + (3.0 + 0.05 * np.abs(h)) * rng.standard_normal(n),
        2,
    )

    data = pd.DataFrame(
        {"exam_score": exam_score, "earnings": earnings, "prior_gpa": prior_gpa}
    )
    description = _describe(
        f"Invented manipulated design: candidates pass an exam at a score of 60; "
        f"{share_moved:.0%} of those scoring within {reach:g} points below the mark were "
        f"re-graded to just above it.",
        seed,
        f"By construction passing raises expected earnings by {effect:g} (thousands), but the "
        f"re-graded candidates bias a cutoff comparison of the recorded score"
        + (" (none were moved here)." if share_moved == 0.0 else "."),
    )
    return Scenario(
        data=data,
        score="exam_score",
        cutoff=cutoff,
        treated="above",
        outcome=("earnings",),
        takeup=None,
        covariates=("prior_gpa",),
        cluster=None,
        weights=None,
        true_effect=effect,
        true_effects=MappingProxyType({"earnings": effect}),
        description=description,
    )
