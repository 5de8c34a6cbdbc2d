"""The live view of a board: header, controls and one tab per diagnostic, as ipywidgets.

``BoardView(board)`` is a thin view (STYLE habit 10): every number comes from ``board.state()``,
every control calls ``board.set_option(name, value)``, and the view re-renders the header and
the open tab when the board calls back through ``board.on_change`` (from its worker thread);
other tabs are rendered when opened. Charts are sent to the browser as Vega-Lite specs with
their summary data inline (``application/vnd.vegalite.v5+json`` in an ``ipywidgets.Output``,
drawn by JupyterLab's built-in renderer: no CDN, no request off the machine); kernel-side SVG is
only drawn for exports and for the static copy saved with the notebook. Tables come from the
result objects' own escaping HTML renderers. Nothing a user does in the view can raise into the
kernel: failures are shown inside the panel (class ``seamline-error``).

This module imports ipywidgets when it is imported; ``%load_ext seamline`` does not import it.

The controls are built and synced in ``panels_controls`` and the export buttons in
``panels_exports`` (base classes of ``BoardView``); the tabs' HTML comes from ``static``.

CSS classes (for styling and browser tests): ``seamline-board`` (the whole view),
``seamline-header-box``, ``seamline-controls``, ``seamline-progress``, ``seamline-tabs``,
``seamline-panel-<name>`` for name in estimate, bandwidths, balance, density, first-stage,
placebos; ``seamline-chart-live`` and ``seamline-chart-<chart>`` (a chart drawn by the browser),
``seamline-pending`` (a panel updating for new settings), ``seamline-export`` (a panel's export
buttons), ``seamline-export-<format>`` (each button), ``seamline-export-result`` (what an export
produced), ``seamline-error`` (an error box).
"""
from __future__ import annotations

import threading
from collections.abc import Iterable
from typing import Any

import ipywidgets as widgets

from . import charts, panels_designs, static
from .identity_memo import IdentityMemo
from .panels_controls import ViewControls
from .panels_exports import ViewExports
from .static import PANEL_EXPORTS, PANEL_RESULTS, PANELS, error_html, header_html, panel_html

__all__ = ["BoardView", "mimebundle"]


def _css(panel: str) -> str:
    return f"seamline-panel-{panel.replace('_', '-')}"


#: The charts each tab draws (export names understood by ``charts.chart_for``).
TAB_CHARTS: dict[str, tuple[str, ...]] = {
    "estimate": ("estimate", "bias_aware_sensitivity"), "bandwidths": ("sensitivity",), "balance": ("balance",),
    "density": ("density",), "first_stage": ("first_stage",), "placebos": ("placebo", "donut"),
    **panels_designs.TAB_CHARTS,
    "local_randomization": ("windows",),
}


class BoardView(ViewControls, ViewExports, widgets.VBox):
    """Header, controls and diagnostic tabs of a seamline board, kept in step with the board.

    Parameters
    ----------
    board : seamline Board
        Needs ``state()``, ``set_option(name, value)``, ``export(what, fmt)``, ``watch(viewer,
        panels)``, ``on_change(callback)`` and ``on_progress(callback)``.

    Notes
    -----
    The view renders ``board.state()`` snapshots and never waits for the board: board callbacks
    arrive on the board's worker thread and control changes on whatever thread delivers widget
    messages, so rendering is serialised by a lock and only sets widget traits (never an Output
    context manager). Only the header and the open tab are rendered on a change; the other tabs
    are marked dirty and rendered when opened, and the board is told (``watch``) which results the
    open tab shows, so it computes those first. Charts go to the browser as Vega-Lite specs with
    their summary data inline (``charts.VEGA_LITE_MIME``, drawn by JupyterLab's own renderer); the
    tables and text are escaped HTML. A pending panel says so and shows its previous numbers
    dimmed, without charts.

    Examples
    --------
    >>> view = BoardView(board)          # doctest: +SKIP
    >>> view                             # doctest: +SKIP
    """

    def __init__(self, board, **kwargs):
        super().__init__(**kwargs)
        self.board = board
        self._syncing = False
        self._lock = threading.RLock()
        self._dirty: set[str] = set()
        self._paint: dict[str, Any] = {}          # tab -> newest state whose charts are to be drawn
        self._paint_wanted = threading.Event()
        self._painted = threading.Condition(self._lock)
        self._painting = False
        self._painter: threading.Thread | None = None
        self._closed = False
        self._unsubscribe: list = []
        self.add_class("seamline-board")
        self.layout = widgets.Layout(width="100%", max_width="1100px")

        self._header = widgets.HTML(layout=widgets.Layout(width="100%"))
        self._header.add_class("seamline-header-box")
        self._progress = widgets.IntProgress(
            value=0, min=0, max=len(PANELS) + 1, description="recomputing", bar_style="info",
            style={"description_width": "90px"},
            layout=widgets.Layout(width="320px", visibility="hidden", height="20px"))
        self._progress.add_class("seamline-progress")
        self._message = widgets.HTML()
        self._message.add_class("seamline-control-message")
        self._methods_out = widgets.VBox()
        methods = widgets.Button(description="Methods paragraph", icon="align-left",
                                 tooltip="Write the specification and diagnostics as prose",
                                 layout=widgets.Layout(width="auto"))
        methods.add_class("seamline-export-methods")
        methods.on_click(lambda _b: self._export("methods", "text", self._methods_out))

        self._controls = self._build_controls()
        self._panels: dict[str, widgets.HTML] = {}
        self._charts: dict[str, list[tuple[str, widgets.Output]]] = {}
        self._export_rows: dict[str, widgets.HBox] = {}
        self._export_bars: dict[str, tuple[widgets.VBox, widgets.VBox]] = {}
        # One layout and one style for every export button: each widget is a comm the front end
        # opens, so a view of six tabs sends about a third fewer of them.
        self._button_layout = widgets.Layout(width="auto", height="26px", margin="0 2px")
        self._button_style = widgets.ButtonStyle()
        boxes = []
        for key, _title in PANELS:
            body = widgets.HTML(layout=widgets.Layout(width="100%"))
            self._panels[key] = body
            outputs = []
            for what in TAB_CHARTS[key]:
                chart = widgets.Output(layout=widgets.Layout(min_width="380px"))
                chart.add_class("seamline-chart-live")
                chart.add_class(f"seamline-chart-{what.replace('_', '-')}")
                outputs.append((what, chart))
            self._charts[key] = outputs
            out = widgets.VBox()
            out.add_class("seamline-export-result")
            bar = widgets.VBox(layout=widgets.Layout(border_top="1px solid #eee", padding="4px 0 0 0"))
            bar.add_class("seamline-export")     # its buttons are made when the tab is first shown
            self._export_bars[key] = (bar, out)
            row = widgets.HBox([c for _w, c in outputs], layout=widgets.Layout(flex_flow="row wrap"))
            top = [self._lr_controls] if key == "local_randomization" else []
            box = widgets.VBox([*top, row, body, bar, out], layout=widgets.Layout(padding="6px 4px"))
            box.add_class(_css(key))
            boxes.append(box)
        self._tabs = widgets.Tab(children=boxes, titles=[title for _k, title in PANELS])
        self._tabs.add_class("seamline-tabs")
        self._tabs.observe(self._tab_changed, names="selected_index")

        from .paper_control import PaperControl  # "Add to paper table" (issue 10)
        self._paper = PaperControl(board)
        top = widgets.HBox([methods, self._paper, self._progress],
                           layout=widgets.Layout(align_items="center", flex_flow="row wrap"))
        self.children = [self._header, top, self._methods_out, self._controls, self._message,
                         self._tabs]
        self._watch()
        self._sync_controls()
        self._dirty = {k for k, _ in PANELS}
        self._render(["header", *((k for k, _ in PANELS) if self._eager else [self._open_tab()])])
        for method, callback in (("on_change", self._on_change), ("on_progress", self._on_progress)):
            subscribe = getattr(board, method, None)
            if callable(subscribe):
                self._unsubscribe.append(subscribe(callback))

    @property
    def _eager(self) -> bool:
        """Render every tab, not just the open one: without a live front end (headless runs save
        the widget state, and nobody opens tabs there). Read at each render: the front end's
        channel may open after the view is made."""
        from . import scheduler
        return not scheduler.live_front_end()

    def _open_tab(self) -> str:
        index = self._tabs.selected_index
        keys = [k for k, _ in PANELS]
        return keys[index] if isinstance(index, int) and 0 <= index < len(keys) else keys[0]

    def _watch(self) -> None:
        """Tell the board which results the open tab shows (computed right after the headline)."""
        watch = getattr(self.board, "watch", None)
        if callable(watch):
            watch(self, ("fit", *PANEL_RESULTS[self._open_tab()]))

    def _tab_changed(self, change) -> None:
        try:
            self._watch()
            tab = self._open_tab()
            if tab in self._dirty:
                self._render([tab])
        except Exception as exc:  # noqa: BLE001 - the view must never raise into the kernel
            self._header.value = error_html(f"{type(exc).__name__}: {exc}", title="The view could not update")

    # ---- rendering ------------------------------------------------------------------------
    def _busy(self, on: bool) -> None:
        with self._progress.hold_sync():
            self._progress.value = 0 if on else self._progress.max
            self._progress.layout.visibility = "visible" if on else "hidden"

    def panels_for(self, changed: Iterable[str] | None) -> list[str]:
        """Which parts of the view show any of the ``changed`` results ("header" included)."""
        changed = set(changed or ())
        known = set().union(*PANEL_RESULTS.values())
        if not changed or changed - known - {"status", "checks"}:
            return ["header", *(k for k, _ in PANELS)]
        parts = ["header"]
        parts.extend(key for key, _ in PANELS if changed & set(PANEL_RESULTS[key]))
        return parts

    def _render_all(self) -> None:
        self._dirty = {k for k, _ in PANELS}
        self._render(["header", self._open_tab()])

    def _render(self, parts: Iterable[str]) -> None:
        """Render the header and the named tabs that are open; mark the closed ones dirty."""
        with self._lock:
            state = self.board.state()
            open_tab = self._open_tab()
            for part in parts:
                if part != "header" and part != open_tab and not self._eager:
                    self._dirty.add(part)
                    continue
                try:
                    new = header_html(state) if part == "header" else panel_html(state, part, charts=False)
                except Exception as exc:  # noqa: BLE001
                    new = error_html(f"{type(exc).__name__}: {exc}")
                target = self._header if part == "header" else self._panels[part]
                if target.value != new:
                    target.value = new
                if part == "header":
                    continue
                self._dirty.discard(part)
                self._export_bar(part)
                self._draw_charts(part, state)
                for what in PANEL_EXPORTS.get(part, ()):
                    # Export buttons only where there is something to export (not on a sharp design's
                    # first stage, nor on a panel whose result failed).
                    display = None if static.export_available(state, what) else "none"
                    if self._export_rows[what].layout.display != display:
                        self._export_rows[what].layout.display = display

    def _draw_charts(self, tab: str, state) -> None:
        """Queue the tab's charts for the painter thread: building a spec takes a few tenths of a
        second, which the board's worker (and the other subscribers, such as the cell's chip)
        should not wait for. Only the newest request per tab is drawn. Headless (no live front
        end) the charts are drawn at once, so the saved widget state is complete."""
        if self._eager:
            self._paint_charts(tab, state)
            return
        with self._lock:
            self._paint[tab] = state
            if self._painter is None:
                self._painter = threading.Thread(target=self._paint_loop, name="seamline-view-charts",
                                                 daemon=True)
                self._painter.start()
            self._paint_wanted.set()

    def _paint_loop(self) -> None:
        while not self._closed:
            self._paint_wanted.wait(1.0)
            with self._lock:
                self._paint_wanted.clear()
                jobs, self._paint = self._paint, {}
                self._painting = bool(jobs)
            try:
                for tab, state in jobs.items():
                    self._paint_charts(tab, state)
            except Exception:  # noqa: BLE001 - a chart must never break the view
                pass
            finally:
                with self._lock:
                    self._painting = False
                    self._painted.notify_all()

    def settle_charts(self, timeout: float = 30.0) -> None:
        """Wait until every queued chart is drawn (tests and headless runs)."""
        with self._lock:
            self._painted.wait_for(lambda: not self._paint and not self._painting, timeout)

    def _paint_charts(self, tab: str, state) -> None:
        """Send the tab's charts to the browser as Vega-Lite specs (none while pending)."""
        pending = static.panel_pending(state, tab)
        for what, output in self._charts[tab]:
            outputs: tuple = ()
            if not pending:
                spec = chart_spec(state, what)
                if spec is not None:
                    outputs = ({"output_type": "display_data", "metadata": _EMBED,
                                "data": {charts.VEGA_LITE_MIME: spec, "text/plain": f"<seamline {what} chart>"}},)
            if tuple(output.outputs) != outputs:
                output.outputs = outputs      # a trait: safe from any thread (no context manager)

    def _on_change(self, board, changed=None) -> None:
        """Board callback (usually on the worker thread): re-render what changed; never raises."""
        try:
            status = str(getattr(board, "status", ""))
            parts = self.panels_for(changed)
            if "fit" in set(changed or ()) or parts[1:] == [k for k, _ in PANELS]:
                self._sync_controls()
            self._render(parts)
            self._progress.layout.visibility = "visible" if status == "recomputing" else "hidden"
        except Exception as exc:  # noqa: BLE001
            self._header.value = error_html(f"{type(exc).__name__}: {exc}", title="The view could not update")

    def _on_progress(self, done: int, total: int, label: str) -> None:
        """Board callback while results are recomputed: advance the progress bar."""
        try:
            # Shown while the panels the user waits for are recomputing; while the board fills
            # hidden tabs in the background the bar stays hidden and nothing is sent for it.
            waiting = str(getattr(self.board, "status", "")) == "recomputing"
            if not waiting and self._progress.layout.visibility == "hidden":
                return
            with self._progress.hold_sync():
                if label == "done" or total <= 0:
                    self._progress.value = self._progress.max
                    return
                self._progress.max = max(int(total), 1)
                self._progress.value = min(int(done), self._progress.max)
                reading = label == "partitions read"
                self._progress.description = "reading" if reading else "recomputing"
                self._progress.tooltip = f"{done} of {total} partitions read" if reading else f"computing the {label}"
                if waiting:
                    self._progress.layout.visibility = "visible"
        except Exception:  # noqa: BLE001 - a progress display must never fail a recompute
            pass

    def close(self) -> None:
        """Unsubscribe from the board and close the widgets."""
        for unsubscribe in self._unsubscribe:
            try:
                if callable(unsubscribe):
                    unsubscribe()
            except Exception:  # noqa: BLE001 - closing must not fail
                pass
        self._unsubscribe = []
        self._closed = True
        self._paint_wanted.set()
        watch = getattr(self.board, "watch", None)
        if callable(watch):
            watch(self, ())
        super().close()


# Vega-Embed options for JupyterLab's renderer: draw SVG (crisp, countable marks), no actions menu
# (its links point off the machine).
_EMBED = {charts.VEGA_LITE_MIME: {"embed_options": {"renderer": "svg", "actions": False}}}

_SPECS = IdentityMemo(48)


def chart_spec(state, what: str) -> dict | None:
    """The Vega-Lite spec of one chart of a board state, or None when its results are missing or
    do not apply (the panel's text says why). Kept by the identity of the results it draws."""
    inputs = static._chart_inputs(state, what)
    try:
        return _SPECS.get(what, inputs, lambda: charts.to_vega_lite(charts.chart_for(state, what)))
    except ValueError:
        return None


def mimebundle(view: BoardView, *, charts: bool = True) -> dict[str, Any]:
    """The output bundle of a displayed board: the live widget and its static HTML fallback.

    Front ends with the widget manager draw the widget; nbconvert and notebook viewers show the
    ``text/html`` copy (tables and inline SVG charts).

    Parameters
    ----------
    view : BoardView
    charts : bool, default True
        Draw the static copy's charts as SVG (kernel-side, so only when the copy is saved);
        False leaves them out until the board is idle.

    Returns
    -------
    dict
        MIME type -> data, ready for ``IPython.display.display(bundle, raw=True)``.
    """
    board = view.board
    return {
        "application/vnd.jupyter.widget-view+json": {
            "version_major": 2, "version_minor": 0, "model_id": view.model_id},
        "text/html": static.static_html(board.state(), charts=charts),
        "text/plain": f"<seamline board {getattr(board, 'name', '')!s}>",
    }
