"""Run seamline on two invented scenarios and print what an analyst would read.

Usage: ``python -m seamline.demo`` (this is what ``make demo`` runs). Both data sets are invented
by :mod:`seamline.demo_data` with a fixed seed; they describe no real programme.
"""
from __future__ import annotations

import sys
from typing import TextIO

import pandas as pd

from . import Design
from .demo_data import Scenario, fuzzy_scenario, sharp_scenario

SEED = 0
_RULE = "=" * 88


def _format_float(value: float) -> str:
    return f"{value:.4f}"


def _show_scenario(heading: str, scenario: Scenario, out: TextIO) -> None:
    design = Design(scenario.data, **scenario.design_kwargs())
    fit = design.fit()
    print(_RULE, file=out)
    print(f"{heading} -- INVENTED DATA", file=out)
    print(_RULE, file=out)
    print(scenario.description, file=out)
    print(f"Rows: {len(scenario.data)}; score: {scenario.score}; cutoff: {scenario.cutoff:g}; "
          f"treated side: {scenario.treated}.", file=out)
    print(file=out)
    print(f"Fit of {fit.outcome} (default options) -- invented data:", file=out)
    print(fit.table().to_string(index=False, float_format=_format_float), file=out)
    true_effect = scenario.true_effects[fit.outcome]
    print(f"True effect built into the invented data: {true_effect:.4f}", file=out)
    print(file=out)
    print("Bandwidths by rule (design.bandwidths()):", file=out)
    bandwidths = design.bandwidths()
    if isinstance(bandwidths, pd.DataFrame):
        print(bandwidths.to_string(index=False, float_format=_format_float), file=out)
    else:
        print(bandwidths, file=out)
    print(file=out)
    if fit.warnings:
        print("Warnings:", file=out)
        for warning in fit.warnings:
            print(f"  - {warning}", file=out)
    else:
        print("Warnings: none", file=out)
    print(file=out)


def main(out: TextIO | None = None) -> int:
    """Fit the invented sharp and fuzzy scenarios and print their tables, bandwidths and warnings.

    Parameters
    ----------
    out : text stream, optional
        Where to print (default: standard output).

    Returns
    -------
    int
        Exit status 0.
    """
    out = sys.stdout if out is None else out
    print("seamline demo: every number below comes from INVENTED data "
          f"(seamline.demo_data, seed={SEED}).", file=out)
    print(file=out)
    _show_scenario("Sharp design: tutoring grant below a reading score of 40",
                   sharp_scenario(seed=SEED), out)
    _show_scenario("Fuzzy design: benefit eligibility below an income index of 0",
                   fuzzy_scenario(seed=SEED), out)
    return 0


if __name__ == "__main__":
    sys.exit(main())
