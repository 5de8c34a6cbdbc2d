"""The rows of the design checks summary, built from results already computed.

One copy, two callers: ``Design.checks`` (``estimate.diagnostics.checks``) computes the main fit,
the density test, balance and the score profile through the design's caches and hands them here;
a board (``notebook.compute.assemble_checks``) hands over the results its panels already hold, so
the summary never runs a diagnostic a second time. Each input is the result, or the text of the
input error its computation raised; ``balance`` is None when no covariates are declared.
"""
from __future__ import annotations

from typing import Any

from ..results.diagnostics import Checks
from .design import FEW_OBSERVATIONS, WEAK_F

ALPHA = 0.05            # convention: the level at which a check (and a diagnostic's warning) flags


def check_rows(fit: Any, density: Any, balance: Any, profile: Any, *, adjust: bool) -> Checks:
    """The design checks summary from the four results it reads.

    Parameters
    ----------
    fit : Fit, or the error text of the main fit
    density : DensityTest, or its error text
    balance : Balance (at the rule "mse"), its error text, or None without covariates
    profile : ScoreProfile, or its error text
    adjust : whether the fit adjusts for the covariates (noted beside a balance flag)

    Returns
    -------
    Checks
    """
    rows, warnings = [], []

    def add(check, status, detail):
        rows.append({"check": check, "status": status, "detail": detail})
        if status == "flag":
            warnings.append(f"{check}: {detail}")

    if isinstance(fit, str):
        add("main estimate", "error", fit)
        fit = None
    if isinstance(density, str):
        add("manipulation (density test)", "error", density)
    else:
        add("manipulation (density test)", "flag" if density.p_value < ALPHA else "ok",
            f"p = {density.p_value:.3f} ({density.method}); density {density.density_below:.4g} below, "
            f"{density.density_above:.4g} above")
    if balance is None:
        add("covariate balance", "not applicable", "no covariates declared")
    elif isinstance(balance, str):
        add("covariate balance", "error", balance)
    else:
        worst = min(r["p_value_holm"] for r in balance.rows)
        status = "flag" if (worst < ALPHA or balance.joint_p_value < ALPHA) else "ok"
        detail = f"smallest Holm p = {worst:.3f}; joint p = {balance.joint_p_value:.3f}"
        if status == "flag" and adjust:
            detail += "; covariate adjustment does not repair imbalance"
        add("covariate balance", status, detail)
    if fit is not None:
        if fit.first_stage_f is not None:
            add("first stage strength", "flag" if fit.first_stage_f < WEAK_F else "ok",
                f"F = {fit.first_stage_f:.1f} (common practice: F < 10 is weak)")
        else:
            add("first stage strength", "not applicable", "sharp design")
        few = min(fit.n_used)
        add("observations in the window", "flag" if few < FEW_OBSERVATIONS else "ok",
            f"{fit.n_used[0]} below, {fit.n_used[1]} above")
    if isinstance(profile, str):
        add("score profile", "error", profile)
    else:
        discrete = [w for w in profile.warnings if w.startswith("Few distinct")]
        heaped = [w for w in profile.warnings if w.startswith("Heaping")]
        add("discrete score", "flag" if discrete else "ok",
            discrete[0] if discrete else "enough distinct score values in the window")
        add("heaping at round values", "flag" if heaped else "ok", heaped[0] if heaped else "no heaping detected")
    return Checks(rows=tuple(rows), warnings=tuple(warnings))
