"""Invented, seeded scenarios whose score needs care: a discrete score with mass points (age in
whole years) and a score manipulated just below a pass mark.

Like every generator in ``seamline.demo_data`` (which re-exports these two), the data are made up
from an explicit ``seed``; the stories are illustrations, not real programmes, and each
``description`` says so.
"""
from __future__ import annotations

from types import MappingProxyType

import numpy as np
import pandas as pd

from .demo_scenario import Scenario, _check_n, _check_seed, _check_unit_interval, _describe, _expit
from .errors import shown

__all__ = ["discrete_scenario", "manipulated_scenario"]


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
