"""A board's inputs: the checked declaration, frozen snapshots with each panel's key, and reading the
notebook for what changed.

``declaration`` checks what a board is built with; ``snapshot`` freezes one set of inputs into an
``Inputs`` (seamline.notebook.scheduler) with the key of every panel (``compute.panel_key``);
``read_notebook`` looks at what a board depends on -- the data variable, the notebook variables
its declaration names, the content fingerprints of the columns it reads -- and returns the
changed fields. ``snapshot`` and ``read_notebook`` are functions of a ``Board`` (board.py), called
under its lock (or from its ``__init__``).
"""
from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from ..errors import InvalidOptionError, SeamlineError, shown
from ..estimate.options import resolve
from ..partitioned import data_identity, is_partitioned
from .compute import balance_rule, compute_graph, panel_key
from .designs_spec import cutoff_column, cutoff_layout
from .reactive import DataIdentity, column_node, fingerprints
from .scheduler import Inputs
from .spec import BOARD_KEYS, DESIGN_KEYS, FIT_DEFAULTS, OPTION_DEFAULTS, coerce_value, lookup
from .spec import _EXAMPLE_COLUMN

_MISSING = object()


def declaration(design_kwargs: Mapping[str, Any], fit_options: Mapping[str, Any] | None,
                spec_variables: Mapping[str, str]) -> tuple[dict[str, Any], dict[str, Any], str]:
    """Check a board's declaration: (spec, fit options with their defaults, selected outcome).
    Raises InvalidOptionError naming the unknown or missing key, or the value not allowed."""
    design = dict(design_kwargs)
    unknown = sorted(set(design) - set(DESIGN_KEYS) - set(BOARD_KEYS))
    if unknown:
        raise InvalidOptionError(f"`design_kwargs` must hold design keys only; got {shown(unknown)}. "
                                 f"Use keys among {', '.join((*DESIGN_KEYS, *BOARD_KEYS))}.")
    for key in ("score", "cutoff", "outcome"):
        if key not in design:
            raise InvalidOptionError(f"`{key}` must be declared; got nothing. Add it, e.g. "
                                     f"`{key}: {'40' if key == 'cutoff' else _EXAMPLE_COLUMN[key]}`.")
    spec: dict[str, Any] = {"treated": "above", "takeup": None, "covariates": (), "cluster": None,
                            "weights": None, "score_unit": None, **dict.fromkeys(BOARD_KEYS)}
    for key, value in design.items():
        spec[key] = coerce_value(key, value, spec_variables.get(key))
    options = dict(fit_options or {})
    selected = options.pop("outcome", None)
    unknown = sorted(set(options) - set(OPTION_DEFAULTS))
    if unknown:
        raise InvalidOptionError(f"`fit_options` must be fit options; got {shown(unknown)}. "
                                 f"Use keys among {', '.join(OPTION_DEFAULTS)}.")
    opts: dict[str, Any] = dict(OPTION_DEFAULTS)
    for key, value in options.items():
        opts[key] = coerce_value(key, value, spec_variables.get(key))
    selected = check_selected(spec, selected if selected is not None else spec["outcome"][0])
    validate_options(spec, selected, opts)
    return spec, opts, selected


def snapshot(board, *, data, data_version, spec, options, selected, prints, error) -> Inputs:
    """Freeze one set of inputs with each panel's key (called under the lock or in __init__)."""
    generation = next(board._generation)
    if error is not None:
        keys = {p: ("unusable inputs", generation) for p in board._panels}
        return Inputs(generation, data, data_version, dict(spec), dict(options), selected, dict(prints), error,
                       keys=keys)
    graph = compute_graph(score=spec["score"], outcomes=spec["outcome"], outcome=selected,
                          takeup=spec["takeup"], covariates=spec["covariates"], cluster=spec["cluster"],
                          weights=spec["weights"], adjust=bool(options["adjust"]),
                          cutoff_layout=cutoff_layout(spec), cutoff_column=cutoff_column(spec),
                          groups=spec["groups"])
    values: dict[str, Any] = {column_node(c): fp for c, fp in prints.items()}
    values.update(spec)
    values.update(options)
    values["outcomes"] = values.pop("outcome")
    values["outcome"] = selected
    values["data"] = data_version
    values["balance_rule"] = balance_rule(options["bandwidth"])
    keys = {p: panel_key(graph, values, p, options["level"]) for p in board._panels}
    return Inputs(generation, data, data_version, dict(spec), dict(options), selected, dict(prints), None,
                   graph, values, keys)


def read_notebook(board) -> dict[str, Any] | None:
    """Read the notebook: data identity, spec variables, column fingerprints (under the lock).
    Returns the changed fields of the inputs, or None when nothing the board reads changed."""
    old = board._inputs
    data, version, error = old.data, old.data_version, None
    spec, options, selected = dict(old.spec), dict(old.options), old.selected
    changed = False
    if board._namespace is not None and board._data_name is not None:
        try:
            new = lookup(board._namespace, board._data_name)
        except NameError as exc:
            new, error = data, f"`data` is read from the notebook variable `{board._data_name}`: {exc}"
        if not board._identity.same(new):
            # a partitioned input rebound to a collection with the same dask token (or the same
            # files, unchanged) is the same data: the new object is kept, nothing recomputes
            same = is_partitioned(new) and is_partitioned(data) and data_identity(new) == data_identity(data)
            data, board._identity, changed = new, DataIdentity(new), True
            version += 0 if same else 1
    if board._namespace is not None:
        for key, variable in board._spec_variables.items():
            try:
                value = coerce_value(key, lookup(board._namespace, variable), variable)
            except (NameError, InvalidOptionError) as exc:
                error = error or f"`{key}` is read from the notebook variable `{variable}`: {exc}"
                continue
            if board._seen.get(key, _MISSING) != value:
                board._seen[key] = value
                changed = True
                if key in spec:
                    spec[key] = value
                    if key in ("outcome", "covariates") and selected not in (*spec["outcome"],
                                                                              *spec["covariates"]):
                        selected = spec["outcome"][0]
                else:
                    options[key] = value
    if error is None and changed:
        try:
            validate_options(spec, selected, options)
        except SeamlineError as exc:
            error = str(exc)
    prints = fingerprints(data, read_columns(spec))
    if prints != old.fingerprints or error != old.error:
        changed = True
    if not changed:
        return None
    return dict(data=data, data_version=version, spec=spec, options=options, selected=selected, prints=prints,
                error=error)


def read_columns(spec: Mapping[str, Any]) -> tuple[str, ...]:
    """The data columns a declaration reads (only these are fingerprinted)."""
    # a cutoff column and the groups column are read too (seamline.notebook.designs_spec)
    names = [spec["score"], *spec["outcome"], *(c for c in (spec["takeup"], spec["cluster"], spec["weights"]) if c),
             *spec["covariates"], *(c for c in (cutoff_column(spec), spec.get("groups")) if c)]
    return tuple(dict.fromkeys(names))


def check_selected(spec: Mapping[str, Any], outcome: Any) -> str:
    """The selected outcome, checked against the declared outcomes and covariates."""
    allowed = tuple(spec["outcome"]) + tuple(spec["covariates"])
    if not isinstance(outcome, str) or outcome not in allowed:
        raise InvalidOptionError(f"`outcome` must be one of the declared outcomes or covariates "
                                 f"[{', '.join(shown(a) for a in allowed)}]; got {shown(outcome)}. Declare it first.")
    return outcome


def validate_options(spec: Mapping[str, Any], selected: str, options: Mapping[str, Any]) -> None:
    """Raise the error ``Design.fit`` would raise for these fit options."""
    resolve(selected, has_covariates=bool(spec["covariates"]), **{k: v for k, v in options.items() if k in FIT_DEFAULTS})


def sources_changed(old: Inputs, new: Inputs) -> set[str]:
    """The source names that differ between two snapshots of the inputs."""
    changes = set()
    if new.data_version != old.data_version:
        changes.add("data")
    for name, fp in new.fingerprints.items():
        if old.fingerprints.get(name) != fp:
            changes.add(column_node(name))
    for key in new.spec:
        if new.spec[key] != old.spec.get(key):
            changes.add(key)
    for key in new.options:
        if new.options[key] != old.options.get(key):
            changes.add(key)
    if new.selected != old.selected:
        changes.add("outcome")
    if new.error != old.error:
        changes.add("inputs")
    return changes
