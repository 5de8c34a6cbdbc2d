"""Live boards: a cutoff design that keeps its results current as the notebook changes.

A :class:`Board` holds a design declaration (column names, the cutoff, fit options), the data it
reads, and every panel's result. After each notebook cell (``check_inputs``) it looks at what it
depends on -- the data variable rebound to a new object, the columns it uses edited in place
(content fingerprints of those columns only), and every notebook variable its declaration names
-- and recomputes exactly the intermediate results whose inputs changed (the graph is written
down in ``compute``; a level change only re-reports, see ``levels``).

Threads. Every computation runs on the board's own worker thread, so the kernel stays free:
``set_option`` records the new inputs and returns at once; the worker computes the headline
(the main fit) and the panels code waits for first, then -- once the inputs have been still for
``SETTLE_DELAY`` -- the panels someone looks at (``watch``), then, after ``IDLE_DELAY``, the
others. Inputs arrive from several threads
(cells on the main thread, widget messages on subshell threads): one lock guards the board's
state, and the worker reads an immutable snapshot of the inputs (``Inputs``). A newer change
supersedes the running one between two intermediate results (the last value wins; nothing
queues up); results of inputs that a data change replaced are discarded. Errors of a background
computation become that panel's error; they never reach the kernel's main loop.

Reading results from code -- ``board.fit``, ``board.results[name]``, ``board.errors``,
``board.export(...)`` -- waits until they belong to the current inputs, so a cell run after a
change reads what that change produced; ``board.wait(*panels, timeout=None)`` does the same
explicitly. Views read ``board.state()``, which never waits and marks every panel that is not yet
current as pending.

Invariant: a published result always belongs to the inputs it is keyed by; a panel whose key is
not the current inputs' key is pending and shown as such. When an input cannot be used (a
deleted variable, a cutoff outside the score's range, ...) every panel holds an error saying
why; the kernel keeps working and the next change is picked up.

Boards are made by the ``%%cutoff`` cell magic or from Python with :func:`board`. Nothing here
imports IPython or ipywidgets at module level.

This module holds the ``Board`` class's core (its state, subscriptions and actions) and the
builder; beside it: ``board_inputs`` (the declaration's checks, snapshots of the inputs, reading
the notebook), ``board_outputs`` (summary, methods paragraph, exports and display, a base class),
``board_registry`` (``boards``, ``find``, the after-cell hook) and ``scheduler`` (the worker, a
base class). Names other modules import from here are re-exported.
"""
from __future__ import annotations

import datetime as _dt
import itertools
import logging
import threading
import time
from collections import Counter
from collections.abc import Callable, Iterable, Iterator, Mapping
from typing import Any

from ..errors import InvalidOptionError, SeamlineError, shown
from ..estimate.design import Design
from .board_inputs import (check_selected, declaration, read_columns, read_notebook, snapshot, sources_changed,
                           validate_options)
from .board_outputs import BoardOutputs
from .board_registry import boards, current_shell, default_name, find, forget, install_hook, register
from .compute import NodeCache
from .reactive import PANELS, DataIdentity, fingerprints
from .designs_spec import cutoff_text
from .inference_keys import INFERENCE_DEFAULTS
from .spec import (BOARD_KEYS, DESIGN_KEYS, OPTION_DEFAULTS, REQUIRED_KEYS, SPEC_KEYS, NotApplicable,
                   coerce_value, lookup)
from .scheduler import IDLE_DELAY, SETTLE_DELAY, BoardState, Inputs, Scheduler, live_front_end

__all__ = [
    "Board",
    "BoardState",
    "IDLE_DELAY",
    "SETTLE_DELAY",
    "live_front_end",
    "NotApplicable",
    "board",
    "boards",
    "find",
    "install_hook",
    "DESIGN_KEYS",
    "OPTION_DEFAULTS",
    "REQUIRED_KEYS",
    "SPEC_KEYS",
    "coerce_value",
    "lookup",
]

log = logging.getLogger("seamline")

_CACHE_SIZE = 256
STATUSES = ("fresh", "stale", "recomputing", "error")


class _LiveResults(Mapping):
    """``board.results``: reading a panel waits until it belongs to the current inputs."""

    def __init__(self, board: "Board"):
        self._board = board

    def __getitem__(self, panel: str) -> Any:
        if panel not in self._board._panels:
            raise KeyError(panel)
        self._board.wait(panel)
        with self._board._lock:
            return self._board._results.get(panel)

    def __iter__(self) -> Iterator[str]:
        return iter(self._board._panels)

    def __len__(self) -> int:
        return len(self._board._panels)

    def __repr__(self) -> str:
        return f"<results of board {self._board.name!r}: {', '.join(self._board._panels)}>"


# ---- the board ------------------------------------------------------------------------------------
class Board(BoardOutputs, Scheduler):
    """A live cutoff design: results for every panel, kept in step with the notebook off the main thread.

    Parameters
    ----------
    name : str
        The board's name (the ``%%cutoff`` NAME); shown in views and used by the front end.
    design_kwargs : dict
        ``score``, ``cutoff``, ``outcome`` (a name or a list), and optionally ``treated``,
        ``takeup``, ``covariates``, ``cluster``, ``weights``, ``score_unit`` -- as for ``seamline.Design``.
    fit_options : dict, optional
        Options of ``Design.fit`` (bandwidth, kernel, degree, bias_degree, pilot_bandwidth,
        variance, level, donut, derivative, adjust), ``outcome`` to select one of several
        outcomes, and the inference settings (smoothness, window, statistic, permutations, seed;
        ``inference_keys``).
    data : DataFrame, optional
        The data (never modified). Required unless ``data_name`` and ``namespace`` are given.
    data_name : str, optional
        Notebook variable holding the data; the board follows it when it is rebound.
    namespace : dict, optional
        Where notebook variables are looked up (the shell's ``user_ns``).
    spec_variables : dict, optional
        Declaration key -> notebook variable name (e.g. ``{"cutoff": "threshold"}``); the
        board re-reads these after every cell.
    panels : iterable of str, optional
        Which results to compute (default: all of ``reactive.PANELS``); "fit" is always computed.
    autorun : bool, default True
        Start computing now (otherwise on the first ``refresh()``).

    Attributes
    ----------
    results : mapping panel -> result object, ``NotApplicable`` or None; reading a panel waits
        for its result for the current inputs
    errors : dict panel -> message for panels whose computation failed (waits for every panel)
    status : "fresh" (the headline and every watched or awaited panel are current), "recomputing",
        "stale" (paused with pending changes) or "error" (the main fit or the inputs failed)
    stale : bool; updated_at : datetime or None; paused : bool

    Notes
    -----
    Recompute rules: ``compute.compute_graph`` (its module docstring holds the table).
    ``pause()`` stops the automatic recompute after cells (the board marks itself stale);
    explicit actions -- ``set_option``, ``refresh``, ``resume`` -- always bring it up to date.
    """

    def __init__(self, name: str, design_kwargs: Mapping[str, Any], fit_options: Mapping[str, Any] | None = None,
                 *, data: Any = None, data_name: str | None = None, namespace: Mapping[str, Any] | None = None,
                 spec_variables: Mapping[str, str] | None = None, panels: Iterable[str] | None = None,
                 autorun: bool = True):
        if not isinstance(name, str) or not name:
            raise InvalidOptionError(f"`name` must be a non-empty string; got {shown(name)}. Use e.g. name=\"tutoring\".")
        self.name = name
        self._namespace = namespace
        self._data_name = data_name
        self._spec_variables = dict(spec_variables or {})
        for key in self._spec_variables:
            if key not in SPEC_KEYS or key == "data":
                raise InvalidOptionError(f"`spec_variables` keys must be declaration keys; got {shown(key)}. "
                                         f"Use keys among {', '.join(SPEC_KEYS[1:])}.")
        if data is None:
            if data_name is None or namespace is None:
                raise InvalidOptionError("`data` must be given (or `data_name` with a `namespace`); got "
                                         "neither. Pass the DataFrame, e.g. board(pupils, ...).")
            data = lookup(namespace, data_name)
        self._identity = DataIdentity(data)

        spec, opts, selected = declaration(design_kwargs, fit_options, self._spec_variables)
        self._seen: dict[str, Any] = {}
        if namespace is not None:
            for key in self._spec_variables:
                self._seen[key] = spec[key] if key in spec else opts[key]

        wanted = PANELS if panels is None else tuple(panels)
        bad = [p for p in wanted if p not in PANELS]
        if bad:
            raise InvalidOptionError(f"`panels` must be among {', '.join(PANELS)}; got {shown(bad)}. "
                                     "Leave it out to compute every panel.")
        self._panels = tuple(p for p in PANELS if p in wanted or p == "fit")

        self._lock = threading.RLock()
        self._changed = threading.Condition(self._lock)    # notified on every input change and result
        self._generation = itertools.count(1)
        self._inputs = snapshot(self, data=data, data_version=0, spec=spec, options=opts, selected=selected,
                                prints=fingerprints(data, read_columns(spec)), error=None)
        self._target = self._inputs          # the inputs the results must reach (lags while paused)
        self._target_since = time.monotonic()
        self._results: dict[str, Any] = {p: None for p in self._panels}
        self._errors: dict[str, str] = {}
        self._keys: dict[str, tuple] = {}
        self._watched: dict[int, frozenset] = {}     # view id -> panels it shows
        self._awaited: Counter = Counter()           # panels some thread waits for
        self._cache = NodeCache(_CACHE_SIZE)
        self._design: Design | None = None
        self._design_key: tuple | None = None
        self._reading: tuple[int, int] | None = None    # (done, total) partitions while a Design reads them
        self.updated_at: _dt.datetime | None = None
        self.paused = False
        self.closed = False
        self._started = autorun
        self._worker: threading.Thread | None = None
        self._settled_generation = 0
        self._notifying = 0
        self._change_callbacks: list[Callable] = []
        self._progress_callbacks: list[Callable] = []
        self._view = None
        self._handles: list = []
        self._fallback_dirty = False
        self._serial = register(self)
        if autorun:
            self._kick()

    # ---- snapshots of the inputs ------------------------------------------------------------
    def _replace_inputs(self, *, accept: bool, **changes) -> Inputs:
        """New inputs from the current ones with ``changes`` (under the lock); the worker is told."""
        old = self._inputs
        fields = dict(data=old.data, data_version=old.data_version, spec=old.spec, options=old.options,
                      selected=old.selected, prints=old.fingerprints, error=old.error)
        fields.update(changes)
        self._inputs = snapshot(self, **fields)
        if accept:
            self._accept()
        return self._inputs

    def _accept(self) -> None:
        """Make the current inputs the target of the results (under the lock)."""
        if self._target is not self._inputs:
            self._target = self._inputs
            self._target_since = time.monotonic()
        self._started = True
        self._changed.notify_all()

    # ---- read-only views of the state -----------------------------------------------------
    @property
    def results(self) -> Mapping[str, Any]:
        """Every panel's result for the current inputs (reading one waits for it; read-only)."""
        return _LiveResults(self)

    @property
    def errors(self) -> dict[str, str]:
        """Panel -> error message for the current inputs (waits for every panel; a copy)."""
        self.wait()
        with self._lock:
            return dict(self._errors)

    @property
    def fit(self):
        """The current Fit of the selected outcome at the board's level (waits for it), or None
        after an error."""
        value = self.results["fit"]
        return value if not isinstance(value, NotApplicable) else None

    @property
    def design(self) -> Design | None:
        """The ``seamline.Design`` of the current inputs (built on first use), or None while the
        inputs cannot form one (``status`` "error"; ``errors`` says why)."""
        with self._lock:
            target = self._target
        if target.error is not None:
            return None
        try:
            return self._design_for(target)
        except SeamlineError:
            return None

    def validate(self) -> Design:
        """Build the Design of the current inputs now, raising its validation error (a missing
        column, a cutoff outside the score's range, ...); the ``%%cutoff`` magic calls this to
        point the error at the line of the declaration."""
        with self._lock:
            target = self._target
        if target.error is not None:
            raise InvalidOptionError(target.error)
        return self._design_for(target)

    @property
    def data(self):
        """The data the board currently reads (the user's object; never modified)."""
        return self._inputs.data

    @property
    def spec(self) -> dict[str, Any]:
        """The current design declaration (a copy)."""
        return dict(self._inputs.spec)

    @property
    def options(self) -> dict[str, Any]:
        """The current fit options, including the selected ``outcome`` (a copy)."""
        inputs = self._inputs
        return {"outcome": inputs.selected, **inputs.options}

    @property
    def columns(self) -> tuple[str, ...]:
        """The data columns the board reads (only these are fingerprinted)."""
        return read_columns(self._inputs.spec)

    @property
    def panels(self) -> tuple[str, ...]:
        return self._panels

    @property
    def spec_variables(self) -> dict[str, str]:
        """Declaration key -> notebook variable it is read from."""
        return dict(self._spec_variables)

    @property
    def status(self) -> str:
        """"fresh", "recomputing", "stale" or "error" (never waits)."""
        with self._lock:
            return self._status()

    @property
    def reading(self) -> tuple[int, int] | None:
        """(done, total) partitions read while the Design of a dask DataFrame or Parquet input is
        being built; None otherwise (never waits)."""
        return self._reading

    @property
    def stale(self) -> bool:
        """Whether the inputs changed while paused and the results still show the earlier ones
        (never waits; ``refresh()`` or ``resume()`` brings them up to date)."""
        with self._lock:
            return self._target is not self._inputs

    def state(self) -> BoardState:
        """The board as a view shows it, at this moment (never waits)."""
        with self._lock:
            inputs = self._inputs
            return BoardState(name=self.name, results=dict(self._results), errors=dict(self._errors),
                              pending=self._pending(), status=self._status(), paused=self.paused,
                              stale=self._target is not self._inputs, reading=self._reading,
                              updated_at=self.updated_at, options={"outcome": inputs.selected, **inputs.options},
                              spec=dict(inputs.spec), outcomes=tuple(inputs.spec["outcome"]))

    def __repr__(self) -> str:
        state = self.state()
        s = state.spec
        head = f"<Board {self.name}: {s['score']} at {cutoff_text(s['cutoff'])}, outcome {state.options['outcome']}"
        fit = state.results.get("fit")
        if fit is not None and not isinstance(fit, NotApplicable) and "fit" not in state.pending:
            lo, hi = fit.robust_conf_int
            head += (f"; {fit.kind} estimate {fit.estimate:.4g}, robust {fit.level:.0%} CI "
                     f"[{lo:.4g}, {hi:.4g}]")
        when = f", updated {self.updated_at:%H:%M:%S}" if self.updated_at else ""
        error = f"; error: {state.errors.get('fit')}" if state.status == "error" else ""
        return head + f"; {state.status}{' (paused)' if self.paused else ''}{when}{error}>"

    # ---- subscriptions --------------------------------------------------------------------------
    def on_change(self, callback: Callable[["Board", set], Any]) -> Callable[[], None]:
        """Call ``callback(board, changed)`` after each update; ``changed`` holds the names of the
        panels whose result or error changed, and "status" when the status, staleness or pause
        state may have changed. Callbacks run on the thread that made the update (often the
        worker): they must not wait for the board. Returns a function that unsubscribes."""
        self._change_callbacks.append(callback)
        return lambda: self._change_callbacks.remove(callback) if callback in self._change_callbacks else None

    def on_progress(self, callback: Callable[[int, int, str], Any]) -> Callable[[], None]:
        """Call ``callback(done, total, label)`` while results are recomputed (``done`` counts
        finished computations out of ``total``; ``label`` names the one running next or "done").
        Returns a function that unsubscribes."""
        self._progress_callbacks.append(callback)
        return lambda: self._progress_callbacks.remove(callback) if callback in self._progress_callbacks else None

    def watch(self, viewer: Any, panels: Iterable[str]) -> None:
        """Tell the board which panels ``viewer`` (a view) shows now: they are computed right after
        the headline, before panels nobody looks at. An empty list withdraws the viewer."""
        wanted = frozenset(p for p in panels if p in self._panels)
        with self._lock:
            if wanted:
                self._watched[id(viewer)] = wanted
            else:
                self._watched.pop(id(viewer), None)
            self._changed.notify_all()

    def _notify(self, changed: set[str]) -> None:
        for cb in list(self._change_callbacks):
            try:
                cb(self, set(changed))
            except Exception:   # a broken view must not break the board
                log.exception("seamline: an on_change subscriber of board %r failed", self.name)

    def _progress(self, done: int, total: int, label: str) -> None:
        for cb in list(self._progress_callbacks):
            try:
                cb(done, total, label)
            except Exception:
                log.exception("seamline: an on_progress subscriber of board %r failed", self.name)

    # ---- inputs -----------------------------------------------------------------------------
    # ---- the public actions -------------------------------------------------------------------
    def check_inputs(self) -> set[str]:
        """Look for changed inputs (called after every notebook cell) and start updating what they
        affect (the call returns at once; reads wait for the new results).

        Returns
        -------
        set of str
            The changed sources: "data" (the variable was rebound), ``column:<name>`` (a used
            column's content), declaration keys read from notebook variables, "inputs" when an
            input became unusable or usable again. Empty when nothing the board reads changed.
        """
        if self.closed:
            return set()
        with self._lock:
            old = self._inputs
            changes = read_notebook(self)
            if changes is None:
                return set()
            new = self._replace_inputs(accept=not self.paused, **changes)
        self._notify({"status"})
        return sources_changed(old, new)

    def refresh(self, force: bool = False) -> None:
        """Bring every result up to date (also when paused); returns at once, reads wait.

        Parameters
        ----------
        force : bool, default False
            Drop the cache and recompute everything (e.g. after changing data in a way
            fingerprints cannot see, such as a library writing through a raw pointer).
        """
        with self._lock:
            if force:
                self._cache.clear()
                self._keys.clear()
                self._design, self._design_key = None, None
                self._replace_inputs(accept=False, data_version=self._inputs.data_version + 1)
            changes = read_notebook(self)
            if changes is not None:
                self._replace_inputs(accept=False, **changes)
            self._accept()
        self._kick()
        self._notify({"status"})

    def pause(self) -> None:
        """Stop recomputing automatically after cells; the board still marks itself stale."""
        self.paused = True
        self._notify({"status"})

    def resume(self) -> None:
        """Recompute automatically again, starting now if anything changed while paused."""
        self.paused = False
        self.refresh()

    def set_option(self, name: str, value: Any) -> None:
        """Change one setting; the results that depend on it are recomputed in the background.

        This is what the view's controls call (from whatever thread delivers widget messages). Fit
        options, the selected ``outcome`` and the design keys (``cutoff``, ``treated``, ...) are
        accepted; a value read from a notebook variable is overridden until that variable changes
        again. Returns at once; reading results afterwards waits for the new ones.

        Raises
        ------
        InvalidOptionError
            When the name or the value is not allowed (nothing changes then).
        """
        with self._lock:
            inputs = self._inputs
            spec, options, selected = dict(inputs.spec), dict(inputs.options), inputs.selected
            if name == "outcome" and isinstance(value, str):
                selected = check_selected(spec, value)
            elif name in OPTION_DEFAULTS:
                options[name] = coerce_value(name, value)
                validate_options(spec, selected, options)
            elif name in DESIGN_KEYS or name in BOARD_KEYS:
                spec[name] = coerce_value(name, value)
                if selected not in (*spec["outcome"], *spec["covariates"]):
                    selected = spec["outcome"][0]
            else:
                raise InvalidOptionError(f"`name` must be a setting of the board ({', '.join(SPEC_KEYS[1:])}); "
                                         f"got {shown(name)}. Check the spelling.")
            if (spec, options, selected) == (dict(inputs.spec), dict(inputs.options), inputs.selected):
                if self._target is not self._inputs:
                    self._accept()
                return
            prints = dict(inputs.fingerprints)
            missing = [c for c in read_columns(spec) if c not in prints]
            if missing:                       # a newly named column: fingerprint only that one
                prints.update(fingerprints(inputs.data, missing))
            prints = {c: prints[c] for c in read_columns(spec)}
            self._replace_inputs(accept=True, spec=spec, options=options, selected=selected, prints=prints)
        self._kick()
        self._notify({"status"})

    def close(self) -> None:
        """Stop tracking: leave the registry, stop the worker, drop subscribers and close the view."""
        with self._lock:
            self.closed = True
            self._changed.notify_all()
        forget(self._serial)
        self._change_callbacks.clear()
        self._progress_callbacks.clear()
        view, self._view = self._view, None
        if view is not None and hasattr(view, "close"):
            try:
                view.close()
            except Exception:
                log.exception("seamline: closing the view of board %r failed", self.name)
        self._handles.clear()


# ---- the Python builder -----------------------------------------------------------------------------
def board(data, *, score: str, cutoff: float, outcome, treated: str = "above", takeup: str | None = None,
          covariates=None, cluster: str | None = None, weights: str | None = None, score_unit: str | None = None,
          bandwidth="mse", kernel: str = "triangular", degree: int = 1, bias_degree: int | None = None,
          pilot_bandwidth=None, variance: str = "bias-reduced", level: float = 0.95, donut: float = 0.0,
          derivative: int = 0, adjust: bool = False, groups: str | None = None, effect: float | None = None,
          headline_cutoff: float | None = None, name: str | None = None, data_name: str | None = None,
          panels: Iterable[str] | None = None, **inference) -> Board:
    """Build a live board from Python (the same board a ``%%cutoff`` cell makes).

    Parameters
    ----------
    data : DataFrame, dask DataFrame or Parquet path
        Never modified. In-place edits of the columns the board uses are picked up after each
        notebook cell (when running inside IPython). A dask DataFrame or a path / glob of Parquet
        files is read on the board's worker (the header counts the partitions); its changes are
        detected from dask's token or the files' sizes and modification times, never by reading rows.
    score, cutoff, outcome, treated, takeup, covariates, cluster, weights, score_unit
        The design, as for ``seamline.Design`` (``cutoff`` may name a column of per-unit cutoffs
        or list increasing cumulative cutoffs; ``score_unit`` -- "hours", "days" (the default),
        "weeks", "months" or "years" -- is the unit of a date score's distance from the cutoff).
    groups, effect, headline_cutoff
        A pre-treatment column for the subgroup panel, the effect the power panel plans for, and
        the cumulative cutoff the headline shows (default the first).
    bandwidth, kernel, degree, bias_degree, pilot_bandwidth, variance, level, donut, derivative, adjust
        Fit options, as for ``Design.fit``.
    smoothness, window, statistic, permutations, seed
        Settings of the bias-aware interval and the local randomization tab (keyword only; see
        ``seamline.notebook.inference_keys``).
    name : str, optional
        Shown in views (default "board<N>").
    data_name : str, optional
        The notebook variable holding ``data``; when given, rebinding that variable updates the board.
    panels : iterable of str, optional
        Which results to compute (default all).

    Returns
    -------
    Board
        In a notebook, leaving it as a cell's last expression shows its view.

    Examples
    --------
    >>> import seamline
    >>> from seamline.demo_data import sharp_scenario
    >>> s = sharp_scenario(n=2000, seed=1)
    >>> b = seamline.board(s.data, score=s.score, cutoff=s.cutoff, outcome=s.outcome[0], treated=s.treated,
    ...                    panels=["fit"])
    >>> b.status
    'fresh'
    """
    shell = current_shell()
    namespace = getattr(shell, "user_ns", None) if data_name is not None else None
    if data_name is not None and namespace is None:
        raise InvalidOptionError(f"`data_name` needs a running notebook to follow; got {shown(data_name)} outside "
                                 "IPython. Leave data_name out.")
    if data_name is not None and lookup(namespace, data_name) is not data:
        raise InvalidOptionError(f"`data_name` must name the notebook variable holding `data`; got "
                                 f"{shown(data_name)}, which holds another object. Pass the variable's name.")
    design_kwargs = dict(score=score, cutoff=cutoff, outcome=outcome, treated=treated, takeup=takeup,
                         covariates=covariates, cluster=cluster, weights=weights, score_unit=score_unit,
                         groups=groups, effect=effect,
                         headline_cutoff=headline_cutoff)
    fit_options = dict(bandwidth=bandwidth, kernel=kernel, degree=degree, bias_degree=bias_degree,
                       pilot_bandwidth=pilot_bandwidth, variance=variance, level=level, donut=donut,
                       derivative=derivative, adjust=adjust)
    unknown = sorted(set(inference) - set(INFERENCE_DEFAULTS))
    if unknown:
        raise InvalidOptionError(f"`board` got unknown settings {shown(unknown)}; use the design keys, the fit "
                                 f"options or {', '.join(INFERENCE_DEFAULTS)}. Check the spelling.")
    fit_options.update(inference)
    b = Board(name or default_name(), design_kwargs, fit_options, data=data, data_name=data_name,
              namespace=namespace, panels=panels)
    if shell is not None and hasattr(shell, "events"):
        install_hook(shell)
    b.wait("fit")          # the headline is there when the builder returns; the rest follows
    return b
