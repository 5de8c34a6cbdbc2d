"""Live boards: a cutoff design that keeps its results current as the notebook changes.

A :class:`Board` holds a design declaration (column names, the cutoff, fit options), the data it
reads, and every panel's current result. After each notebook cell (``check_inputs``) it looks at
what it depends on -- the data variable rebound to a new object, the columns it uses edited in
place (content fingerprints of those columns only), and every notebook variable its declaration
names -- and recomputes just the results whose inputs changed (see ``reactive.board_graph``).
Results are cached by their inputs, so changing ``level`` never refits and switching back to an
earlier bandwidth is instant.

Invariant: a board's results always belong to its current inputs. When an input cannot be used
(a deleted variable, a cutoff outside the score's range, ...) the affected panels hold no result
and ``errors[panel]`` says why; the kernel keeps working and the next change is picked up.

Boards are made by the ``%%cutoff`` cell magic or from Python with :func:`board`. Nothing here
imports IPython or ipywidgets at module level.
"""
from __future__ import annotations

import datetime as _dt
import html
import itertools
import logging
import math
import sys
import warnings
import weakref
from collections import OrderedDict
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass
from numbers import Integral, Real
from pathlib import Path
from types import MappingProxyType
from typing import Any

import numpy as np
import pandas as pd

from ..errors import InvalidOptionError, SeamlineError
from ..estimate.design import Design
from ..estimate.options import resolve
from ..options import BANDWIDTH_RULES, KERNELS, SIDES, VARIANCES, check_option
from .reactive import (PANELS, DataIdentity, board_graph, column_node, fingerprints, panel_node,
                       shared_fingerprints)

__all__ = [
    "Board",
    "NotApplicable",
    "board",
    "boards",
    "install_hook",
    "DESIGN_KEYS",
    "OPTION_DEFAULTS",
    "REQUIRED_KEYS",
    "SPEC_KEYS",
]

log = logging.getLogger("seamline")

#: Keys of the design declaration (names and numbers given to ``seamline.Design``).
DESIGN_KEYS: tuple[str, ...] = ("score", "cutoff", "treated", "outcome", "takeup", "covariates",
                                "cluster", "weights")
#: Fit options and their defaults (the engine's defaults).
OPTION_DEFAULTS: dict[str, Any] = {
    "bandwidth": "mse", "kernel": "triangular", "degree": 1, "bias_degree": None,
    "pilot_bandwidth": None, "variance": "neighbors", "level": 0.95, "donut": 0.0,
    "derivative": 0, "adjust": False,
}
#: Every key a declaration may hold.
SPEC_KEYS: tuple[str, ...] = ("data", *DESIGN_KEYS, *OPTION_DEFAULTS)
#: Keys a declaration must hold.
REQUIRED_KEYS: tuple[str, ...] = ("data", "score", "cutoff", "outcome")

#: Fits are computed at this level and re-reported at the board's ``level`` (no refit).
_REFERENCE_LEVEL = 0.95
_CACHE_SIZE = 256
STATUSES = ("fresh", "stale", "recomputing", "error")

_LABELS = {
    "fit": "main estimate", "first_stage": "first stage", "bins": "binned means",
    "first_stage_bins": "binned take-up", "bandwidths": "bandwidth rules", "density": "density test",
    "balance": "covariate balance", "sensitivity": "bandwidth sensitivity",
    "placebo": "placebo cutoffs", "donut": "donut radii", "score_profile": "score profile",
    "checks": "design checks",
}
#: Export names -> result keys.
EXPORTS: dict[str, str] = {
    "estimate": "fit", "first_stage": "first_stage", "bandwidths": "bandwidths",
    "sensitivity": "sensitivity", "balance": "balance", "density": "density", "placebo": "placebo",
    "donut": "donut", "bins": "bins", "score_profile": "score_profile", "checks": "checks",
}
TABLE_FORMATS = ("latex", "markdown", "csv", "html", "text")
CHART_FORMATS = ("svg", "png")


@dataclass(frozen=True)
class NotApplicable:
    """A panel that does not apply to this design, with the reason (e.g. a first stage for a sharp
    design). ``applies`` is always False, so views can test for it without importing this class."""

    reason: str
    applies: bool = False

    def _repr_html_(self) -> str:
        return f'<p class="seamline-not-applicable">{html.escape(self.reason)}</p>'

    def __str__(self) -> str:
        return self.reason


@dataclass(frozen=True)
class _Failure:
    """A cached computation error (the same inputs give the same error, so it is not retried)."""
    message: str


# ---- values of the declaration -----------------------------------------------------------------
def _where(key: str, variable: str | None) -> str:
    return f"`{key}`" + (f" (from the notebook variable `{variable}`)" if variable else "")


def _is_real(value: Any) -> bool:
    return isinstance(value, Real) and not isinstance(value, (bool, np.bool_))


def _as_float(key: str, value: Any, variable: str | None, example: str) -> float:
    if isinstance(value, np.ndarray) and value.ndim == 0:
        value = value.item()
    if not _is_real(value):
        raise InvalidOptionError(f"{_where(key, variable)} must be a number; got {value!r}. "
                                 f"Use e.g. `{key}: {example}`.")
    return float(value)


def _as_int(key: str, value: Any, variable: str | None) -> int:
    if isinstance(value, Integral) and not isinstance(value, (bool, np.bool_)):
        return int(value)
    if _is_real(value) and float(value).is_integer():
        return int(value)
    raise InvalidOptionError(f"{_where(key, variable)} must be a whole number; got {value!r}. "
                             f"Use e.g. `{key}: 1`.")


def _as_name(key: str, value: Any, variable: str | None, optional: bool) -> str | None:
    if value is None and optional:
        return None
    if isinstance(value, str) and value.strip():
        return value.strip()
    fix = "a column name" + (" (or leave the key out)" if optional else "")
    raise InvalidOptionError(f"{_where(key, variable)} must be {fix}; got {value!r}. "
                             f"Name a column of the data, e.g. `{key}: {_EXAMPLE_COLUMN[key]}`.")


def _as_names(key: str, value: Any, variable: str | None) -> tuple[str, ...]:
    if value is None and key == "covariates":
        return ()
    if isinstance(value, str):
        value = [value]
    if isinstance(value, pd.Index):
        value = list(value)
    if isinstance(value, (list, tuple)) and all(isinstance(v, str) and v.strip() for v in value):
        names = tuple(v.strip() for v in value)
        if names or key == "covariates":
            return names
    raise InvalidOptionError(f"{_where(key, variable)} must be a column name or a list of names; got "
                             f"{value!r}. Use e.g. `{key}: {_EXAMPLE_COLUMN[key]}`.")


def _as_pair_or_number(key: str, value: Any, variable: str | None) -> float | tuple[float, float]:
    if isinstance(value, (list, tuple, np.ndarray)) and len(value) == 2 and all(map(_is_real, value)):
        return (float(value[0]), float(value[1]))
    if _is_real(value):
        return float(value)
    raise InvalidOptionError(f"{_where(key, variable)} must be a number or two numbers (below, above); "
                             f"got {value!r}. Use e.g. `{key}: 2.5` or `{key}: 2.0, 3.0`.")


_EXAMPLE_COLUMN = {"score": "reading_score", "outcome": "math_gain", "takeup": "attended",
                   "covariates": "age, prior_math", "cluster": "school", "weights": "sample_weight"}


def coerce_value(key: str, value: Any, variable: str | None = None) -> Any:
    """Check one declaration value and return it in canonical form.

    Parameters
    ----------
    key : one of ``SPEC_KEYS`` except "data"
    value : the Python value (a literal from a ``%%cutoff`` cell or a notebook variable's value)
    variable : the notebook variable it came from, named in error messages

    Returns
    -------
    The value: floats for numbers, ints for degrees, tuples for lists and pairs, canonical
    spellings for choices.

    Raises
    ------
    InvalidOptionError
        With the key, the variable, the value and how to fix it.
    """
    if key in ("cutoff", "level", "donut"):
        number = _as_float(key, value, variable, {"cutoff": "40", "level": "0.95", "donut": "0.5"}[key])
        if key == "level" and not 0 < number < 1:
            raise InvalidOptionError(f"{_where(key, variable)} must be between 0 and 1; got {value!r}. "
                                     "Use e.g. `level: 0.95`.")
        if key == "cutoff" and not math.isfinite(number):
            raise InvalidOptionError(f"{_where(key, variable)} must be a finite number; got {value!r}. "
                                     "Use e.g. `cutoff: 40`.")
        return number
    if key in ("degree", "derivative"):
        return _as_int(key, value, variable)
    if key == "bias_degree":
        return None if value is None else _as_int(key, value, variable)
    if key in ("score", "takeup", "cluster", "weights"):
        return _as_name(key, value, variable, optional=key != "score")
    if key in ("outcome", "covariates"):
        return _as_names(key, value, variable)
    if key in ("treated", "kernel", "variance"):
        allowed = {"treated": SIDES, "kernel": KERNELS, "variance": VARIANCES}[key]
        try:
            return check_option(key, value, allowed)
        except InvalidOptionError:
            choices = ", ".join(f'"{a}"' for a in allowed)
            raise InvalidOptionError(f"{_where(key, variable)} must be one of {choices}; got {value!r}. "
                                     "Pick one of the listed values.") from None
    if key == "bandwidth":
        if isinstance(value, str):
            try:
                return check_option(key, value, BANDWIDTH_RULES)
            except InvalidOptionError:
                rules = ", ".join(f'"{a}"' for a in BANDWIDTH_RULES)
                raise InvalidOptionError(f"{_where(key, variable)} must be one of {rules}, a number or two "
                                         f"numbers; got {value!r}. Use e.g. `bandwidth: mse` or "
                                         "`bandwidth: 2.5`.") from None
        return _as_pair_or_number(key, value, variable)
    if key == "pilot_bandwidth":
        return None if value is None else _as_pair_or_number(key, value, variable)
    if key == "adjust":
        if isinstance(value, (bool, np.bool_)):
            return bool(value)
        raise InvalidOptionError(f"{_where(key, variable)} must be true or false; got {value!r}. "
                                 "Use `adjust: true` to adjust for the covariates.")
    raise InvalidOptionError(f"`key` must be one of {', '.join(SPEC_KEYS)}; got {key!r}. "
                             "Check the spelling of the setting.")


def lookup(namespace: Mapping[str, Any], name: str) -> Any:
    """The value of a notebook variable, or of a dotted attribute path (``config.cutoff``).

    Only names and attribute access are followed; nothing is evaluated.

    Raises
    ------
    NameError
        When the variable (or an attribute on the path) does not exist.
    """
    head, *rest = name.split(".")
    if head not in namespace:
        raise NameError(f"`{head}` must be a variable defined in the notebook; got no such variable. "
                        "Define it in a cell above.")
    value = namespace[head]
    for i, attribute in enumerate(rest):
        try:
            value = getattr(value, attribute)
        except AttributeError:
            path = ".".join([head, *rest[:i]])
            raise NameError(f"`{name}` must name an existing attribute; got no attribute {attribute!r} "
                            f"on `{path}`. Check the spelling.") from None
    return value


# ---- the registry ---------------------------------------------------------------------------------
_SERIAL = itertools.count(1)
_NAMES = itertools.count(1)         # default names of boards made from Python
_REGISTRY: dict[int, weakref.ref] = {}


def boards() -> list["Board"]:
    """Every live (not closed, not garbage-collected) board, oldest first."""
    out = []
    for serial in sorted(_REGISTRY):
        b = _REGISTRY[serial]()
        if b is None or b.closed:
            _REGISTRY.pop(serial, None)
        else:
            out.append(b)
    return out


def find(name: str, namespace: Mapping | None = None) -> "Board | None":
    """The newest live board called ``name`` (bound to ``namespace`` when given)."""
    for b in reversed(boards()):
        if b.name == name and (namespace is None or b._namespace is namespace):
            return b
    return None


def _after_cell(shell, *args) -> None:
    """post_run_cell callback: every live board of this shell checks its inputs."""
    namespace = getattr(shell, "user_ns", None)
    with shared_fingerprints():     # boards reading the same columns hash them once per cell
        for b in boards():
            if b._namespace is not None and b._namespace is not namespace:
                continue
            try:
                b.check_inputs()
                b._update_displays()
            except Exception:   # a board must never break the kernel; it records its own errors
                log.exception("seamline: checking board %r after a cell failed", b.name)


def install_hook(shell) -> None:
    """Register one ``post_run_cell`` callback on an IPython shell (idempotent, also across
    ``%reload_ext``: a callback left by an earlier import of this module is replaced)."""
    callbacks = shell.events.callbacks.get("post_run_cell", [])
    for cb in list(callbacks):
        if getattr(cb, "_seamline_hook", False):
            if getattr(cb, "_seamline_module", None) is sys.modules[__name__]:
                return
            shell.events.unregister("post_run_cell", cb)
    shell_ref = weakref.ref(shell)

    def seamline_after_cell(*args):
        shell = shell_ref()
        if shell is not None:
            _after_cell(shell, *args)

    seamline_after_cell._seamline_hook = True
    seamline_after_cell._seamline_module = sys.modules[__name__]
    shell.events.register("post_run_cell", seamline_after_cell)


def _current_shell():
    """The running IPython shell, without importing IPython when it is not loaded."""
    if "IPython" not in sys.modules:
        return None
    try:
        from IPython import get_ipython
    except ImportError:  # pragma: no cover
        return None
    return get_ipython()


# ---- the board ------------------------------------------------------------------------------------
class Board:
    """A live cutoff design: current results for every panel, kept in step with the notebook.

    Parameters
    ----------
    name : str
        The board's name (the ``%%cutoff`` NAME); shown in views and used by the front end.
    design_kwargs : dict
        ``score``, ``cutoff``, ``outcome`` (a name or a list), and optionally ``treated``,
        ``takeup``, ``covariates``, ``cluster``, ``weights`` -- as for ``seamline.Design``.
    fit_options : dict, optional
        Options of ``Design.fit`` (bandwidth, kernel, degree, bias_degree, pilot_bandwidth,
        variance, level, donut, derivative, adjust) and ``outcome`` to select one of several
        outcomes.
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
        Compute the results now (otherwise on the first ``refresh()``).

    Attributes
    ----------
    results : mapping panel -> result object, ``NotApplicable`` or None (no current result)
    errors : dict panel -> message for panels whose computation failed
    status : "fresh" | "stale" | "recomputing" | "error" ("error" only when the main fit fails)
    stale : bool; updated_at : datetime or None; paused : bool

    Notes
    -----
    Recompute rules: a change marks stale exactly the results downstream of it in
    ``reactive.board_graph`` (``level`` only re-reports the main fit; ``kernel`` invalidates every
    fit; a covariate column only the balance panel; the density test only reads the score).
    ``pause()`` stops the automatic recompute after cells (the board still marks itself stale);
    explicit actions -- ``set_option``, ``refresh``, ``resume`` -- always bring it up to date.
    """

    def __init__(self, name: str, design_kwargs: Mapping[str, Any], fit_options: Mapping[str, Any] | None = None,
                 *, data: Any = None, data_name: str | None = None, namespace: Mapping[str, Any] | None = None,
                 spec_variables: Mapping[str, str] | None = None, panels: Iterable[str] | None = None,
                 autorun: bool = True):
        if not isinstance(name, str) or not name:
            raise InvalidOptionError(f"`name` must be a non-empty string; got {name!r}. Use e.g. name=\"tutoring\".")
        self.name = name
        self._namespace = namespace
        self._data_name = data_name
        self._spec_variables = dict(spec_variables or {})
        for key in self._spec_variables:
            if key not in SPEC_KEYS or key == "data":
                raise InvalidOptionError(f"`spec_variables` keys must be declaration keys; got {key!r}. "
                                         f"Use keys among {', '.join(SPEC_KEYS[1:])}.")
        if data is None:
            if data_name is None or namespace is None:
                raise InvalidOptionError("`data` must be given (or `data_name` with a `namespace`); got "
                                         "neither. Pass the DataFrame, e.g. board(pupils, ...).")
            data = lookup(namespace, data_name)
        self._data = data
        self._identity = DataIdentity(data)
        self._data_version = 0

        design = dict(design_kwargs)
        unknown = sorted(set(design) - set(DESIGN_KEYS))
        if unknown:
            raise InvalidOptionError(f"`design_kwargs` must hold design keys only; got {unknown!r}. "
                                     f"Use keys among {', '.join(DESIGN_KEYS)}.")
        for key in ("score", "cutoff", "outcome"):
            if key not in design:
                raise InvalidOptionError(f"`{key}` must be declared; got nothing. Add it, e.g. "
                                         f"`{key}: {'40' if key == 'cutoff' else _EXAMPLE_COLUMN[key]}`.")
        self._spec: dict[str, Any] = {"treated": "above", "takeup": None, "covariates": (), "cluster": None,
                                      "weights": None}
        for key, value in design.items():
            self._spec[key] = coerce_value(key, value, self._spec_variables.get(key))
        options = dict(fit_options or {})
        selected = options.pop("outcome", None)
        unknown = sorted(set(options) - set(OPTION_DEFAULTS))
        if unknown:
            raise InvalidOptionError(f"`fit_options` must be fit options; got {unknown!r}. "
                                     f"Use keys among {', '.join(OPTION_DEFAULTS)}.")
        self._options: dict[str, Any] = dict(OPTION_DEFAULTS)
        for key, value in options.items():
            self._options[key] = coerce_value(key, value, self._spec_variables.get(key))
        self._selected = self._check_selected(selected if selected is not None else self._spec["outcome"][0])
        self._validate_options(self._options)
        self._seen: dict[str, Any] = {}
        if namespace is not None:
            for key, variable in self._spec_variables.items():
                self._seen[key] = self._spec[key] if key in self._spec else self._options[key]

        wanted = PANELS if panels is None else tuple(panels)
        bad = [p for p in wanted if p not in PANELS]
        if bad:
            raise InvalidOptionError(f"`panels` must be among {', '.join(PANELS)}; got {bad!r}. "
                                     "Leave it out to compute every panel.")
        self._panels = tuple(p for p in PANELS if p in wanted or p == "fit")
        self._results: dict[str, Any] = {p: None for p in self._panels}
        self.errors: dict[str, str] = {}
        self.stale = True
        self.status = "stale"
        self.updated_at: _dt.datetime | None = None
        self.paused = False
        self.closed = False
        self._fingerprints: dict[str, bytes] = fingerprints(data, self.columns)
        self._input_error: str | None = None
        self._design: Design | None = None
        self._design_key: tuple | None = None
        self._keys: dict[str, tuple] = {}
        self._cache: OrderedDict[tuple, Any] = OrderedDict()
        self._change_callbacks: list[Callable] = []
        self._progress_callbacks: list[Callable] = []
        self._view = None
        self._handles: list = []
        self._fallback_dirty = False
        self._serial = next(_SERIAL)
        _REGISTRY[self._serial] = weakref.ref(self)
        if autorun:
            self._recompute()

    # ---- read-only views of the state -----------------------------------------------------
    @property
    def results(self) -> Mapping[str, Any]:
        """Every panel's current result (read-only mapping)."""
        return MappingProxyType(self._results)

    @property
    def fit(self):
        """The current Fit of the selected outcome at the board's level, or None after an error."""
        value = self._results.get("fit")
        return value if not isinstance(value, NotApplicable) else None

    @property
    def design(self) -> Design | None:
        """The current ``seamline.Design`` (rebuilt when the data or the declaration changes), or
        None while the inputs cannot form a design (``status`` "error"; ``errors`` says why)."""
        if self._design is None and self.status != "error":
            self._design = Design(self._data, **self._design_kwargs())
        return self._design

    @property
    def data(self):
        """The data the board currently reads (the user's object; never modified)."""
        return self._data

    @property
    def spec(self) -> dict[str, Any]:
        """The current design declaration (a copy)."""
        return dict(self._spec)

    @property
    def options(self) -> dict[str, Any]:
        """The current fit options, including the selected ``outcome`` (a copy)."""
        return {"outcome": self._selected, **self._options}

    @property
    def columns(self) -> tuple[str, ...]:
        """The data columns the board reads (only these are fingerprinted)."""
        s = self._spec
        names = [s["score"], *s["outcome"], *(c for c in (s["takeup"], s["cluster"], s["weights"]) if c),
                 *s["covariates"]]
        return tuple(dict.fromkeys(names))

    @property
    def panels(self) -> tuple[str, ...]:
        return self._panels

    @property
    def spec_variables(self) -> dict[str, str]:
        """Declaration key -> notebook variable it is read from."""
        return dict(self._spec_variables)

    def __repr__(self) -> str:
        s = self._spec
        head = f"<Board {self.name}: {s['score']} at {s['cutoff']:g}, outcome {self._selected}"
        fit = self.fit
        if fit is not None:
            lo, hi = fit.robust_conf_int
            head += (f"; {fit.kind} estimate {fit.estimate:.4g}, robust {fit.level:.0%} CI "
                     f"[{lo:.4g}, {hi:.4g}]")
        when = f", updated {self.updated_at:%H:%M:%S}" if self.updated_at else ""
        error = f"; error: {self.errors.get('fit')}" if self.status == "error" else ""
        return head + f"; {self.status}{' (paused)' if self.paused else ''}{when}{error}>"

    # ---- subscriptions --------------------------------------------------------------------------
    def on_change(self, callback: Callable[["Board", set], Any]) -> Callable[[], None]:
        """Call ``callback(board, changed)`` after each update; ``changed`` holds the names of the
        panels whose result or error changed, and "status" when the status, staleness or pause
        state may have changed. Returns a function that unsubscribes."""
        self._change_callbacks.append(callback)
        return lambda: self._change_callbacks.remove(callback) if callback in self._change_callbacks else None

    def on_progress(self, callback: Callable[[int, int, str], Any]) -> Callable[[], None]:
        """Call ``callback(done, total, label)`` while results are recomputed (``done`` counts
        finished computations out of ``total``; ``label`` names the one running next or "done").
        Returns a function that unsubscribes."""
        self._progress_callbacks.append(callback)
        return lambda: self._progress_callbacks.remove(callback) if callback in self._progress_callbacks else None

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
    def _check_selected(self, outcome: Any) -> str:
        allowed = tuple(self._spec["outcome"]) + tuple(self._spec["covariates"])
        if not isinstance(outcome, str) or outcome not in allowed:
            raise InvalidOptionError(f"`outcome` must be one of the declared outcomes or covariates "
                                     f"{list(allowed)}; got {outcome!r}. Declare it first.")
        return outcome

    def _validate_options(self, options: Mapping[str, Any]) -> None:
        resolve(self._selected, has_covariates=bool(self._spec["covariates"]), **options)

    def _design_kwargs(self) -> dict[str, Any]:
        s = self._spec
        return dict(score=s["score"], cutoff=s["cutoff"], outcome=list(s["outcome"]), treated=s["treated"],
                    takeup=s["takeup"], covariates=list(s["covariates"]) or None, cluster=s["cluster"],
                    weights=s["weights"])

    def _sync_inputs(self) -> set[str]:
        """Read the notebook: data identity, spec variables, column fingerprints. Returns the
        changed sources; sets ``_input_error`` when an input cannot be read."""
        changes: set[str] = set()
        error = None
        if self._namespace is not None and self._data_name is not None:
            try:
                data = lookup(self._namespace, self._data_name)
            except NameError as exc:
                data, error = self._data, f"`data` is read from the notebook variable `{self._data_name}`: {exc}"
            if not self._identity.same(data):
                self._data, self._identity = data, DataIdentity(data)
                self._data_version += 1
                changes.add("data")
        if self._namespace is not None:
            for key, variable in self._spec_variables.items():
                try:
                    value = coerce_value(key, lookup(self._namespace, variable), variable)
                except (NameError, InvalidOptionError) as exc:
                    error = error or f"`{key}` is read from the notebook variable `{variable}`: {exc}"
                    continue
                if self._seen.get(key, _MISSING) != value:
                    self._seen[key] = value
                    if key in self._spec:
                        self._spec[key] = value
                        if key in ("outcome", "covariates") and self._selected not in (
                                *self._spec["outcome"], *self._spec["covariates"]):
                            self._selected = self._spec["outcome"][0]
                    else:
                        self._options[key] = value
                    changes.add(key)
        if error is None and changes & set(SPEC_KEYS):
            try:
                self._validate_options(self._options)
            except SeamlineError as exc:
                error = str(exc)
        fps = fingerprints(self._data, self.columns)
        for name, fp in fps.items():
            if self._fingerprints.get(name) != fp:
                changes.add(column_node(name))
        self._fingerprints = fps
        if error != self._input_error:
            changes.add("inputs")
        self._input_error = error
        return changes

    def _graph(self):
        s = self._spec
        return board_graph(score=s["score"], outcomes=s["outcome"], outcome=self._selected, takeup=s["takeup"],
                           covariates=s["covariates"], cluster=s["cluster"], weights=s["weights"],
                           adjust=bool(self._options["adjust"]))

    def _source_values(self) -> dict[str, Any]:
        values: dict[str, Any] = {column_node(c): fp for c, fp in self._fingerprints.items()}
        values.update(self._spec)
        values.update(self._options)
        values["outcomes"] = values.pop("outcome")
        values["outcome"] = self._selected
        values["data"] = self._data_version
        return values

    # ---- the public actions -------------------------------------------------------------------
    def check_inputs(self) -> set[str]:
        """Look for changed inputs (called after every notebook cell) and update what they affect.

        Returns
        -------
        set of str
            The changed sources: "data" (the variable was rebound), ``column:<name>`` (a used
            column's content), declaration keys read from notebook variables. Empty when nothing
            the board reads changed -- e.g. an edit to a column it does not use.
        """
        if self.closed:
            return set()
        changes = self._sync_inputs()
        if not changes:
            return changes
        self.stale = True
        if self.paused:
            if self.status != "error":
                self.status = "stale"
            self._notify({"status"})
        else:
            self._recompute()
        return changes

    def refresh(self, force: bool = False) -> None:
        """Bring every result up to date now (also when paused).

        Parameters
        ----------
        force : bool, default False
            Drop the cache and recompute everything (e.g. after changing data in a way
            fingerprints cannot see, such as a library writing through a raw pointer).
        """
        if force:
            self._cache.clear()
            self._keys.clear()
            self._design = None
            self._design_key = None
        self._sync_inputs()
        self._recompute()

    def pause(self) -> None:
        """Stop recomputing automatically after cells; the board still marks itself stale."""
        self.paused = True
        self._notify({"status"})

    def resume(self) -> None:
        """Recompute automatically again, starting now if anything changed while paused."""
        self.paused = False
        changes = self._sync_inputs()
        if self.stale or changes:
            self._recompute()
        else:
            self._notify({"status"})

    def set_option(self, name: str, value: Any) -> None:
        """Change one setting and recompute only the results that depend on it.

        This is what the view's controls call. Fit options, the selected ``outcome`` and the
        design keys (``cutoff``, ``treated``, ...) are accepted; a value read from a notebook
        variable is overridden until that variable changes again.

        Raises
        ------
        InvalidOptionError
            When the name or the value is not allowed (nothing changes then).
        """
        if name == "outcome" and isinstance(value, str):
            value = self._check_selected(value)
            if value == self._selected:
                return
            self._selected = value
        elif name in OPTION_DEFAULTS:
            value = coerce_value(name, value)
            trial = {**self._options, name: value}
            self._validate_options(trial)
            if trial == self._options:
                return
            self._options = trial
        elif name in DESIGN_KEYS:
            value = coerce_value(name, value)
            if self._spec[name] == value:
                return
            self._spec[name] = value
            if self._selected not in (*self._spec["outcome"], *self._spec["covariates"]):
                self._selected = self._spec["outcome"][0]
        else:
            raise InvalidOptionError(f"`name` must be a setting of the board ({', '.join(SPEC_KEYS[1:])}); "
                                     f"got {name!r}. Check the spelling.")
        self._sync_inputs()
        self.stale = True
        self._recompute()

    def close(self) -> None:
        """Stop tracking: leave the registry, drop subscribers and close the view."""
        self.closed = True
        _REGISTRY.pop(self._serial, None)
        self._change_callbacks.clear()
        self._progress_callbacks.clear()
        view, self._view = self._view, None
        if view is not None and hasattr(view, "close"):
            try:
                view.close()
            except Exception:
                log.exception("seamline: closing the view of board %r failed", self.name)
        self._handles.clear()

    # ---- recomputation -------------------------------------------------------------------------
    def _fail_all(self, message: str) -> None:
        changed = {p for p in self._panels if self._results.get(p) is not None or self.errors.get(p) != message}
        for p in self._panels:
            self._results[p] = None
            self.errors[p] = message
        self._keys.clear()
        self._design = None
        self._design_key = None
        self.status = "error"
        self.stale = False
        self.updated_at = _dt.datetime.now().astimezone()
        self._fallback_dirty = True
        self._notify(changed | {"status"})

    def _recompute(self) -> None:
        if self._input_error is not None:
            self._fail_all(self._input_error)
            return
        graph = self._graph()
        values = self._source_values()
        design_key = graph.key("design", values)
        if self._design is None or design_key != self._design_key:
            try:
                self._design = Design(self._data, **self._design_kwargs())
            except Exception as exc:
                self._fail_all(_message(exc, self._spec_variables))
                return
            self._design_key = design_key
        todo = [p for p in self._panels if self._keys.get(p) != graph.key(panel_node(p), values)]
        if not todo:
            if self.stale:
                self.stale = False
                self.status = "error" if "fit" in self.errors else "fresh"
                self._notify({"status"})
            return
        self.status = "recomputing"
        self._notify({"status"})
        misses = [p for p in todo if graph.key(panel_node(p), values) not in self._cache]
        total, done = len(misses), 0
        changed: set[str] = set()
        for panel in todo:
            key = graph.key(panel_node(panel), values)
            if key in self._cache:
                self._cache.move_to_end(key)
                value = self._cache[key]
            else:
                self._progress(done, total, _LABELS[panel])
                value = self._compute(panel, graph, values)
                done += 1
                self._store(key, value)
            old_result, old_error = self._results.get(panel), self.errors.get(panel)
            if isinstance(value, _Failure):
                self._results[panel] = None
                self.errors[panel] = value.message
            else:
                self._results[panel] = value
                self.errors.pop(panel, None)
            self._keys[panel] = key
            if self._results[panel] is not old_result or self.errors.get(panel) != old_error:
                changed.add(panel)
        if total:
            self._progress(total, total, "done")
        self.stale = False
        self.status = "error" if "fit" in self.errors else "fresh"
        self.updated_at = _dt.datetime.now().astimezone()
        self._fallback_dirty = True
        self._notify(changed | {"status"})

    def _store(self, key: tuple, value: Any) -> None:
        self._cache[key] = value
        while len(self._cache) > _CACHE_SIZE:
            self._cache.popitem(last=False)

    def _main_fit(self, graph, values):
        key = graph.key("main_fit", values)
        if key not in self._cache:
            opts = dict(self._options, level=_REFERENCE_LEVEL)
            try:
                value = self.design.fit(self._selected, **opts)
            except Exception as exc:
                value = _Failure(_message(exc, self._spec_variables))
            self._store(key, value)
        return self._cache[key]

    def _fit_kwargs(self, *drop: str) -> dict[str, Any]:
        kwargs = {"outcome": self._selected, **self._options}
        for d in drop:
            kwargs.pop(d, None)
        return kwargs

    def _compute(self, panel: str, graph, values):
        """One panel's result for the current inputs, or a _Failure with the message."""
        design, opts, level = self.design, self._options, self._options["level"]
        try:
            if panel in ("fit", "first_stage", "first_stage_bins"):
                main = self._main_fit(graph, values)
                if isinstance(main, _Failure):
                    return main if panel == "fit" else _Failure(f"needs the main fit, which failed: {main.message}")
                fit = main.with_level(level)
                if panel == "fit":
                    return fit
                if fit.first_stage is None:
                    return NotApplicable(_sharp_reason(fit, self._spec["takeup"]))
                if panel == "first_stage":
                    return fit.first_stage
                # The take-up jump drawn at the main fit's bandwidths, so the plot shows the first
                # stage that the estimate uses.
                kwargs = self._fit_kwargs("outcome", "adjust")
                kwargs.update(bandwidth=fit.bandwidth, pilot_bandwidth=fit.pilot_bandwidth)
                return design.bins(self._spec["takeup"], **kwargs)
            if panel == "bins":
                return design.bins(**self._fit_kwargs())
            if panel == "bandwidths":
                return design.bandwidths(self._selected, kernel=opts["kernel"], degree=opts["degree"],
                                         bias_degree=opts["bias_degree"], variance=opts["variance"],
                                         donut=opts["donut"], derivative=opts["derivative"], adjust=opts["adjust"])
            if panel == "density":
                return design.density_test(level=level)
            if panel == "balance":
                if not self._spec["covariates"]:
                    return NotApplicable("No covariates are declared, so there is nothing to check for balance. "
                                         "Declare pre-treatment columns with `covariates: age, prior_score`.")
                rule = opts["bandwidth"] if isinstance(opts["bandwidth"], str) else "mse"
                return design.balance(rule=rule, **self._fit_kwargs("outcome", "bandwidth", "pilot_bandwidth",
                                                                    "adjust"))
            if panel == "sensitivity":
                return design.sensitivity(**self._fit_kwargs())
            if panel == "placebo":
                return design.placebo_cutoffs(**self._fit_kwargs())
            if panel == "donut":
                return design.donut(**self._fit_kwargs("donut"))
            if panel == "score_profile":
                return design.score_profile(**self._fit_kwargs())
            if panel == "checks":
                return design.checks(**self._fit_kwargs())
        except Exception as exc:
            return _Failure(_message(exc, self._spec_variables))
        raise AssertionError(f"unknown panel {panel!r}")   # PANELS and this dispatch must agree

    # ---- presentation ------------------------------------------------------------------------
    def summary(self) -> dict[str, Any]:
        """A JSON-ready summary for the front end and headers.

        Returns
        -------
        dict
            name, score, cutoff, outcome, kind, estimate, robust_ci ([low, high] or None),
            level, status, stale, paused, updated_at (ISO 8601 or None), error (or None).
        """
        fit = self.fit
        error = self.errors.get("fit") or self._input_error
        return {
            "name": self.name,
            "score": self._spec["score"],
            "cutoff": self._spec["cutoff"],
            "outcome": self._selected,
            "kind": None if fit is None else fit.kind,
            "estimate": None if fit is None else _json_float(fit.estimate),
            "robust_ci": None if fit is None else [_json_float(v) for v in fit.robust_conf_int],
            "level": self._options["level"],
            "status": self.status,
            "stale": self.stale,
            "paused": self.paused,
            "updated_at": None if self.updated_at is None else self.updated_at.isoformat(timespec="seconds"),
            "error": error,
        }

    def methods_paragraph(self) -> str:
        """The specification and results in prose for a paper's methods section (see
        ``seamline.export.methods.methods_paragraph``)."""
        from ..export.methods import methods_paragraph
        fit = self.fit
        if fit is None:
            raise InvalidOptionError(f"`board` must have a current main fit to describe; got none: "
                                     f"{self.errors.get('fit', 'not computed')}. Fix the error first.")
        diagnostics = {k: v for k, v in self._results.items()
                       if k in ("density", "balance", "sensitivity", "placebo", "donut") and v is not None
                       and not isinstance(v, NotApplicable)}
        return methods_paragraph(fit, diagnostics=diagnostics, weights=self._spec["weights"])

    def export(self, what: str, fmt: str = "latex", path: str | Path | None = None) -> str | bytes:
        """Render one table, chart or the methods paragraph; write it when ``path`` is given.

        Parameters
        ----------
        what : "estimate", "sensitivity", "balance", "density", "placebo", "donut", "bins",
            "bandwidths", "first_stage" or "methods"
        fmt : tables: "latex" (booktabs), "markdown", "csv", "html", "text";
            charts: "svg", "png"; methods: "text", "markdown", "latex", "html"
        path : file to write (replaced if it exists); nothing is written without it

        Returns
        -------
        str, or bytes for "png"
        """
        fmt = check_option("fmt", fmt, TABLE_FORMATS + CHART_FORMATS)
        if self.stale:
            warnings.warn(f"Board {self.name!r} is stale (paused with pending changes): the export shows the "
                          "results before those changes. Call refresh() first.", UserWarning, stacklevel=2)
        if what == "methods":
            if fmt not in ("text", "markdown", "latex", "html"):
                raise InvalidOptionError(f"`fmt` for the methods paragraph must be \"text\", \"markdown\", "
                                         f"\"latex\" or \"html\"; got {fmt!r}. Use fmt=\"text\".")
            text = self.methods_paragraph()
            if fmt == "latex":
                from ..export.render import latex_escape
                text = latex_escape(text) + "\n"
            elif fmt == "html":
                text = f"<p class=\"seamline-methods\">{html.escape(text)}</p>\n"
            else:
                text += "\n"
            return _write(text, path)
        if what not in EXPORTS:
            names = ", ".join(f'"{n}"' for n in (*EXPORTS, "methods"))
            raise InvalidOptionError(f"`what` must be one of {names}; got {what!r}. Pick a table or chart name.")
        if fmt in CHART_FORMATS:
            from . import charts
            chart = charts.chart_for(self, what)
            return _write(charts.to_svg(chart) if fmt == "svg" else charts.to_png(chart), path)
        result = self._results.get(EXPORTS[what])
        if result is None or isinstance(result, NotApplicable):
            reason = str(result) if result is not None else self.errors.get(EXPORTS[what], "not computed")
            raise InvalidOptionError(f"`what` must name a panel with a current result; got {what!r}, which has "
                                     f"none: {reason}")
        return _write(_render_table(result, fmt, title=f"{self.name}: {_LABELS[EXPORTS[what]]}"), path)

    # ---- display -------------------------------------------------------------------------------
    @property
    def view(self):
        """The board's widget view (``seamline.notebook.panels.BoardView``), made on first use."""
        if self._view is None:
            try:
                from .panels import BoardView
            except ImportError as exc:
                raise ImportError("seamline's board view needs ipywidgets and altair: install them with "
                                  "`pip install \"seamline[notebook]\"`; the results are in board.results "
                                  f"meanwhile ({exc}).") from exc
            self._view = BoardView(self)
        return self._view

    def _mimebundle(self) -> dict[str, Any]:
        """One output bundle: the live widget view plus a static HTML rendition (text/html) that
        notebook viewers and nbconvert show when widgets are not live."""
        view = self.view
        from .panels import mimebundle
        bundle = dict(mimebundle(view))
        bundle["text/plain"] = repr(self)
        return bundle

    def show(self):
        """Display the board (widget view + static fallback) in the notebook; returns the handle."""
        from IPython.display import display
        handle = display(self._mimebundle(), raw=True, display_id=True)
        if handle is not None:
            self._handles = [*self._handles[-3:], handle]
        self._fallback_dirty = False
        return handle

    def _ipython_display_(self) -> None:
        self.show()

    def _update_displays(self) -> None:
        """Refresh the static fallback of this board's displayed outputs (after a cell), so a saved
        notebook shows the current numbers."""
        if not (self._fallback_dirty and self._handles):
            return
        self._fallback_dirty = False
        try:
            bundle = self._mimebundle()
        except Exception:
            log.exception("seamline: rendering the static rendition of board %r failed", self.name)
            return
        for handle in self._handles:
            handle.update(bundle, raw=True)


_MISSING = object()


def _json_float(value: float) -> float | None:
    return float(value) if value is not None and math.isfinite(value) else None


def _message(exc: BaseException, spec_variables: Mapping[str, str]) -> str:
    """The message shown in a panel: our errors as they are; others with their type, since they
    point at a bug rather than at the input."""
    text = str(exc) if isinstance(exc, SeamlineError) else f"{type(exc).__name__}: {exc}"
    if isinstance(exc, SeamlineError) and text.startswith("`"):
        key = text[1:].split("`", 1)[0]
        if key in spec_variables:
            text += f" (`{key}` comes from the notebook variable `{spec_variables[key]}`.)"
    return text


def _sharp_reason(fit, takeup: str | None) -> str:
    if takeup:
        return (f"Take-up column {takeup!r} equals assignment on every usable row, so the design is sharp and "
                "there is no first stage to report.")
    return ("Sharp design: treatment follows the side of the cutoff exactly, so there is no first stage. "
            "Declare `takeup: <column>` for a fuzzy design.")


def _render_table(result: Any, fmt: str, *, title: str) -> str:
    if isinstance(result, pd.DataFrame):
        from ..export.render import to_csv, to_html, to_latex, to_markdown
        from ..export.table_model import from_dataframe
        model = from_dataframe(result, title=title)
        if fmt == "text":
            return f"{title}\n{result.to_string(index=False)}\n"
        return {"latex": to_latex, "markdown": to_markdown, "csv": to_csv, "html": to_html}[fmt](model)
    if fmt == "latex":
        return result.to_latex()
    if fmt == "markdown":
        return result.to_markdown()
    if fmt == "csv":
        return result.table().to_csv(index=False)
    if fmt == "html":
        return result._repr_html_()
    heading = result.title() if hasattr(result, "title") and callable(result.title) else title
    return f"{heading}\n{result.table().to_string(index=False)}\n"


def _write(value: str | bytes, path: str | Path | None) -> str | bytes:
    if path is not None:
        target = Path(path)
        if isinstance(value, bytes):
            target.write_bytes(value)
        else:
            with open(target, "w", encoding="utf-8", newline="") as handle:
                handle.write(value)
    return value


# ---- the Python builder -----------------------------------------------------------------------------
def board(data, *, score: str, cutoff: float, outcome, treated: str = "above", takeup: str | None = None,
          covariates=None, cluster: str | None = None, weights: str | None = None,
          bandwidth="mse", kernel: str = "triangular", degree: int = 1, bias_degree: int | None = None,
          pilot_bandwidth=None, variance: str = "neighbors", level: float = 0.95, donut: float = 0.0,
          derivative: int = 0, adjust: bool = False, name: str | None = None, data_name: str | None = None,
          panels: Iterable[str] | None = None) -> Board:
    """Build a live board from Python (the same board a ``%%cutoff`` cell makes).

    Parameters
    ----------
    data : DataFrame
        Never modified. In-place edits of the columns the board uses are picked up after each
        notebook cell (when running inside IPython).
    score, cutoff, outcome, treated, takeup, covariates, cluster, weights
        The design, as for ``seamline.Design``.
    bandwidth, kernel, degree, bias_degree, pilot_bandwidth, variance, level, donut, derivative, adjust
        Fit options, as for ``Design.fit``.
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
    shell = _current_shell()
    namespace = getattr(shell, "user_ns", None) if data_name is not None else None
    if data_name is not None and namespace is None:
        raise InvalidOptionError(f"`data_name` needs a running notebook to follow; got {data_name!r} outside "
                                 "IPython. Leave data_name out.")
    if data_name is not None and lookup(namespace, data_name) is not data:
        raise InvalidOptionError(f"`data_name` must name the notebook variable holding `data`; got "
                                 f"{data_name!r}, which holds another object. Pass the variable's name.")
    design_kwargs = dict(score=score, cutoff=cutoff, outcome=outcome, treated=treated, takeup=takeup,
                         covariates=covariates, cluster=cluster, weights=weights)
    fit_options = dict(bandwidth=bandwidth, kernel=kernel, degree=degree, bias_degree=bias_degree,
                       pilot_bandwidth=pilot_bandwidth, variance=variance, level=level, donut=donut,
                       derivative=derivative, adjust=adjust)
    b = Board(name or f"board{next(_NAMES)}", design_kwargs, fit_options, data=data, data_name=data_name,
              namespace=namespace, panels=panels)
    if shell is not None and hasattr(shell, "events"):
        install_hook(shell)
    return b
