"""The ``%%cutoff NAME`` cell magic: a parser that turns a declaration into one Board.

The cell body holds one ``key: value`` per line; ``#`` starts a comment. Values are literals
(numbers, words such as ``triangular``, column names) or names of notebook variables, looked up
-- never evaluated. A declaration error raises :class:`seamline.errors.DesignSpecError` naming
the line (the ``%%cutoff`` line is line 1, as the notebook shows it) and the fix, before any
existing board is touched.

Precedence for a value: a literal of the key's kind first (a number, an allowed word, a column
of the data), then a notebook variable of that name. Quote a value ('my column') to force the
literal reading.

Importing this module is cheap (no widgets, no charts): ``%load_ext seamline`` runs
:func:`load_ipython_extension`, which only registers the magic.
"""
from __future__ import annotations

import difflib
import keyword
import re
from dataclasses import dataclass, field
from typing import Any

from ..time_score import looks_like_date
from ..errors import DesignSpecError, shown
from ..options import BANDWIDTH_RULES, KERNELS, PILOT_RULES, SCORE_UNITS, SIDES, VARIANCES

__all__ = ["ParsedSpec", "cutoff", "load_ipython_extension", "parse_spec", "parse_name"]

# The vocabulary, kept here so parsing needs no heavy import (board.py has the same keys).
DESIGN_KEYS = ("score", "cutoff", "treated", "outcome", "takeup", "covariates", "cluster", "weights",
               "score_unit")
OPTION_KEYS = ("bandwidth", "kernel", "degree", "bias_degree", "pilot_bandwidth", "variance", "level",
               "donut", "derivative", "adjust")
BOARD_KEYS = ("groups", "effect", "headline_cutoff")      # see designs_spec
# Inference settings (notebook/inference_keys.py parses and checks their values).
INFERENCE_KEYS = ("smoothness", "window", "statistic", "permutations", "seed")
KEYS = ("data", *DESIGN_KEYS, *BOARD_KEYS, *OPTION_KEYS, *INFERENCE_KEYS)
REQUIRED = ("data", "score", "cutoff", "outcome")
_KIND = {
    "data": "data", "score": "column", "takeup": "column?", "cluster": "column?", "weights": "column?",
    "outcome": "columns", "covariates": "columns?", "cutoff": "cutoff", "level": "level",
    "donut": "number", "degree": "integer", "bias_degree": "integer?", "derivative": "integer",
    "treated": "choice", "kernel": "choice", "variance": "choice", "score_unit": "choice", "bandwidth": "bandwidth",
    "pilot_bandwidth": "bandwidth?", "adjust": "boolean",
    "groups": "column?", "effect": "number?", "headline_cutoff": "number?",
    **{key: "inference" for key in INFERENCE_KEYS},
}
_CHOICES = {"treated": SIDES, "kernel": KERNELS, "variance": VARIANCES, "score_unit": SCORE_UNITS}
_EXAMPLES = {
    "data": "pupils", "score": "reading_score", "cutoff": "40", "treated": "below",
    "outcome": "math_gain, attendance", "takeup": "attended", "covariates": "age, prior_math",
    "cluster": "school", "weights": "sample_weight", "score_unit": "weeks", "bandwidth": "mse", "kernel": "triangular",
    "degree": "1", "bias_degree": "2", "pilot_bandwidth": "4.0", "variance": "bias-reduced",
    "level": "0.95", "donut": "0", "derivative": "0", "adjust": "false",
    "groups": "region", "effect": "0.2", "headline_cutoff": "60",
    "smoothness": "0.5", "window": "2.5", "statistic": "rank sum", "permutations": "10000", "seed": "20260314",
}
_NAME = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*(\.[A-Za-z_][A-Za-z0-9_]*)*$")
_INTEGER = re.compile(r"^[+-]?\d+$")
_TRUE, _FALSE = ("true", "yes", "on", "1"), ("false", "no", "off", "0")
_NONE = ("none", "auto", "default")


@dataclass
class ParsedSpec:
    """A parsed declaration: the arguments of one ``Board(...)`` call, plus line numbers."""
    name: str
    data: Any
    data_name: str | None          # None for a quoted Parquet path
    design_kwargs: dict[str, Any]
    fit_options: dict[str, Any]
    spec_variables: dict[str, str] = field(default_factory=dict)
    lines: dict[str, int] = field(default_factory=dict)


def _fail(line: int | None, message: str) -> DesignSpecError:
    return DesignSpecError(f"line {line}: {message}" if line is not None else message)


def _strip_comment(text: str) -> str:
    quote = None
    for i, ch in enumerate(text):
        if quote:
            if ch == quote:
                quote = None
        elif ch in "'\"":
            quote = ch
        elif ch == "#":
            return text[:i]
    return text


def _split_list(text: str, line: int, key: str) -> list[tuple[str, bool]]:
    """Split on commas outside quotes; each item is (text, was_quoted)."""
    items, current, quote, quoted = [], [], None, False
    for ch in text:
        if quote:
            if ch == quote:
                quote = None
            else:
                current.append(ch)
        elif ch in "'\"":
            quote, quoted = ch, True
        elif ch == ",":
            items.append(("".join(current).strip(), quoted))
            current, quoted = [], False
        else:
            current.append(ch)
    if quote:
        raise _fail(line, f"`{key}` must close its quote; got an unmatched {quote} in {shown(text)}. Add the closing "
                          f"{quote}.")
    items.append(("".join(current).strip(), quoted))
    if any(not t for t, _ in items):
        raise _fail(line, f"`{key}` must list names separated by single commas; got {shown(text)}. Remove the empty "
                          f"item, e.g. `{key}: {_EXAMPLES[key]}`.")
    return items


def parse_name(line: str) -> str:
    """The board name from the magic's line (``%%cutoff NAME``)."""
    words = line.split()
    if not words:
        raise _fail(1, "`%%cutoff` must be followed by a board name; got nothing. Write e.g. `%%cutoff tutoring`.")
    if len(words) > 1:
        raise _fail(1, f"`%%cutoff` takes one board name; got {shown(line.strip())}. Write e.g. `%%cutoff {words[0]}` "
                       "and put settings on the lines below.")
    name = words[0]
    if not name.isidentifier() or keyword.iskeyword(name):
        raise _fail(1, f"the board name must be a Python identifier; got {shown(name)}. Use letters, digits and "
                       "underscores, e.g. `%%cutoff tutoring`.")
    return name


def _suggest_key(key: str) -> str:
    close = difflib.get_close_matches(key, KEYS, n=1, cutoff=0.6)
    if close:
        return f"Did you mean `{close[0]}`?"
    return f"Valid keys: {', '.join(KEYS)}."


def _read_lines(body: str, first_line: int) -> dict[str, tuple[str, int]]:
    raw: dict[str, tuple[str, int]] = {}
    for offset, text in enumerate(body.splitlines()):
        number = first_line + offset
        text = _strip_comment(text).strip()
        if not text:
            continue
        if ":" not in text:
            raise _fail(number, f"a setting must be written `key: value`; got {shown(text)}. Add the colon, e.g. "
                                "`cutoff: 40`.")
        key_text, value = (part.strip() for part in text.split(":", 1))
        key = re.sub(r"[\s\-]+", "_", key_text.lower())
        if key not in KEYS:
            raise _fail(number, f"`{key_text}` must be a known key; got an unknown key. {_suggest_key(key)}")
        if key in raw:
            raise _fail(number, f"`{key}` must be given once; got it again (first on line {raw[key][1]}). Keep "
                                "one of the two lines.")
        if not value:
            raise _fail(number, f"`{key}` must have a value; got nothing after the colon. Write e.g. "
                                f"`{key}: {_EXAMPLES[key]}`.")
        raw[key] = (value, number)
    return raw


class _Resolver:
    """Turns the text of each value into a Python value, following the precedence rules."""

    def __init__(self, namespace: dict[str, Any], columns: list[str] | None):
        self.namespace = namespace
        self.columns = columns
        self.variables: dict[str, str] = {}

    def variable(self, key: str, text: str, line: int, expected: str):
        from .board import lookup
        if not _NAME.match(text):
            hint = (" Expressions are not evaluated: compute the value in a cell above (e.g. "
                    f"`my_{key} = ...`) and write `{key}: my_{key}`." if any(c in text for c in "+-*/()[]")
                    else f" Write e.g. `{key}: {_EXAMPLES[key]}`.")
            raise _fail(line, f"`{key}` must be {expected} or the name of a notebook variable; got {shown(text)}.{hint}")
        try:
            value = lookup(self.namespace, text)
        except NameError:
            pool = self.columns if key in _COLUMN_KEYS and self.columns else [
                n for n in self.namespace if not n.startswith("_")]
            hint = _closest(text, pool) or f"Define `{text}` in a cell above, or write e.g. `{key}: {_EXAMPLES[key]}`."
            raise _fail(line, f"`{key}` must be {expected} or the name of a notebook variable; got {shown(text)}, "
                              f"which is neither. {hint}") from None
        self.variables[key] = text
        return value

    def column(self, key: str, text: str, quoted: bool, line: int, single: bool):
        if quoted or self.columns is None or text in self.columns:
            return text
        if single and _NAME.match(text) and text.split(".")[0] in self.namespace:
            value = self.variable(key, text, line, "a column name")
            return value
        hint = _closest(text, self.columns) or "Check the spelling against the data's columns."
        raise _fail(line, f"`{key}` must name a column of the data; got {shown(text)}, which is not a column (nor a "
                          f"notebook variable). {hint}")

    def cutoff(self, text: str, line: int):
        """A number, a date, a column of per-unit cutoffs, increasing numbers (``30, 60`` or
        ``[30, 60]``), or a notebook variable -- in that order. A quoted value is a date or a
        column, never an expression."""
        if looks_like_date(text):
            return text.strip().strip("'\"")          # a cutoff date for a date score (seamline.time_score)
        bracketed = text.strip().startswith("[") and text.strip().endswith("]")
        items = _split_list(text.strip()[1:-1] if bracketed else text, line, "cutoff")
        if len(items) > 1 or bracketed:
            numbers = [None if quoted else _number(item) for item, quoted in items]
            if any(n is None for n in numbers):
                raise _fail(line, f"`cutoff` must list numbers when it lists several cutoffs; got {shown(text)}. "
                                  "Write e.g. `cutoff: 30, 60` (cumulative cutoffs on one score), or name one "
                                  "column of per-unit cutoffs.")
            return numbers
        (item, quoted), = items
        if quoted:
            if looks_like_date(item) or (self.columns is not None and item in self.columns):
                return item
            hint = _closest(item, self.columns or []) or "Quote only a column name or a date."
            raise _fail(line, f"`cutoff` in quotes must name a column of the data (per-unit cutoffs) or a date; "
                              f"got {shown(text.strip())}, which is neither. {hint}")
        number = _number(item)
        if number is not None:
            return number
        if self.columns is not None and item in self.columns:
            return item
        return self.variable("cutoff", item, line, "a number, a column name, increasing numbers")

    def resolve(self, key: str, text: str, line: int) -> Any:
        kind = _KIND[key]
        lowered = text.strip().lower()
        if kind == "inference":
            from .inference_keys import parse_text
            value = parse_text(key, text)
            if isinstance(value, str) and key != "statistic" and _NAME.match(text) and \
                    text.split(".")[0] in self.namespace:
                return self.variable(key, text, line, "a value of this setting")
            return value
        if kind.endswith("?") and lowered in _NONE and (self.columns is None or text not in self.columns):
            return None
        kind = kind.rstrip("?")
        if kind == "column":
            (item, quoted), *rest = _split_list(text, line, key)
            if rest:
                raise _fail(line, f"`{key}` must name one column; got {shown(text)}. Keep one name.")
            return self.column(key, item, quoted, line, single=True)
        if kind == "columns":
            items = _split_list(text, line, key)
            if len(items) == 1:
                return self.column(key, items[0][0], items[0][1], line, single=True)
            return [self.column(key, item, quoted, line, single=False) for item, quoted in items]
        if kind == "cutoff":
            return self.cutoff(text, line)
        if kind in ("number", "level"):
            number = _number(text[:-1] if kind == "level" and text.endswith("%") else text)
            if number is not None:
                return number / 100 if kind == "level" and text.endswith("%") else number
            return self.variable(key, text, line, "a number")
        if kind == "integer":
            if _INTEGER.match(text):
                return int(text)
            return self.variable(key, text, line, "a whole number")
        if kind == "choice":
            allowed = _CHOICES[key]
            if lowered in allowed:
                return lowered
            if _NAME.match(text) and text.split(".")[0] in self.namespace:
                return self.variable(key, text, line, "one of " + ", ".join(allowed))
            close = difflib.get_close_matches(lowered, allowed, n=1, cutoff=0.5)
            hint = f"Did you mean `{key}: {close[0]}`?" if close else "Pick one of the listed values."
            raise _fail(line, f"`{key}` must be one of {', '.join(allowed)}; got {shown(text)}. {hint}")
        if kind == "bandwidth":
            rules = PILOT_RULES if key == "pilot_bandwidth" else BANDWIDTH_RULES
            if lowered in rules:
                return lowered
            parts = [p for p in re.split(r"[,\s]+", text.strip()) if p]
            numbers = [_number(p) for p in parts]
            if parts and all(n is not None for n in numbers) and len(numbers) <= 2:
                return numbers[0] if len(numbers) == 1 else tuple(numbers)
            if _NAME.match(text) and text.split(".")[0] in self.namespace:
                return self.variable(key, text, line, "a rule or a number")
            close = difflib.get_close_matches(lowered, rules, n=1, cutoff=0.5)
            hint = f" Did you mean `{key}: {close[0]}`?" if close else ""
            raise _fail(line, f"`{key}` must be one of {', '.join(rules)}, a number or two numbers "
                              f"(below, above); got {shown(text)}.{hint or ' Write e.g. `bandwidth: 2.5, 3`.'}")
        if kind == "boolean":
            if lowered in _TRUE:
                return True
            if lowered in _FALSE:
                return False
            return self.variable(key, text, line, "true or false")
        raise AssertionError(kind)   # _KIND and this dispatch must agree


_COLUMN_KEYS = ("score", "outcome", "takeup", "covariates", "cluster", "weights", "groups")


def _closest(text: str, candidates) -> str:
    close = difflib.get_close_matches(text, [str(c) for c in candidates], n=3, cutoff=0.5)
    if not close:
        return ""
    return f"Did you mean {', '.join(repr(c) for c in close)}?"


def _number(text: str) -> float | int | None:
    text = text.strip().replace("_", "")
    if _INTEGER.match(text):
        return int(text)
    try:
        value = float(text)
    except ValueError:
        return None
    return value if value == value else None   # "nan" is not a usable literal


def parse_spec(body: str, namespace: dict[str, Any], *, name: str = "board", first_line: int = 2) -> ParsedSpec:
    """Parse a ``%%cutoff`` cell body into the arguments of a Board, checking every value.

    Parameters
    ----------
    body : the cell text below the ``%%cutoff`` line
    namespace : the notebook's variables (``shell.user_ns``); read, never written
    name : the board name
    first_line : number of the body's first line as the user sees it (2 in a cell)

    Returns
    -------
    ParsedSpec

    Raises
    ------
    DesignSpecError
        "line N: ..." naming the setting, what it must be, what it got and how to fix it.
    """
    __tracebackhide__ = True
    raw = _read_lines(body, first_line)
    missing = [k for k in REQUIRED if k not in raw]
    if missing:
        lines = "; ".join(f"`{k}: {_EXAMPLES[k]}`" for k in missing)
        raise DesignSpecError(f"`%%cutoff {name}` must declare {', '.join(REQUIRED)}; got no "
                              f"{', '.join(f'`{k}`' for k in missing)}. Add a line for each, e.g. {lines}.")
    from .board import coerce_value, lookup
    data_text, data_line = raw["data"]
    if _quoted(data_text):
        data, data_text = _parquet_path(data_text, data_line)
        columns = _parquet_columns(data, data_line)
    elif not _NAME.match(data_text):
        raise _fail(data_line, f"`data` must be the name of a DataFrame variable or a quoted Parquet path; got "
                               f"{shown(data_text)}. Write e.g. `data: pupils` or `data: \"pupils/*.parquet\"` "
                               "(expressions are not evaluated).")
    else:
        try:
            data = lookup(namespace, data_text)
        except NameError as exc:
            raise _fail(data_line, str(exc)) from None
        columns = _columns_of(data)
        if columns is None:
            raise _fail(data_line, f"`data` must be a DataFrame (pandas, dask, or an Arrow/polars table); got "
                                   f"{type(data).__name__} from `{data_text}`. Convert it with pandas.DataFrame(...).")
    if data_text is not None and name == data_text.split(".")[0]:
        raise _fail(1, f"the board name must differ from the data variable; got `{name}` for both. Rename the "
                       f"board, e.g. `%%cutoff {name}_board`.")
    resolver = _Resolver(namespace, columns)
    design, options, lines = {}, {}, {"data": data_line}
    for key, (text, line) in raw.items():
        if key == "data":
            continue
        value = resolver.resolve(key, text, line)
        try:
            value = coerce_value(key, value, resolver.variables.get(key))
        except ValueError as exc:
            raise _fail(line, str(exc)) from None
        (design if key in DESIGN_KEYS or key in BOARD_KEYS else options)[key] = value
        lines[key] = line
    clash = [v for v in resolver.variables.values() if v.split(".")[0] == name]
    if clash:
        raise _fail(1, f"the board name must differ from the variables the cell reads; got `{name}`, also read "
                       f"by `{next(k for k, v in resolver.variables.items() if v == clash[0])}`. Rename the board.")
    return ParsedSpec(name=name, data=data, data_name=data_text, design_kwargs=design, fit_options=options,
                      spec_variables=dict(resolver.variables), lines=lines)


def _quoted(text: str) -> bool:
    return len(text) >= 2 and text[0] == text[-1] and text[0] in "'\""


def _parquet_path(text: str, line: int) -> tuple[str, None]:
    """A quoted ``data`` value: a Parquet file, a folder of Parquet files or a glob of them."""
    import os
    from ..partitioned import PARQUET_SUFFIXES
    path = os.path.expanduser(text[1:-1].strip())
    if not (path.lower().endswith(PARQUET_SUFFIXES) or os.path.isdir(path)):
        raise _fail(line, f"`data` in quotes must be a Parquet path (a file or glob ending in "
                          f"{', '.join(PARQUET_SUFFIXES)}, or a folder of Parquet files); got {shown(text)}. Write e.g. "
                          "`data: \"pupils/*.parquet\"`, or name a DataFrame variable without quotes (other files: "
                          "read them into a DataFrame in a cell above).")
    return path, None


def _parquet_columns(path: str, line: int) -> list[str]:
    """The column names of the Parquet files a path names (the first file's schema; no rows read)."""
    from ..errors import SeamlineError
    from ..partitioned import parquet_files
    try:
        import pyarrow.parquet as pq
        return list(pq.read_schema(parquet_files(path)[0]).names)
    except ImportError:
        from ..partitioned import INSTALL_HINT
        raise _fail(line, f"`data` as a Parquet path needs pyarrow and dask. {INSTALL_HINT}") from None
    except SeamlineError as exc:
        raise _fail(line, str(exc)) from None
    except OSError as exc:
        raise _fail(line, f"`data` path {shown(path)} must be readable Parquet; got {type(exc).__name__}: {exc}. "
                          "Check that the files are Parquet files.") from None


def _columns_of(data: Any) -> list[str] | None:
    if hasattr(data, "columns") and not callable(data.columns):
        try:
            return [str(c) if not isinstance(c, str) else c for c in list(data.columns)]
        except TypeError:
            return None
    if hasattr(data, "column_names"):             # a pyarrow Table
        return list(data.column_names)
    return None


def _line_of(message: str, lines: dict[str, int]) -> int:
    """The line of the setting an engine message is about (its leading `name`), else the data line."""
    match = re.match(r"^`(\w+)`", message)
    key = match.group(1) if match else None
    return lines.get(key, lines["data"])


def build_board(spec: ParsedSpec, namespace: dict[str, Any]):
    """Create the Board for a parsed declaration, mapping validation errors to their lines."""
    __tracebackhide__ = True
    from ..errors import SeamlineError
    from .board import Board
    try:
        board = Board(spec.name, spec.design_kwargs, spec.fit_options, data=spec.data, data_name=spec.data_name,
                      namespace=namespace, spec_variables=spec.spec_variables, autorun=False)
        from ..partitioned import is_partitioned
        if not is_partitioned(spec.data):
            board.validate()      # the columns and the cutoff against the data
        # a dask DataFrame or Parquet path is read on the board's worker (the header counts the
        # partitions); its column names were checked above from metadata, other errors show in the panel
    except SeamlineError as exc:
        message = str(exc)
        raise _fail(_line_of(message, spec.lines), message) from None
    return board


def cutoff(line: str, cell: str, *, shell=None):
    """Declare a cutoff design and show its live board.

    Usage::

        %%cutoff tutoring
        data: pupils            # a DataFrame (pandas or dask) in the notebook, or a quoted
                                # Parquet path: "pupils/*.parquet"
        score: reading_score    # the running variable
        cutoff: 40              # a number, a column of per-unit cutoffs, increasing numbers
                                # (30, 60: cumulative cutoffs), or a notebook variable
        treated: below          # side assigned the treatment (default above)
        outcome: math_gain, attendance
        takeup: attended        # optional: treatment actually received -> fuzzy design
        covariates: age, prior_math
        cluster: school         # optional
        weights: sample_weight  # optional
        score_unit: weeks       # date scores only: hours | days (default) | weeks | months | years
        bandwidth: mse          # mse | mse-split | coverage | ik | a number | two numbers
        kernel: triangular      # triangular | uniform | epanechnikov
        degree: 1
        variance: bias-reduced  # bias-reduced | neighbors | hc0 | hc1 | hc2 | hc3
        level: 0.95
        donut: 0
        groups: region          # optional: subgroup effects by a pre-treatment column
        effect: 0.2             # optional: the effect the power panel plans for
        headline_cutoff: 60     # cumulative cutoffs: the one the headline shows (default the first)

    Also: bias_degree, pilot_bandwidth (a number, two numbers, nearer-half or two-step), derivative
    (1 for a kink design), adjust (true to adjust for the covariates). The cell binds NAME to the board (``NAME.fit``, ``NAME.results``,
    ``NAME.refresh()``, ``NAME.pause()``, ``NAME.export(...)``); after every cell the board
    recomputes what changed in its data or in the notebook variables it names. Values are never
    evaluated; errors name the line (the ``%%cutoff`` line is line 1).
    """
    __tracebackhide__ = True
    if shell is None:
        from IPython import get_ipython
        shell = get_ipython()
    namespace = shell.user_ns
    from .board import find, install_hook
    words = line.split()
    old = find(words[0], namespace) if len(words) == 1 else None
    try:
        name = parse_name(line)
        spec = parse_spec(cell, namespace, name=name, first_line=2)
        new = build_board(spec, namespace)
    except DesignSpecError as exc:
        # Keep the earlier board of this name on screen (the cell's output was cleared when it ran).
        if old is not None:
            try:
                old.show()
            except Exception:
                pass
        # Raised afresh from here, so the notebook shows the message, not the parser's internals.
        raise DesignSpecError(str(exc)) from None
    if old is not None:
        old.close()
    namespace[name] = new
    install_hook(shell)
    new.refresh()
    new.show()


def load_ipython_extension(ip) -> None:
    """Register ``%%cutoff`` and the front-end channel (``%load_ext seamline``). Boards install
    their after-cell check when the first one is made; nothing heavy is imported here."""

    def cutoff_magic(line, cell):
        __tracebackhide__ = True
        return cutoff(line, cell, shell=ip)

    cutoff_magic.__doc__ = cutoff.__doc__
    ip.register_magic_function(cutoff_magic, magic_kind="cell", magic_name="cutoff")
    # the front end's comm channel (standard library only, so loading stays fast)
    from .channel import register
    register(ip)
