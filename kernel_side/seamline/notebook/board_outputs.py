"""What a board shows and writes: its summary, the methods paragraph, exports, and its display in
the notebook (the widget view, with a static HTML copy for viewers without live widgets).

``BoardOutputs`` is a base class of ``Board`` (board.py), as ``Scheduler`` is: it reads the
board's state (``state``, ``wait``, ``paused``, ``_target``) and never changes its inputs.
"""
from __future__ import annotations

import logging
import math
import warnings
from pathlib import Path
from typing import Any

from ..errors import shown
from . import scheduler
from .designs_spec import cutoff_text
from .exports import CHART_FORMATS, TABLE_FORMATS, export_result, methods_text
from .scheduler import BoardState
from .spec import NotApplicable

log = logging.getLogger("seamline")


class BoardOutputs:
    """The presentation of a board: summary, methods paragraph, exports, view and displays."""

    def summary(self) -> dict[str, Any]:
        """A JSON-ready summary for the front end and headers (never waits: a pending headline
        is reported with status "recomputing").

        Returns
        -------
        dict
            name, score, cutoff, outcome, kind, estimate, robust_ci ([low, high] or None),
            level, status, stale, paused, updated_at (ISO 8601 or None), error (or None).
        """
        state = self.state()
        fit = state.results.get("fit")
        fit = None if isinstance(fit, NotApplicable) else fit
        return {
            "name": self.name,
            "score": state.spec["score"],
            # cumulative cutoffs as text ("30, 60"), which the front end shows as written
            "cutoff": cutoff_text(state.spec["cutoff"]) if isinstance(state.spec["cutoff"], tuple)
            else state.spec["cutoff"],
            "outcome": state.options["outcome"],
            "kind": None if fit is None else fit.kind,
            "estimate": None if fit is None else _json_float(fit.estimate),
            "robust_ci": None if fit is None else [_json_float(v) for v in fit.robust_conf_int],
            "level": state.options["level"],
            "status": state.status,
            "stale": state.stale,
            "paused": state.paused,
            "updated_at": None if state.updated_at is None else state.updated_at.isoformat(timespec="seconds"),
            "reading": None if state.reading is None else list(state.reading),
            "error": state.errors.get("fit") or self._target.error,
        }

    def _current_state(self) -> BoardState:
        """The state once every panel belongs to the current inputs (waits unless paused)."""
        if not self.paused:
            self.wait()
        return self.state()

    def methods_paragraph(self) -> str:
        """The specification and results in prose for a paper's methods section (see
        ``seamline.export.methods.methods_paragraph``); waits for current results."""
        state = self._current_state()
        fit = state.results.get("fit")
        return methods_text(None if isinstance(fit, NotApplicable) else fit, state.results, state.errors,
                            state.spec["weights"])

    def export(self, what: str, fmt: str = "latex", path: str | Path | None = None, *,
               data_path: str | Path | None = None) -> str | bytes:
        """Render one table, chart or the methods paragraph of the current results (waits for
        them); write it when ``path`` is given.

        Parameters
        ----------
        what : "estimate", "sensitivity", "balance", "density", "placebo", "donut", "bins",
            "bandwidths", "first_stage", "by_cutoff", "decomposition" (a cutoff column), "subgroups",
            "power" (the curve), "sample_size", the inference tables "intervals", "bias_aware",
            "bias_aware_sensitivity", "weak_iv", "local_randomization", "windows",
            "randomization_sensitivity" (``compute_inference.EXPORTS``; charts of
            "bias_aware_sensitivity" and "windows"), "methods", or "script": a standalone Python script that
            rebuilds every number of the board from the data file ``data_path`` (CSV or Parquet;
            without it, a marked constant to edit), see ``seamline.export.script``
        fmt : tables: "latex" (booktabs), "markdown", "csv", "html", "text";
            charts: "svg", "png"; methods: "text", "markdown", "latex", "html"
        path : file to write (replaced if it exists); nothing is written without it

        Returns
        -------
        str, or bytes for "png"
        """
        if what == "script":
            from ..export.script import board_script
            return board_script(self, path, data_path=data_path)
        from ..options import check_option
        check_option("fmt", fmt, TABLE_FORMATS + CHART_FORMATS)
        state = self._current_state()
        if state.stale:
            warnings.warn(f"Board {shown(self.name)} is stale (paused with pending changes): the export shows the "
                          "results before those changes. Call refresh() first.", UserWarning, stacklevel=2)
        return export_result(state, what, fmt, path, weights=state.spec["weights"])

    # ---- display -------------------------------------------------------------------------------
    @property
    def view(self):
        """The board's widget view (``seamline.notebook.panels.BoardView``), made on first use."""
        if self._view is None:
            try:
                from .panels import BoardView
            except ImportError as exc:
                raise ImportError("seamline's board view needs ipywidgets and altair: install them with "
                                  "`pip install seamline` (ipywidgets is a dependency); the results are in board.results "
                                  f"meanwhile ({exc}).") from exc
            self._view = BoardView(self)
        return self._view

    def _mimebundle(self, charts: bool = True) -> dict[str, Any]:
        """One output bundle: the live widget view plus a static HTML rendition (text/html) that
        notebook viewers and nbconvert show when widgets are not live."""
        view = self.view
        from .panels import mimebundle
        bundle = dict(mimebundle(view, charts=charts))
        bundle["text/plain"] = repr(self)
        return bundle

    def show(self):
        """Display the board (widget view + static fallback) in the notebook; returns the handle.

        Without a live front end (headless runs) it first waits for every panel, so the saved
        output is complete; with one, the static copy follows once the board is idle."""
        from IPython.display import display
        live = scheduler.live_front_end()
        if not live:
            self.wait()
        handle = display(self._mimebundle(charts=not live), raw=True, display_id=True)
        if handle is not None:
            self._handles = [*self._handles[-3:], handle]
        self._fallback_dirty = live
        return handle

    def _ipython_display_(self) -> None:
        self.show()

    def _update_displays(self) -> None:
        """Refresh the static fallback of this board's displayed outputs, so a saved notebook shows
        the current numbers (after a cell when headless; when idle with a live front end)."""
        if not (self._fallback_dirty and self._handles):
            return
        self._fallback_dirty = False
        try:
            bundle = self._mimebundle()
        except Exception:
            log.exception("seamline: rendering the static rendition of board %r failed", self.name)
            return
        for handle in list(self._handles):
            handle.update(bundle, raw=True)


def _json_float(value: float) -> float | None:
    return float(value) if value is not None and math.isfinite(value) else None
