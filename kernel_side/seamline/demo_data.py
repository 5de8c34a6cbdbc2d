"""Invented, seeded cutoff-design scenarios for demos, tutorials and documentation.

Every data set here is made up by this module's own code: the stories (a tutoring grant, a benefit,
a programme that starts at 65, an exam pass mark) are illustrations, not real programmes, and every
frame says so in its scenario's ``description``. Each generator takes an explicit ``seed`` and
draws only from a ``numpy.random.Generator`` built from it, so the same seed gives the same rows.

The conditional means are smooth, the noise is heteroskedastic, and covariates are continuous at
the cutoff, so the only discontinuity at the cutoff is the one the generator puts there. That jump
is returned as ``Scenario.true_effect``; use it to see how close an estimate lands, never as a
reference value for tests of the estimator (invented data is for demos only).

Import every scenario from here: the discrete and manipulated scores are generated in
``demo_scores``, the ``Scenario`` record and the shared checks live in ``demo_scenario``, and the
scenarios with several cutoffs in ``demo_cutoffs``.

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

from types import MappingProxyType

import numpy as np
import pandas as pd

from .demo_scenario import _GH_NODES, _GH_WEIGHTS, Scenario, _check_n, _check_seed, _describe, _expit
from .demo_scores import discrete_scenario, manipulated_scenario

__all__ = [
    "Scenario",
    "sharp_scenario",
    "fuzzy_scenario",
    "discrete_scenario",
    "manipulated_scenario",
]


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
