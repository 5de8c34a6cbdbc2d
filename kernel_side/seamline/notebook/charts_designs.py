"""Charts of the By cutoff, Subgroups and Power panels (Altair), in the style of ``charts``.

Like every board chart they are sent to the browser as Vega-Lite specs and drawn kernel-side to
SVG or PNG only for exports and the static copy (``charts.to_svg`` / ``charts.to_png``). The data
inside are the panels' summary numbers, never the raw rows.
"""
from __future__ import annotations

from typing import Any

import pandas as pd

from .charts_style import (HEIGHT, INK, MUTED, TREATED, UNTREATED, WIDTH, _alt, _configure, _finite, _p_is,
                           _pct, _records, _title, _zero_rule)

__all__ = ["DESIGNS_CHARTS", "cutoff_effects_chart", "group_effects_chart", "power_chart"]

#: Chart name -> the board result it draws.
DESIGNS_CHARTS = {"by_cutoff": "by_cutoff", "subgroups": "subgroups", "power": "power"}


def _label(value: Any) -> str:
    return f"{value:g}" if isinstance(value, float) else str(value)


def _effects_frame(result, pooled=None) -> pd.DataFrame:
    rows = [{"name": _label(r.label), "kind": "each on its own rows", "estimate": r.estimate,
             "lo": r.robust_ci_low, "hi": r.robust_ci_high, "n": f"{r.n_below} below, {r.n_above} above"}
            for r in result.rows if r.fitted]
    if pooled is not None:
        lo, hi = pooled.robust_conf_int
        rows.append({"name": "pooled", "kind": "pooled (normalised score)", "estimate": pooled.estimate,
                     "lo": float(lo), "hi": float(hi), "n": f"{pooled.n_used[0]} below, {pooled.n_used[1]} above"})
    frame = _records(_finite(pd.DataFrame(rows, columns=["name", "kind", "estimate", "lo", "hi", "n"]),
                             ["estimate", "lo", "hi"]))
    if frame.empty:
        notes = "; ".join(f"{_label(r.label)}: {r.note}" for r in result.rows if r.note)
        raise ValueError(f"no row could be fitted, so there is nothing to draw ({notes})")
    return frame


def _point_ranges(alt, data: pd.DataFrame, x_title: str, y_title: str, order: list[str]):
    kinds = {"each on its own rows": TREATED, "pooled (normalised score)": UNTREATED}
    present = [k for k in kinds if k in set(data["kind"])] or list(kinds)[:1]     # no legend entry for none
    color = alt.Color("kind:N", legend=alt.Legend(title=None) if len(present) > 1 else None,
                      scale=alt.Scale(domain=present, range=[kinds[k] for k in present]))
    x = alt.X("name:N", title=x_title, sort=order, axis=alt.Axis(labelAngle=0))
    tooltip = [alt.Tooltip("name:N", title=x_title), alt.Tooltip("estimate:Q", format=".4g"),
               alt.Tooltip("lo:Q", format=".4g", title="CI low"), alt.Tooltip("hi:Q", format=".4g", title="CI high"),
               alt.Tooltip("n:N", title="in the window")]
    base = alt.Chart(data)
    return [_zero_rule(alt),
            base.mark_rule(strokeWidth=1.8).encode(x=x, y=alt.Y("lo:Q", title=y_title), y2=alt.Y2("hi:Q"), color=color),
            base.mark_circle(size=60, opacity=1).encode(x=x, y=alt.Y("estimate:Q"), color=color, tooltip=tooltip)]


def _common_rule(alt, equality):
    if not equality.applies:
        return []
    frame = pd.DataFrame({"c": [float(equality.common_estimate)]})
    return [alt.Chart(frame).mark_rule(color=MUTED, strokeDash=[4, 3], strokeWidth=1).encode(y=alt.Y("c:Q"))]


def _test_text(equality) -> str:
    if not equality.applies:
        return "test of equal effects not computed"
    return (f"equal effects: chi-square {equality.statistic:.2f} on {equality.df} df, "
            f"{_p_is(equality.p_value)}; dashed: precision-weighted common effect")


def cutoff_effects_chart(effects, *, configure: bool = True):
    """Cutoff-specific estimates with robust intervals, and the pooled estimate (cutoff column).

    Parameters
    ----------
    effects : CutoffEffects (``Design.by_cutoff()``)

    Returns
    -------
    altair.LayerChart
    """
    alt = _alt()
    data = _effects_frame(effects, effects.pooled)
    order = [_label(r.label) for r in effects.rows] + (["pooled"] if effects.pooled is not None else [])
    layers = _point_ranges(alt, data, "cutoff", f"effect on {effects.outcome}", order) + _common_rule(alt, effects.equality)
    how = ([f"estimate and robust {_pct(effects.level)} CI, each fitted on its cutoff's units"]
           if effects.layout == "column" else
           [f"estimate and robust {_pct(effects.level)} CI, each fitted between its neighbouring cutoffs",
            "each effect is the increment of the treatment at its cutoff"])
    chart = alt.layer(*layers,
        width=WIDTH, height=HEIGHT,
        title=_title(alt, "Effects at each cutoff", [*how, _test_text(effects.equality)]))
    return _configure(chart, configure=configure)


def group_effects_chart(groups, *, configure: bool = True):
    """Subgroup estimates with robust intervals and the test of equal effects.

    Parameters
    ----------
    groups : GroupEffects (``Design.by_group(column)``)

    Returns
    -------
    altair.LayerChart
    """
    alt = _alt()
    data = _effects_frame(groups)
    order = [_label(r.label) for r in groups.rows]
    layers = _point_ranges(alt, data, groups.column, f"effect on {groups.outcome}", order) + _common_rule(alt, groups.equality)
    chart = alt.layer(*layers,
        width=WIDTH, height=HEIGHT,
        title=_title(alt, f"Effects by {groups.column}",
                     [f"estimate and robust {_pct(groups.level)} CI, each fitted on the group's rows",
                      _test_text(groups.equality)]))
    return _configure(chart, configure=configure)


def power_chart(report, *, configure: bool = True):
    """The power curve of the robust test at the pilot's size, with 80% power and the planned effect.

    Parameters
    ----------
    report : PowerReport (the board's "power" result)

    Returns
    -------
    altair.LayerChart
    """
    alt = _alt()
    curve = report.curve
    data = _records(curve.table())
    line = alt.Chart(data).mark_line(color=TREATED, strokeWidth=2).encode(
        x=alt.X("effect:Q", title=f"effect on {curve.outcome}"),
        y=alt.Y("power:Q", title="power", scale=alt.Scale(domain=[0, 1])),
        tooltip=[alt.Tooltip("effect:Q", format=".4g"), alt.Tooltip("power:Q", format=".3f")])
    marks = pd.DataFrame({"y": [0.8, 1 - curve.level], "what": ["80% power", "test size"]})
    rules = alt.Chart(marks).mark_rule(color=MUTED, strokeDash=[4, 3]).encode(y=alt.Y("y:Q"))
    labels = alt.Chart(marks).mark_text(align="left", dx=3, dy=-5, fontSize=9, color=INK).encode(
        x=alt.XValue(0), y=alt.Y("y:Q"), text=alt.Text("what:N"))
    layers = [line, rules, labels]
    points = [{"effect": report.detectable, "power": 0.8, "what": f"80% at {report.detectable:.3g}"}]
    if report.effect is not None and report.power is not None:
        points.append({"effect": report.effect, "power": report.power.power,
                       "what": f"planned {report.effect:g}: {report.power.power:.0%}"})
    dots = alt.Chart(pd.DataFrame(points))
    layers.append(dots.mark_circle(color=UNTREATED, size=50, opacity=1).encode(
        x=alt.X("effect:Q"), y=alt.Y("power:Q"), tooltip=[alt.Tooltip("what:N", title="")]))
    layers.append(dots.mark_text(align="left", dx=7, dy=8, fontSize=9, color=INK).encode(
        x=alt.X("effect:Q"), y=alt.Y("power:Q"), text=alt.Text("what:N")))
    subtitle = [f"robust test at size {1 - curve.level:.3g} with the pilot's {curve.n_pilot} observations",
                f"se scales as (n0 / n)^{curve.exponent:.3g} ({curve.scaling.replace('-', ' ')})"]
    chart = alt.layer(*layers, width=WIDTH, height=HEIGHT,
                      title=_title(alt, "Power against the effect", subtitle))
    return _configure(chart, configure=configure)


def designs_chart(results, what: str, usable, *, configure: bool = True):
    """The chart ``what`` (a key of ``DESIGNS_CHARTS``) of a board's results; ``usable(key)``
    returns a result or raises ValueError with the reason (``charts.chart_for``'s helper)."""
    value = usable(DESIGNS_CHARTS[what])
    if what == "by_cutoff":
        return cutoff_effects_chart(value, configure=configure)
    if what == "subgroups":
        return group_effects_chart(value, configure=configure)
    return power_chart(value, configure=configure)
