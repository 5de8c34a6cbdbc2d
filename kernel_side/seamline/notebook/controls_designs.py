"""The board view's controls for power and cumulative cutoffs: the effect to plan for and the
headline cutoff. Like every control they only call ``board.set_option``; a value that cannot be
used is shown beside the controls and changes nothing.

CSS classes: ``seamline-control-effect``, ``seamline-control-headline-cutoff``.
"""
from __future__ import annotations

from typing import Any

import ipywidgets as widgets

from .designs_spec import cutoff_layout

__all__ = ["DesignsControls"]

_STYLE = {"description_width": "70px"}


class DesignsControls:
    """The two controls of a ``BoardView`` (``widgets`` go into its control box)."""

    def __init__(self, view):
        self.view = view
        lay = widgets.Layout(width="235px", margin="2px 10px 2px 0")
        self.effect = widgets.Text(value="", placeholder="e.g. 0.2", description="effect", style=_STYLE,
                                   layout=lay, continuous_update=False,
                                   tooltip="The effect the Power tab plans for (outcome units); empty for none")
        self.effect.add_class("seamline-control-effect")
        self.effect.observe(self._effect_changed, names="value")
        self.headline = widgets.Dropdown(options=[("", None)], description="headline", style=_STYLE,
                                         layout=widgets.Layout(width="235px", margin="2px 10px 2px 0",
                                                               display="none"))
        self.headline.add_class("seamline-control-headline-cutoff")
        self.headline.observe(self._headline_changed, names="value")
        self.widgets = (self.effect, self.headline)

    def _effect_changed(self, change) -> None:
        if self.view._syncing:
            return
        text = str(change["new"]).strip()
        if not text:
            self.view._apply("effect", None)
            return
        try:
            value: Any = float(text)
        except ValueError:
            value = text               # the board names the problem (a number in the outcome's units)
        self.view._apply("effect", value)

    def _headline_changed(self, change) -> None:
        if not self.view._syncing and change["new"] is not None:
            self.view._apply("headline_cutoff", float(change["new"]))

    def sync(self, state) -> None:
        """Show the board's effect and headline cutoff (called with the view's ``_syncing`` set)."""
        spec = getattr(state, "spec", None) or {}
        effect = spec.get("effect")
        text = "" if effect is None else f"{effect:g}"
        if self.effect.value.strip() != text:
            self.effect.value = text
        if cutoff_layout(spec) == "cumulative":
            cutoffs = spec["cutoff"]
            chosen = spec.get("headline_cutoff")
            chosen = cutoffs[0] if chosen not in cutoffs else chosen
            options = [(f"cutoff {c:g}", c) for c in cutoffs]
            with self.headline.hold_sync():
                if list(self.headline.options) != options:
                    self.headline.options = options
                self.headline.value = chosen
                self.headline.layout.display = None
        elif self.headline.layout.display != "none":
            self.headline.layout.display = "none"
