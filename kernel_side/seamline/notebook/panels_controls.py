"""The board view's controls: outcome, bandwidth rule and manual bandwidth, kernel, degree, variance,
donut, confidence level and the inference settings (the bias-aware bound; the Local randomization
tab's window and statistic).

``ViewControls`` is a base class of ``BoardView`` (panels.py): it builds the controls, passes each
change to ``board.set_option`` (a value that cannot be used is shown beside the controls and
changes nothing), and shows the board's current options in them without calling back.

CSS classes: ``seamline-controls`` (the row), ``seamline-control-<name>`` (each control),
``seamline-control-manual-bandwidth``.
"""
from __future__ import annotations

from typing import Any

import ipywidgets as widgets
import pandas as pd

from . import panels_inference, static
from .controls_designs import DesignsControls
from .static import error_html

_RULES = (("MSE-optimal", "mse"), ("MSE-optimal, each side", "mse-split"),
          ("coverage-optimal", "coverage"), ("Imbens-Kalyanaraman", "ik"), ("manual", "manual"))
_KERNELS = ("triangular", "uniform", "epanechnikov")
_DEGREES = (("0 (local constant)", 0), ("1 (local linear)", 1), ("2 (local quadratic)", 2),
            ("3 (local cubic)", 3))
_VARIANCES = (("bias-reduced HC2", "bias-reduced"), ("nearest neighbours", "neighbors"),
              ("HC0", "hc0"), ("HC1", "hc1"), ("HC2", "hc2"), ("HC3", "hc3"))
_LEVELS = (("90%", 0.90), ("95%", 0.95), ("99%", 0.99))
_CONTROL = {"description_width": "70px"}


def _board_options(state) -> dict[str, Any]:
    """The options the board's current inputs hold, completed from its current fit.

    The manual bandwidth shown is the one the inputs hold (never an older fit's, so a slider
    being dragged does not jump back); under a rule it is the current fit's selected bandwidth."""
    options: dict[str, Any] = dict(getattr(state, "options", None) or {})
    bandwidth = options.get("bandwidth")
    if isinstance(bandwidth, (int, float)):
        options["_bandwidth_now"] = float(bandwidth)
    elif isinstance(bandwidth, tuple):
        options["_bandwidth_now"] = float(bandwidth[0])
    fit = static._fit(state)
    if fit is not None and "fit" not in getattr(state, "pending", ()):
        options.setdefault("outcome", fit.outcome)
        options.setdefault("kernel", fit.kernel)
        options.setdefault("degree", fit.degree)
        options.setdefault("level", fit.level)
        options.setdefault("donut", fit.donut)
        options.setdefault("variance", fit.variance)
        options["_resolved_variance"] = fit.variance
        options.setdefault("_bandwidth_now", float(fit.bandwidth[0]))
    return options


def _outcomes(state) -> tuple[str, ...]:
    outcomes = getattr(state, "outcomes", None)
    if outcomes:
        return tuple(outcomes)
    fit = static._fit(state)
    return (fit.outcome,) if fit is not None else ()


class ViewControls:
    """The controls of a ``BoardView`` (which sets ``board``, ``_syncing`` and ``_message``)."""

    def _build_controls(self) -> widgets.Box:
        lay = widgets.Layout(width="235px", margin="2px 10px 2px 0")
        self._outcome = widgets.Dropdown(options=_outcomes(self.board) or ("",), description="outcome",
                                         style=_CONTROL, layout=lay)
        self._rule = widgets.Dropdown(options=_RULES, description="bandwidth", style=_CONTROL, layout=lay)
        self._manual = widgets.FloatSlider(value=1.0, min=0.01, max=10.0, step=0.01, readout_format=".3g",
                                           description="manual h", continuous_update=False,
                                           style=_CONTROL, layout=widgets.Layout(width="300px"))
        self._kernel = widgets.Dropdown(options=_KERNELS, description="kernel", style=_CONTROL, layout=lay)
        self._degree = widgets.Dropdown(options=_DEGREES, description="degree", style=_CONTROL, layout=lay)
        self._variance = widgets.Dropdown(options=_VARIANCES, description="variance", style=_CONTROL,
                                          layout=lay)
        self._donut = widgets.BoundedFloatText(value=0.0, min=0.0, max=1e12, step=0.1,
                                               description="donut", style=_CONTROL, layout=lay,
                                               continuous_update=False)
        self._level = widgets.Dropdown(options=_LEVELS, description="CI level", style=_CONTROL, layout=lay)
        self._smoothness = panels_inference.smoothness_control(lay)     # M of the bias-aware interval
        self._smoothness.observe(self._changed("smoothness"), names="value")
        # the Local randomization tab's own controls (shown in that tab, not in this row)
        self._lr_controls, self._window, self._statistic = panels_inference.randomization_controls(lay)
        self._window.observe(self._changed("window"), names="value")
        self._statistic.observe(self._changed("statistic"), names="value")
        for control, name in ((self._outcome, "outcome"), (self._kernel, "kernel"),
                              (self._degree, "degree"), (self._variance, "variance"),
                              (self._donut, "donut"), (self._level, "level")):
            control.observe(self._changed(name), names="value")
            control.add_class(f"seamline-control-{name}")
        self._rule.observe(self._rule_changed, names="value")
        self._rule.add_class("seamline-control-bandwidth")
        self._manual.observe(self._manual_changed, names="value")
        self._manual.add_class("seamline-control-manual-bandwidth")
        self._designs = DesignsControls(self)         # effect (power) and headline cutoff
        box = widgets.Box(
            [self._outcome, self._rule, self._manual, self._kernel, self._degree, self._variance,
             self._donut, self._level, self._smoothness, *self._designs.widgets],
            layout=widgets.Layout(display="flex", flex_flow="row wrap",
                                  border_top="1px solid #e0e0e0", padding="6px 0 4px 0"))
        box.add_class("seamline-controls")
        return box

    def _changed(self, name: str):
        def handler(change):
            if not self._syncing:
                self._apply(name, change["new"])
        return handler

    def _rule_changed(self, change):
        if self._syncing:
            return
        manual = change["new"] == "manual"
        self._manual.disabled = not manual
        self._apply("bandwidth", float(self._manual.value) if manual else change["new"])

    def _manual_changed(self, change):
        if not self._syncing and self._rule.value == "manual":
            self._apply("bandwidth", float(change["new"]))

    def _apply(self, name: str, value: Any) -> None:
        """Pass one control change to the board; show a failure beside the controls. The board
        calls back (``_on_change``) to show the change; nothing else is sent per change, so a
        dragged slider's messages are handled quickly."""
        try:
            self.board.set_option(name, value)
            if self._message.value:
                self._message.value = ""
        except Exception as exc:  # noqa: BLE001 - the user sees it; the kernel lives on
            self._message.value = error_html(f"{type(exc).__name__}: {exc}",
                                             title=f"The {name} was not changed")
            self._sync_controls()

    def _sync_controls(self) -> None:
        """Show the board's current options in the controls without calling back into the board.

        Each control's options, value and state change under one ``hold_sync``, so the front end
        receives them as one update (never a value that is not among the options).
        """
        state = self.board.state()
        opts = _board_options(state)
        self._syncing = True
        try:
            outcomes = _outcomes(state)
            with self._outcome.hold_sync():
                if outcomes and tuple(self._outcome.options) != outcomes:
                    self._outcome.options = outcomes
                if opts.get("outcome") in outcomes:
                    self._outcome.value = opts["outcome"]
                self._outcome.disabled = len(outcomes) < 2
            self._sync_bandwidth(opts, state)
            if opts.get("kernel") in _KERNELS:
                self._kernel.value = opts["kernel"]
            degree = opts.get("degree")
            if degree is not None:
                self._set_choice(self._degree, _DEGREES, int(degree), f"{int(degree)}")
            with self._variance.hold_sync():
                if opts.get("_resolved_variance") == "cluster":
                    # a declared cluster column fixes the variance to cluster-robust
                    self._set_choice(self._variance, (("cluster-robust (design has clusters)", "cluster"),),
                                     "cluster", "cluster")
                    self._variance.disabled = True
                else:
                    variance = opts.get("variance")
                    if variance not in [v for _label, v in _VARIANCES]:
                        variance = "bias-reduced"
                    self._set_choice(self._variance, _VARIANCES, variance, variance)
                    self._variance.disabled = False
            donut = opts.get("donut")
            if donut is not None:
                self._donut.value = float(donut)
            level = opts.get("level")
            if level is not None:
                self._set_choice(self._level, _LEVELS, float(level), f"{100 * float(level):g}%")
            self._designs.sync(state)
            if "smoothness" in opts:
                self._smoothness.value = panels_inference.smoothness_text(opts["smoothness"])
            if "window" in opts:
                self._window.value = panels_inference.window_text(opts["window"])
            if opts.get("statistic") in self._statistic.options:
                self._statistic.value = opts["statistic"]
        finally:
            self._syncing = False

    @staticmethod
    def _set_choice(control, base, value, label) -> None:
        options = [tuple(o) for o in base]
        if value not in [v for _l, v in options]:
            options.append((label, value))
        with control.hold_sync():
            if [tuple(o) for o in control.options] != options:
                control.options = options
            control.value = value

    def _sync_bandwidth(self, opts: dict[str, Any], state) -> None:
        rule = opts.get("bandwidth")
        now = opts.get("_bandwidth_now")
        selectors = state.results.get("bandwidths")
        values = []
        if isinstance(selectors, pd.DataFrame) and len(selectors):
            values = [float(v) for v in selectors[["bandwidth_below", "bandwidth_above"]].to_numpy().ravel()]
        inside = now is not None and self._manual.min <= now <= self._manual.max and self._manual.max > 1.0001
        if now is not None and not values:
            values.append(float(now))
        if inside and rule is not None and not isinstance(rule, str):
            values = []               # a manual value inside the range: keep the range, move the handle
            with self._manual.hold_sync():
                self._manual.value = float(now)
        if values:
            low, high = 0.25 * min(values), 2.5 * max(values)
            step = max((high - low) / 400.0, 1e-6)
            with self._manual.hold_sync():
                # widen before narrowing so the slider never holds min > max on the way
                self._manual.max = max(high, self._manual.min)
                self._manual.min = low
                self._manual.max = high
                self._manual.step = step
                if now is not None:
                    self._manual.value = min(max(float(now), low), high)
        if isinstance(rule, str) and rule in dict((v, k) for k, v in _RULES):
            self._rule.value = rule
            self._manual.disabled = rule != "manual"
        elif rule is not None:
            self._rule.value = "manual"
            self._manual.disabled = False
