"""Invented, seeded scenarios with several cutoffs, for demos of ``by_cutoff``, ``by_group`` and power.

Like ``seamline.demo_data`` (whose ``Scenario`` they return), every data set here is made up by
this module's own code from an explicit ``seed``; the stories are illustrations, not real
programmes or places, and each ``description`` says so. True effects are returned for checking how
close an estimate lands, never as reference values for tests of the estimator.

Examples
--------
>>> from seamline.demo_cutoffs import district_cutoffs_scenario
>>> scenario = district_cutoffs_scenario(3000, seed=1)
>>> scenario.cutoff
'district_threshold'
"""
from __future__ import annotations

import math
from types import MappingProxyType

import numpy as np
import pandas as pd

from .demo_scenario import Scenario, _check_n, _check_seed, _describe

__all__ = ["district_cutoffs_scenario", "cumulative_grants_scenario"]

DISTRICTS = ("north", "south", "east", "west")
DISTRICT_SHARES = np.array([0.35, 0.25, 0.25, 0.15])
DISTRICT_CUTOFFS = np.array([45.0, 50.0, 55.0, 60.0])
DISTRICT_MEANS = np.array([50.0, 48.0, 52.0, 55.0])     # need-index means; spread NEED_SD in every district
DISTRICT_EFFECTS = np.array([2.0, 1.6, 1.2, 0.8])
NEED_SD = 14.0
OWNER_GAP = 0.8                                          # owners gain this much more than renters


def district_cutoffs_scenario(n: int = 6000, *, seed: int = 0) -> Scenario:
    """Invented design with a cutoff that differs by district: a home-repair subsidy.

    Households get a need index (``need_index``, 0-100, one decimal). Each of four invented
    districts sets its own threshold (``district_threshold``: north 45, south 50, east 55, west 60);
    households at or above their district's threshold receive the subsidy. Outcome
    ``repair_spending`` (hundreds of currency units spent on repairs the next year) jumps by 2.0,
    1.6, 1.2 and 0.8 at the four thresholds, and by ``OWNER_GAP`` more for owners (``owner`` = 1,
    half the households, independent of the index) than for renters. ``household_size`` is a smooth
    covariate; ``block`` (street blocks nested in districts) is a cluster identifier.

    The pooled estimand on the normalised score (need_index - district_threshold) is the weighted
    effect sum_k w_k tau_k with w_k proportional to P(district k) times the density of district k's
    index at its threshold (Cattaneo, Keele, Titiunik & Vazquez-Bare 2016); ``true_effect`` holds
    it and ``cutoff_effects`` the four district effects.

    Parameters
    ----------
    n : int, default 6000
        Number of households (at least 100).
    seed : int, default 0
        Seed of the ``numpy.random.Generator`` that draws every value.

    Returns
    -------
    Scenario
    """
    n = _check_n(n)
    seed = _check_seed(seed)
    rng = np.random.default_rng(seed)
    k = rng.choice(len(DISTRICTS), n, p=DISTRICT_SHARES)
    threshold = DISTRICT_CUTOFFS[k]
    need = np.round(np.clip(rng.normal(DISTRICT_MEANS[k], NEED_SD), 0.0, 100.0), 1)
    gap = need - threshold
    owner = (rng.random(n) < 0.5).astype(np.int64)
    household_size = np.clip(np.round(2.6 + 0.02 * (need - 50.0) + rng.normal(0.0, 1.2, n)), 1, 9).astype(np.int64)
    block = (k * 40 + rng.integers(0, 40, n)).astype(np.int64)
    block_effect = rng.normal(0.0, 0.4, len(DISTRICTS) * 40)[block]
    effect = DISTRICT_EFFECTS[k] + OWNER_GAP * (owner - 0.5)
    spending = (3.0 + 0.04 * gap - 0.0004 * gap ** 2 + 0.3 * k + 0.25 * household_size + block_effect
                + effect * (gap >= 0) + (1.2 + 0.01 * np.abs(gap)) * rng.standard_normal(n))
    data = pd.DataFrame({"need_index": need, "district": np.array(DISTRICTS)[k], "district_threshold": threshold,
                         "repair_spending": np.round(spending, 2), "owner": owner, "household_size": household_size,
                         "block": block})
    # the density of a normal index at the district's threshold sets the district's weight near the cutoff
    density = np.exp(-0.5 * ((DISTRICT_CUTOFFS - DISTRICT_MEANS) / NEED_SD) ** 2) / (NEED_SD * math.sqrt(2 * math.pi))
    weights = DISTRICT_SHARES * density / np.sum(DISTRICT_SHARES * density)
    pooled = float(weights @ DISTRICT_EFFECTS)
    description = _describe(
        "Invented design with district thresholds: households whose need index reaches their district's "
        "threshold (north 45, south 50, east 55, west 60) receive a home-repair subsidy.",
        seed,
        f"By construction the subsidy raises expected repair_spending by 2.0, 1.6, 1.2 and 0.8 at the four "
        f"thresholds, by {OWNER_GAP:g} more for owners than for renters; the pooled effect on the normalised "
        f"score is {pooled:.4f} (weights {', '.join(f'{w:.3f}' for w in weights)}).")
    return Scenario(data=data, score="need_index", cutoff="district_threshold", treated="above",
                    outcome=("repair_spending",), takeup=None, covariates=("household_size",), cluster="block",
                    weights=None, true_effect=pooled, true_effects=MappingProxyType({"repair_spending": pooled}),
                    description=description,
                    cutoff_effects=MappingProxyType(dict(zip(DISTRICT_CUTOFFS.tolist(), DISTRICT_EFFECTS.tolist()))))


GRANT_CUTOFFS = (30.0, 60.0)
GRANT_EFFECTS = (1.5, 1.0)


def cumulative_grants_scenario(n: int = 5000, *, seed: int = 0) -> Scenario:
    """Invented design with cumulative cutoffs on one score: a basic grant at 30, a larger one at 60.

    Farms get a support score (``support_points``, 0-100, one decimal); at 30 points they receive a
    basic grant and at 60 a larger one. Outcome ``investment`` (thousands of currency units invested
    the next year) jumps by 1.5 at 30 and by a further 1.0 at 60 (``cutoff_effects``;
    ``true_effect`` is the jump at 30). ``farm_size`` is a smooth covariate and ``cooperative``
    (0/1) a pre-treatment group.

    Parameters
    ----------
    n : int, default 5000
        Number of farms (at least 100).
    seed : int, default 0
        Seed of the ``numpy.random.Generator`` that draws every value.

    Returns
    -------
    Scenario
    """
    n = _check_n(n)
    seed = _check_seed(seed)
    rng = np.random.default_rng(seed)
    points = np.round(100.0 * rng.beta(1.8, 2.0, n), 1)
    farm_size = np.round(np.exp(2.0 + 0.008 * points + rng.normal(0.0, 0.4, n)), 1)
    cooperative = (rng.random(n) < 0.4).astype(np.int64)
    grants = sum(e * (points >= c) for c, e in zip(GRANT_CUTOFFS, GRANT_EFFECTS))
    investment = (2.0 + 0.03 * points - 0.0002 * points ** 2 + 0.04 * farm_size + 0.3 * cooperative + grants
                  + (0.9 + 0.004 * points) * rng.standard_normal(n))
    data = pd.DataFrame({"support_points": points, "investment": np.round(investment, 2), "farm_size": farm_size,
                         "cooperative": cooperative})
    description = _describe(
        "Invented design with cumulative cutoffs: farms scoring 30 support points receive a basic grant, "
        "those scoring 60 a larger one.",
        seed,
        "By construction expected investment jumps by 1.5 at 30 points and by a further 1.0 at 60.")
    return Scenario(data=data, score="support_points", cutoff=GRANT_CUTOFFS, treated="above",
                    outcome=("investment",), takeup=None, covariates=("farm_size", "cooperative"), cluster=None,
                    weights=None, true_effect=GRANT_EFFECTS[0],
                    true_effects=MappingProxyType({"investment": GRANT_EFFECTS[0]}), description=description,
                    cutoff_effects=MappingProxyType(dict(zip(GRANT_CUTOFFS, GRANT_EFFECTS))))
