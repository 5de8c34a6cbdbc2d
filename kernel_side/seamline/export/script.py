"""Replication scripts: a board's numbers rebuilt from the data file by a standalone Python script.

:func:`replication_script` is pure: from a board's design declaration, fit options and panel
names (plain dicts and tuples) it returns the text of a script that calls seamline's public API
only -- ``seamline.Design`` and its methods, the way a board computes each panel -- and either
prints the headline table or, with ``--json OUT``, writes every number as JSON. Nothing here
touches a board, a widget or the disk; ``Board.export("script", ...)`` writes the text.
"""
from __future__ import annotations

import datetime as _dt
import inspect
import math
import numbers
import os
from collections.abc import Iterable, Mapping
from typing import Any

from ..errors import InvalidOptionError, as_python, shown
from ..time_score import is_time_value, looks_like_date

__all__ = ["PANEL_CALLS", "board_script", "replication_script"]

#: The call that rebuilds each panel, as a board makes it (``design``, ``fit``, ``OUTCOME``,
#: ``OPTIONS`` and ``without`` are names of the generated script). "fit" is always rebuilt first.
PANEL_CALLS: Mapping[str, str] = {
    "first_stage": "fit.first_stage if fit.first_stage is not None else not_applicable(SHARP_REASON)",
    # the take-up jump drawn at the main fit's bandwidths, as the board draws it
    "first_stage_bins": ("design.bins(DESIGN['takeup'], **dict(without(OPTIONS, 'adjust'), bandwidth=fit.bandwidth, "
                         "pilot_bandwidth=fit.pilot_bandwidth)) if fit.first_stage is not None "
                         "else not_applicable(SHARP_REASON)"),
    "bins": "design.bins(outcome=OUTCOME, **OPTIONS)",
    "bandwidths": ("design.bandwidths(OUTCOME, **{k: OPTIONS[k] for k in ('kernel', 'degree', 'bias_degree', "
                   "'variance', 'donut', 'derivative', 'adjust')})"),
    "density": "design.density_test(level=OPTIONS['level'])",
    "balance": ("design.balance(rule=OPTIONS['bandwidth'] if isinstance(OPTIONS['bandwidth'], str) else 'mse', "
                "**without(OPTIONS, 'bandwidth', 'pilot_bandwidth', 'adjust')) if DESIGN['covariates'] "
                "else not_applicable('No covariates are declared, so there is nothing to check for balance.')"),
    "sensitivity": "design.sensitivity(outcome=OUTCOME, **OPTIONS)",
    "placebo": "design.placebo_cutoffs(outcome=OUTCOME, **OPTIONS)",
    "donut": "design.donut(outcome=OUTCOME, **without(OPTIONS, 'donut'))",
    "score_profile": "design.score_profile(outcome=OUTCOME, **OPTIONS)",
    "checks": "design.checks(outcome=OUTCOME, **OPTIONS)",
    # several cutoffs, subgroups (at the headline cutoff) and power, as seamline.notebook.designs_graph
    "by_cutoff": ("whole.by_cutoff(outcome=OUTCOME, **OPTIONS) if whole.cutoff_layout != 'single' "
                  "else not_applicable(SINGLE_CUTOFF_REASON)"),
    "subgroups": ("design.by_group(BOARD['groups'], outcome=OUTCOME, **OPTIONS) if BOARD['groups'] "
                  "else not_applicable(NO_GROUPS_REASON)"),
    "power": "power_plan(design)",
    # inference beyond the robust interval (issue 9), as notebook/compute_inference.py computes it
    "bias_aware": ("design.bias_aware(OUTCOME, smoothness=INFERENCE['smoothness'], kernel=OPTIONS['kernel'], "
                   "degree=OPTIONS['degree'], level=OPTIONS['level']) if OPTIONS['derivative'] == 0 else "
                   "not_applicable('The bias-aware interval covers the jump in level, not a kink.')"),
    "weak_iv": ("fit.weak_iv_conf_set(OPTIONS['level']) if fit.first_stage is not None "
                "else not_applicable(SHARP_REASON)"),
    "local_randomization": ("design.local_randomization(OUTCOME, **without(INFERENCE, 'smoothness'), "
                            "level=OPTIONS['level']) if INFERENCE['window'] is not None or DESIGN['covariates'] "
                            "else not_applicable('No window is given and no covariates are declared to choose one.')"),
}
#: Settings of the inference panels and their defaults (notebook/inference_keys.py).
_INFERENCE_DEFAULTS: Mapping[str, Any] = {"smoothness": None, "window": None, "statistic": "difference in means",
                                          "permutations": 10_000, "seed": None}

_DESIGN_KEYS = ("score", "cutoff", "treated", "outcome", "takeup", "covariates", "cluster", "weights",
                "score_unit")
_OPTION_KEYS = ("bandwidth", "kernel", "degree", "bias_degree", "pilot_bandwidth", "variance", "level", "donut",
                "derivative", "adjust")
_BOARD_KEYS = ("groups", "effect", "headline_cutoff")     # seamline.notebook.designs_spec
_PLACEHOLDER = "REPLACE/WITH/the_data_file.csv"


def _literal(value: Any, where: str) -> str:
    """Python source for a plain value (numbers, text, None, booleans, tuples and lists of them)."""
    value = as_python(value)
    if is_time_value(value):
        # a cutoff date as ISO text (with its UTC offset when it has one): Design reads it back exactly
        return repr(_time_text(value))
    if value is None or isinstance(value, (bool, str)):
        return repr(value)
    if isinstance(value, numbers.Integral):
        return str(int(value))
    if isinstance(value, numbers.Real):
        number = float(value)
        if not math.isfinite(number):
            raise InvalidOptionError(f"`{where}` must be a finite number to write into a script; got {shown(value)}. "
                                     "Fix the board's setting first.")
        return repr(number)
    if isinstance(value, (tuple, list)):
        items = [_literal(v, where) for v in value]
        return "(" + ", ".join(items) + ("," if len(items) == 1 else "") + ")"
    raise InvalidOptionError(f"`{where}` must be a number, text or a list of them to write into a script; got "
                             f"{shown(value)}. Replace it by a plain value.")


def _time_text(value: Any) -> str:
    import pandas as pd
    stamp = pd.Timestamp(value)
    return stamp.date().isoformat() if stamp == stamp.normalize() and stamp.tzinfo is None else stamp.isoformat()


def _fit_defaults() -> dict[str, Any]:
    """``Design.fit``'s own defaults for the options a board sets (read from its signature)."""
    from ..estimate.design import Design
    parameters = inspect.signature(Design.fit).parameters
    return {key: parameters[key].default for key in _OPTION_KEYS}


def _installed_version() -> str:
    from importlib.metadata import PackageNotFoundError, version
    try:
        return version("seamline")
    except PackageNotFoundError:  # pragma: no cover - a source tree that was never installed
        return "0+unknown"


def _block(name: str, values: Mapping[str, Any], keys: Iterable[str]) -> str:
    lines = [f"{name} = {{"]
    lines += [f"    {key!r}: {_literal(values[key], key)}," for key in keys if key in values]
    return "\n".join(lines + ["}"])


def replication_script(spec: Mapping[str, Any], options: Mapping[str, Any], panels: Iterable[str] = (), *,
                       data_path: str | os.PathLike[str] | None = None, name: str = "board",
                       version: str | None = None) -> str:
    """The text of a standalone Python script that rebuilds a board's numbers from its data file.

    Parameters
    ----------
    spec : mapping
        The design declaration, as ``Board.spec`` gives it: ``score``, ``cutoff``, ``outcome`` (a
        name or a list), and ``treated``, ``takeup``, ``covariates``, ``cluster``, ``weights``.
    options : mapping
        The fit options, as ``Board.options`` gives them (with the selected ``outcome``).
    panels : iterable of str
        The board's panels (``Board.panels``); "fit" is always included, unknown names raise.
    data_path : str or path-like, optional
        The data file (``.csv`` or ``.parquet``), written into the script's ``DATA_PATH``. Without
        it ``DATA_PATH`` is a clearly marked placeholder to edit (or pass ``--data`` when running).
    name : str
        The board's name, used in the script's docstring and the JSON.
    version : str, optional
        seamline version to record (default: the installed one).

    Returns
    -------
    str
        Python source. ``python script.py`` prints the headline table; ``python script.py --json
        OUT`` writes ``{"fit": {...}, "<panel>": {...}, ...}``; ``--data PATH`` reads another file.

    Raises
    ------
    InvalidOptionError
        For a missing design key, an unknown panel, or a value that is not a plain literal.

    Examples
    --------
    >>> text = replication_script({"score": "x", "cutoff": 0.0, "outcome": ("y",)}, {"outcome": "y"},
    ...                           data_path="invented.csv")
    >>> "seamline.Design(data, **DESIGN)" in text
    True
    """
    for key in ("score", "cutoff", "outcome"):
        if spec.get(key) is None:
            raise InvalidOptionError(f"`spec` must declare `{key}`; got {shown(dict(spec))}. Pass the board's spec.")
    wanted = tuple(panels)
    unknown = [p for p in wanted if p != "fit" and p not in PANEL_CALLS]
    if unknown:
        raise InvalidOptionError(f"`panels` must be among fit, {', '.join(PANEL_CALLS)}; got {shown(unknown)}. "
                                 "Pass the board's panels.")
    design = {"treated": "above", "takeup": None, "covariates": (), "cluster": None, "weights": None,
              "score_unit": None, **spec}
    design["outcome"] = (design["outcome"],) if isinstance(design["outcome"], str) else tuple(design["outcome"])
    design["covariates"] = () if design["covariates"] is None else (
        (design["covariates"],) if isinstance(design["covariates"], str) else tuple(design["covariates"]))
    given = dict(options)
    outcome = given.pop("outcome", None) or design["outcome"][0]
    inference = {**_INFERENCE_DEFAULTS, **{k: given.pop(k) for k in _INFERENCE_DEFAULTS if k in given}}
    # Every option is written out, defaults included, so the script says what it computes.
    fit_options = {**_fit_defaults(), **given}
    unknown_options = sorted(set(fit_options) - set(_OPTION_KEYS))
    if unknown_options:
        raise InvalidOptionError(f"`options` must be fit options; got {shown(unknown_options)}. Use keys among "
                                 f"{', '.join(_OPTION_KEYS)}.")
    if version is None:
        version = _installed_version()
    path_text = _PLACEHOLDER if data_path is None else os.fspath(data_path)
    marker = ("# <-- EDIT: the path of the data file (CSV or Parquet)" if data_path is None
              else "# the data file the board was exported with (CSV or Parquet, by suffix)")
    calls = "\n".join(f"    results[{panel!r}] = attempt(lambda: {PANEL_CALLS[panel]})"
                      for panel in PANEL_CALLS if panel in wanted)
    today = _dt.date.today().isoformat()
    return _TEMPLATE.format(
        name=name, version=version, today=today, data_path=repr(path_text), marker=marker,
        placeholder=repr(_PLACEHOLDER),
        design=_block("DESIGN", design, _DESIGN_KEYS), outcome=_literal(outcome, "outcome"),
        date_score=repr(is_time_value(design["cutoff"]) or looks_like_date(design["cutoff"])),
        board=_block("BOARD", {key: spec.get(key) for key in _BOARD_KEYS}, _BOARD_KEYS),
        single_reason=repr(_reason("cutoff_effects")), groups_reason=repr(_reason("group_effects")),
        options=_block("OPTIONS", fit_options, _OPTION_KEYS) + "\n" + _block("INFERENCE", inference,
                                                                            _INFERENCE_DEFAULTS),
        calls=calls or "    pass",
        sharp_reason=repr("Sharp design: treatment follows the side of the cutoff exactly, so there is no first "
                          "stage." if design["takeup"] is None else
                          "Take-up equals assignment on every usable row, so the design is sharp and has no first "
                          "stage."))


def _reason(node: str) -> str:
    from ..notebook.designs_graph import not_applicable
    return not_applicable(node).reason


def board_script(board: Any, path: str | os.PathLike[str] | None = None, *,
                 data_path: str | os.PathLike[str] | None = None) -> str:
    """The replication script of a board (read through ``spec``, ``options``, ``panels``, ``name``).

    What ``Board.export("script", path=None, data_path=None)`` returns; written to ``path`` when
    given (replaced if it exists).
    """
    options = dict(board.options)
    if options.get("seed", 0) is None and "local_randomization" in board.panels:
        # a drawn seed is recorded on the result: write it, so the script redraws the same assignments
        drawn = board.results["local_randomization"]
        options["seed"] = getattr(drawn, "seed", None)
    text = replication_script(board.spec, options, board.panels, data_path=data_path,
                              name=getattr(board, "name", "board"))
    if path is not None:
        with open(path, "w", encoding="utf-8", newline="") as handle:
            handle.write(text)
    return text


_TEMPLATE = '''#!/usr/bin/env python3
"""Replication script for the seamline board {name!r}.

Generated by seamline {version} on {today}. It rebuilds every number on the board from the data
file with seamline's public API only (seamline.Design and its methods).

    python this_script.py                  # print the headline table
    python this_script.py --json OUT.json  # write every number of every panel as JSON
    python this_script.py --data FILE      # read another data file (CSV or Parquet)

An RD estimate is local to the cutoff; it rests on continuity of the potential outcomes and no
manipulation of the score, and does not replace judgement about the design.
"""
# ---------------------------------------------------------------------------------------------
DATA_PATH = {data_path}  {marker}
# ---------------------------------------------------------------------------------------------
SEAMLINE_VERSION = {version!r}   # the version that wrote this script

import argparse
import dataclasses
import json
import math
import sys
from pathlib import Path

import pandas as pd

import seamline

{design}
DATE_SCORE = {date_score}   # the score is a date: a CSV file's text dates are read back as dates
OUTCOME = {outcome}
{options}
# the subgroup column, the effect the power panel plans for, the headline of cumulative cutoffs
{board}
SHARP_REASON = {sharp_reason}
SINGLE_CUTOFF_REASON = {single_reason}
NO_GROUPS_REASON = {groups_reason}


def load_data(path):
    """The data file as a DataFrame: CSV (floats read back exactly) or Parquet, by suffix."""
    path = Path(path)
    if str(path) == {placeholder}:
        sys.exit("Set DATA_PATH at the top of this script to the data file, or pass --data FILE.")
    if not path.exists():
        sys.exit(f"DATA_PATH must name an existing file; got {{str(path)!r}}. Fix the path or pass --data FILE.")
    suffix = path.suffix.lower()
    if suffix == ".csv":
        # floats read back bit for bit: pandas 3 does it by default, pandas 2 needs the round-trip parser
        exact = {{}} if int(pd.__version__.split(".")[0]) >= 3 else {{"float_precision": "round_trip"}}
        frame = pd.read_csv(path, **exact)
        if DATE_SCORE:
            frame[DESIGN["score"]] = read_dates(frame[DESIGN["score"]])
        return frame
    if suffix in (".parquet", ".pq"):
        return pd.read_parquet(path)
    sys.exit(f"DATA_PATH must end in .csv or .parquet; got {{str(path)!r}}. Convert the data to one of them.")


def read_dates(column):
    """A CSV column of ISO dates as datetime64; several UTC offsets (a time zone with summer time)
    cannot be restored from text, so such data must come as Parquet, which keeps the time zone."""
    try:
        dates = pd.to_datetime(column, format="ISO8601")
    except (TypeError, ValueError) as exc:
        sys.exit(f"The score column {{DESIGN['score']!r}} must hold ISO dates with one UTC offset to be read from "
                 f"CSV; got {{exc}}. Export the data as Parquet, which keeps dates and time zones.")
    if not pd.api.types.is_datetime64_any_dtype(dates):
        sys.exit(f"The score column {{DESIGN['score']!r}} must hold dates with one UTC offset to be read from CSV. "
                 "Export the data as Parquet, which keeps dates and time zones.")
    return dates


def without(options, *keys):
    return {{k: v for k, v in options.items() if k not in keys}}


def not_applicable(reason):
    return {{"applies": False, "reason": reason}}


def attempt(compute):
    """One panel's result, or the error that stopped it (a board shows the error in the panel)."""
    try:
        return compute()
    except Exception as exc:  # noqa: BLE001 - recorded like the board records it
        return {{"error": f"{{type(exc).__name__}}: {{exc}}"}}


def power_plan(design):
    """The Power panel: the power curve, and for BOARD['effect'] the power and the 80% sample size."""
    curve = design.power_curve(outcome=OUTCOME, **OPTIONS)
    out = {{"curve": result_numbers(curve), "table": plain(curve.table())}}
    effect = BOARD["effect"]
    if effect is not None:
        out["power"] = result_numbers(design.power(effect, outcome=OUTCOME, **OPTIONS))
        out["sample_size"] = attempt(lambda: result_numbers(design.sample_size(effect, power=0.8, outcome=OUTCOME,
                                                                               **OPTIONS)))
    return out


def rebuild(data):
    """Every panel of the board, computed as the board computes it."""
    whole = seamline.Design(data, **DESIGN)
    # cumulative cutoffs: every single-cutoff panel reads the headline cutoff's design
    headline = BOARD["headline_cutoff"] if BOARD["headline_cutoff"] is not None else whole.cutoffs[0]
    design = whole.at(headline) if whole.cutoff_layout == "cumulative" else whole
    fit = design.fit(OUTCOME, **OPTIONS)
    results = {{"fit": fit}}
{calls}
    return results


# ---- JSON -----------------------------------------------------------------------------------
def plain(value):
    """A JSON-ready copy: numpy values as Python numbers, non-finite numbers as null."""
    if hasattr(value, "item") and getattr(value, "ndim", None) == 0:
        value = value.item()
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if value is None or isinstance(value, (bool, int, str)):
        return value
    if isinstance(value, dict):
        return {{str(k): plain(v) for k, v in value.items()}}
    if isinstance(value, (list, tuple)):
        return [plain(v) for v in value]
    if isinstance(value, pd.DataFrame):
        return [plain(row) for row in value.to_dict("records")]
    return str(value)


def fit_numbers(fit):
    numbers = {{key: plain(getattr(fit, key)) for key in (
        "kind", "outcome", "estimate", "std_error", "bias_corrected_estimate", "robust_std_error", "level",
        "robust_conf_int", "robust_p_value", "conf_int", "p_value", "bandwidth", "pilot_bandwidth",
        "bandwidth_rule", "n_used", "n_effective_robust", "n_total", "n_dropped", "n_donut", "kernel", "degree",
        "bias_degree", "derivative", "variance", "n_clusters", "donut", "limits", "first_stage_f",
        "covariate_coefficients", "warnings")}}
    numbers["first_stage"] = None if fit.first_stage is None else fit_numbers(fit.first_stage)
    return numbers


def result_numbers(result):
    """A panel's numbers: its plain fields and its table, or why it has none."""
    if isinstance(result, dict):
        return result
    if isinstance(result, seamline.Fit):
        return fit_numbers(result)
    if isinstance(result, pd.DataFrame):
        return {{"table": plain(result)}}
    out = {{}}
    scalar = (str, int, float, bool, type(None))
    for field in dataclasses.fields(result):
        value = getattr(result, field.name)
        if field.name == "rows":   # the same numbers as the table below
            continue
        if isinstance(value, scalar) or (
                isinstance(value, tuple) and all(isinstance(v, (*scalar, dict)) for v in value)):
            out[field.name] = plain(value)
        elif field.name == "pooled" and value is not None:        # several cutoffs: the pooled fit
            out[field.name] = fit_numbers(value)
        elif field.name in ("equality", "decomposition") and value is not None:
            out[field.name] = result_numbers(value) if hasattr(value, "table") else {{
                f.name: plain(getattr(value, f.name)) for f in dataclasses.fields(value)
                if isinstance(getattr(value, f.name), scalar)}}
    out["title"] = result.title()
    out["table"] = plain(result.table())
    return out


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", metavar="OUT", help="write every number of every panel to this JSON file")
    parser.add_argument("--data", metavar="FILE", default=DATA_PATH, help="the data file (default: DATA_PATH)")
    args = parser.parse_args(argv)
    if seamline.__version__ != SEAMLINE_VERSION:
        print(f"note: written by seamline {{SEAMLINE_VERSION}}, running seamline {{seamline.__version__}}; "
              "numbers may differ where the methods changed.", file=sys.stderr)
    results = rebuild(load_data(args.data))
    if args.json:
        record = {{"board": {name!r}, "seamline_version": seamline.__version__,
                  "written_by_version": SEAMLINE_VERSION, "data": str(args.data)}}
        record.update({{panel: result_numbers(value) for panel, value in results.items()}})
        Path(args.json).write_text(json.dumps(record, indent=1, allow_nan=False) + "\\n", encoding="utf-8")
        print(f"wrote {{args.json}}")
    else:
        print(seamline.paper_table([results["fit"]], labels=[{name!r}]).to_markdown())


if __name__ == "__main__":
    main()
'''
