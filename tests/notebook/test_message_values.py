"""Every error and warning a notebook user sees shows values as they would type them.

``2.0``, ``(1.0, 2.5)``, ``'gaussian'`` -- never ``np.float64(2.0)``. Values reach the checks as
numpy scalars and arrays when they come from notebook variables (``level: my_level`` in a
``%%cutoff`` cell), from code driving a board, or from results. The expected text of each check is
the Python literal a user types for the same value (the Python language reference's ``repr`` of
the built-in number, string, list or tuple).

Two sweeps:

* a static one over every module of the package: an error or warning message written as an
  f-string never uses ``!r`` or ``repr()`` (which show numpy's wrappers) and never interpolates a
  bare ``list(...)``/``tuple(...)`` (whose items would show them); it calls
  ``seamline.errors.shown`` instead;
* a live one that feeds numpy values through the notebook layer (declaration checks, the cell
  magic, a board's options, the board view's controls, the paper-table control) and through the
  estimate layer's validators, and checks each message. Warnings are covered by the static sweep
  (``warnings.warn`` and logger calls).
"""
from __future__ import annotations

import ast
import re
from pathlib import Path

import numpy as np
import pytest

import seamline
from seamline.demo_cutoffs import cumulative_grants_scenario
from seamline.demo_data import sharp_scenario
from seamline.errors import SeamlineError
from seamline.notebook.magic import parse_spec
from seamline.notebook.spec import coerce_value

PACKAGE = Path(seamline.__file__).resolve().parent
WRAPPERS = re.compile(r"np\.|numpy\.|float64|float32|int64|array\(|np_str|dtype=")
MESSAGE_CALLS = {"warn", "warning", "_warn"}


# ---- the static sweep ----------------------------------------------------------------------------
def _message_fstrings(tree: ast.AST):
    """f-strings inside ``raise ...(...)`` and ``warnings.warn(...)``/``log.warning(...)`` calls."""
    for node in ast.walk(tree):
        roots = []
        if isinstance(node, ast.Raise) and node.exc is not None:
            roots.append(node.exc)
        elif isinstance(node, ast.Call):
            func = node.func
            name = func.attr if isinstance(func, ast.Attribute) else getattr(func, "id", "")
            if name in MESSAGE_CALLS:
                roots.extend(node.args[:1])
        for root in roots:
            yield from (sub for sub in ast.walk(root) if isinstance(sub, ast.JoinedStr))


def _offences(path: Path) -> list[str]:
    found = []
    for fstring in _message_fstrings(ast.parse(path.read_text(encoding="utf-8"))):
        for part in fstring.values:
            if not isinstance(part, ast.FormattedValue):
                continue
            expression = ast.unparse(part.value)
            value = part.value
            called = value.func.id if isinstance(value, ast.Call) and isinstance(value.func, ast.Name) else ""
            if part.conversion == ord("r"):
                found.append(f"{{{expression}!r}}")
            elif called == "repr":
                found.append(f"{{{expression}}}")
            elif part.format_spec is None and (called in ("list", "tuple", "sorted", "set")
                                               or isinstance(value, (ast.List, ast.Tuple))):
                found.append(f"{{{expression}}}")
    return found


def test_no_message_in_the_package_shows_a_raw_repr():
    offences = {}
    for path in sorted(PACKAGE.rglob("*.py")):
        found = _offences(path)
        if found:
            offences[str(path.relative_to(PACKAGE))] = found
    assert offences == {}, f"use seamline.errors.shown(...) in these messages: {offences}"


def test_the_static_sweep_catches_what_it_looks_for(tmp_path):
    bad = tmp_path / "bad.py"
    bad.write_text("import warnings\n"
                   "def f(x, c):\n"
                   "    if x:\n"
                   "        raise ValueError(f'`x` must be positive; got {x!r}.')\n"
                   "    warnings.warn(f'cutoffs {list(c)} and {repr(x)}')\n"
                   "    raise ValueError(f'fine: got {shown(x)} with {len(c)} items at {x:g}')\n")
    assert _offences(bad) == ["{x!r}", "{list(c)}", "{repr(x)}"]


# ---- the live sweep: the notebook layer ------------------------------------------------------------
def _plain(message: str, expected: str) -> None:
    assert expected in message, message
    assert not WRAPPERS.search(message), message


@pytest.fixture(scope="module")
def scenario():
    return sharp_scenario(n=2000, seed=21)


@pytest.fixture(autouse=True)
def _clear_paper_tables(close_new_boards):
    yield
    seamline.paper_tables.clear()


@pytest.mark.parametrize(("key", "value", "expected"), [
    ("level", np.float64(1.5), "got 1.5"),
    ("level", np.float32(0.0), "got 0.0"),
    ("cutoff", np.float64(np.inf), "got inf"),
    ("cutoff", np.array([1.0, np.nan]), "got [1.0, nan]"),   # a list of cutoffs must hold numbers
    ("degree", np.float64(1.5), "got 1.5"),
    ("bias_degree", np.float64(2.5), "got 2.5"),
    ("bandwidth", np.array([1.0, 2.0, 3.0]), "got [1.0, 2.0, 3.0]"),
    ("bandwidth", np.str_("msee"), "got 'msee'"),
    ("kernel", np.str_("triangle"), "got 'triangle'"),
    ("treated", np.int64(1), "got 1"),
    ("adjust", np.int64(2), "got 2"),
    ("outcome", (np.float64(1.0),), "got (1.0,)"),
    ("score", np.int64(3), "got 3"),
    ("donut", [np.float64(0.5)], "got [0.5]"),
])
def test_declaration_checks_show_numpy_values_plainly(key, value, expected):
    with pytest.raises(SeamlineError) as info:
        coerce_value(key, value, "setting")
    _plain(str(info.value), expected)


def test_a_cell_reading_numpy_variables_points_at_the_line_with_the_plain_value(scenario):
    ns = {"pupils": scenario.data, "lvl": np.float64(1.5), "h": np.array([1.0, 2.0, 3.0]),
          "deg": np.float64(0.5)}
    base = "data: pupils\nscore: reading_score\ncutoff: 40\ntreated: below\noutcome: math_gain\n"
    for line, expected in [("level: lvl", "got 1.5"), ("bandwidth: h", "got [1.0, 2.0, 3.0]"),
                           ("degree: deg", "got 0.5")]:
        with pytest.raises(SeamlineError) as info:
            parse_spec(base + line, ns)
        message = str(info.value)
        assert message.startswith("line 7: "), message   # line 1 is the %%cutoff line
        _plain(message, expected)


def test_board_options_and_waiting_show_numpy_values_plainly(scenario):
    board = seamline.board(scenario.data, score="reading_score", cutoff=40, treated="below",
                           outcome="math_gain", panels=["fit"]).wait()
    cases = [
        (lambda: board.set_option("level", np.float64(1.5)), "got 1.5"),
        (lambda: board.set_option("bandwidth", np.float64(-2.0)), "got -2.0"),
        (lambda: board.set_option("bandwidth", (np.float64(1.0), np.float64(-1.0))), "got (1.0, -1.0)"),
        (lambda: board.set_option("kernel", np.str_("gaussian")), "got 'gaussian'"),
        (lambda: board.set_option("degree", np.float64(1.5)), "got 1.5"),
        (lambda: board.set_option("outcome", np.str_("nothing")), "got 'nothing'"),
        (lambda: board.set_option(np.str_("colour"), 1), "got 'colour'"),
    ]
    for call, expected in cases:
        with pytest.raises((SeamlineError, ValueError, TypeError)) as info:
            call()
        _plain(str(info.value), expected)
    assert board.status == "fresh"                      # every refusal left the board as it was


def test_the_board_view_and_the_paper_control_show_values_plainly(scenario):
    from seamline.notebook.paper_control import PaperControl
    from seamline.notebook.panels import BoardView

    board = seamline.board(scenario.data, score="reading_score", cutoff=40, treated="below",
                           outcome="math_gain", panels=["fit"]).wait()
    view = BoardView(board)
    try:
        view._apply("level", np.float64(1.5))           # what a control change does
        _plain(view._message.value, "got 1.5")
    finally:
        view.close()
    at90 = seamline.board(scenario.data, score="reading_score", cutoff=40, treated="below",
                          outcome="math_gain", panels=["fit"], level=np.float64(0.9)).wait()
    seamline.paper_tables.add(board, "main")
    control = PaperControl(at90)
    assert not control.add()
    _plain(control.message.value, "got (0.9, 0.95)")


# ---- the live sweep: the estimate layer ---------------------------------------------------------
def test_estimate_validators_show_numpy_values_plainly(scenario):
    design = seamline.Design(scenario.data, score="reading_score", cutoff=40, treated="below",
                             outcome="math_gain")
    grants = cumulative_grants_scenario(n=3000, seed=1)
    steps = seamline.Design(grants.data, **grants.design_kwargs())
    cases = [
        (lambda: design.fit(level=np.float64(1.5)), "got 1.5"),
        (lambda: design.fit(bandwidth=np.array([1.0, -1.0])), "got [1.0, -1.0]"),
        (lambda: design.fit(kernel=np.str_("gaussian")), "got 'gaussian'"),
        (lambda: design.placebo_cutoffs(cutoffs=[np.float64(40.0)]), "got 40"),
        (lambda: design.bias_aware(smoothness=np.float64(-1.0)), "got -1.0"),
        (lambda: design.bias_aware(smoothness=1.0, bandwidth=np.float64(-2.0)), "got -2.0"),
        (lambda: design.power(effect=np.float64(np.nan)), "got nan"),
        (lambda: design.sample_size(effect=1.0, power=np.float64(1.5)), "got 1.5"),
        (lambda: design.local_randomization(window=np.float64(-1.0)), "got -1.0"),
        (lambda: design.local_randomization(window=(np.float64(41.0), np.float64(42.0))), "got (41.0, 42.0)"),
        (lambda: design.by_group(np.str_("nowhere")), "got 'nowhere'"),
        (lambda: steps.at(np.float64(12345.0)), "got 12345.0"),
    ]
    for call, expected in cases:
        with pytest.raises((SeamlineError, ValueError, TypeError)) as info:
            call()
        _plain(str(info.value), expected)
