"""The ``%%cutoff`` parser and magic: values, the never-evaluate rule, pointed errors, display.

The parser is tested on its own with a plain namespace dict; the magic runs in IPython's test
shell (``IPython.testing.globalipapp``), the same machinery a notebook kernel uses. Reference for
the board a cell builds: the direct ``seamline.Design(...).fit()`` on the same data.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from IPython.utils.capture import capture_output

import seamline
from seamline.demo_data import sharp_scenario
from seamline.errors import DesignSpecError
from seamline.notebook.board import Board, boards
from seamline.notebook.magic import parse_name, parse_spec

WIDGET = "application/vnd.jupyter.widget-view+json"


@pytest.fixture(scope="module")
def scenario():
    return sharp_scenario(n=2000, seed=21)


@pytest.fixture
def ns(scenario):
    return {"pupils": scenario.data, "c0": 40.0, "rule": "coverage", "h_pair": (3.0, 4.0),
            "outs": ["math_gain", "attendance"], "text": "forty"}


BASE = """data: pupils
score: reading_score
cutoff: 40
outcome: math_gain
"""


# ---- the parser ------------------------------------------------------------------------------------
def test_full_declaration_with_comments_lists_and_literals(ns):
    body = """
# an invented tutoring scheme
data: pupils            # the frame
score: reading_score
cutoff: c0              # a notebook variable
treated: Below
outcome: math_gain, attendance
covariates: age, prior_math, free_lunch
cluster: school
weights: sample_weight
bandwidth: 3.5, 4
kernel: epanechnikov
degree: 2
variance: HC1
level: 90%
donut: 0.25
bias-degree: 3
"""
    spec = parse_spec(body, ns, name="tutoring")
    assert spec.data is ns["pupils"] and spec.data_name == "pupils"
    assert spec.design_kwargs == {"score": "reading_score", "cutoff": 40.0, "treated": "below",
                                  "outcome": ("math_gain", "attendance"),
                                  "covariates": ("age", "prior_math", "free_lunch"), "cluster": "school",
                                  "weights": "sample_weight"}
    assert spec.fit_options == {"bandwidth": (3.5, 4.0), "kernel": "epanechnikov", "degree": 2,
                                "variance": "hc1", "level": 0.9, "donut": 0.25, "bias_degree": 3}
    assert spec.spec_variables == {"cutoff": "c0"}
    assert spec.lines["cutoff"] == 6 and spec.lines["bias_degree"] == 18    # %%cutoff is line 1


@pytest.mark.parametrize(("line", "key", "value", "variable"), [
    ("bandwidth: rule", "bandwidth", "coverage", "rule"),
    ("bandwidth: h_pair", "bandwidth", (3.0, 4.0), "h_pair"),
    ("bandwidth: 2.5", "bandwidth", 2.5, None),
    ("bandwidth: mse-split", "bandwidth", "mse-split", None),
    ("adjust: yes", "adjust", True, None),
    ("pilot_bandwidth: auto", "pilot_bandwidth", None, None),
    ("pilot_bandwidth: Two-Step", "pilot_bandwidth", "two-step", None),
    ("pilot_bandwidth: 4, 5", "pilot_bandwidth", (4.0, 5.0), None),
    ("level: 0.99", "level", 0.99, None),
])
def test_option_values(ns, line, key, value, variable):
    spec = parse_spec(BASE + "covariates: age\n" + line, ns)
    assert spec.fit_options[key] == value
    assert spec.spec_variables.get(key) == variable


def test_column_list_from_a_variable_and_quoted_names(ns):
    frame = ns["pupils"].rename(columns={"age": "age, years"})
    spec = parse_spec("data: df\nscore: reading_score\ncutoff: 40\noutcome: outs\ncovariates: 'age, years'",
                      {**ns, "df": frame})
    assert spec.design_kwargs["outcome"] == ("math_gain", "attendance")
    assert spec.spec_variables == {"outcome": "outs"}
    assert spec.design_kwargs["covariates"] == ("age, years",)


def test_a_column_name_wins_over_a_variable_of_the_same_name(ns):
    spec = parse_spec(BASE.replace("outcome: math_gain", "outcome: attendance"), {**ns, "attendance": "math_gain"})
    assert spec.design_kwargs["outcome"] == ("attendance",) and spec.spec_variables == {}


@pytest.mark.parametrize(("body", "pattern"), [
    (BASE + "kernel: triangle", r"^line 6: `kernel` must be one of .*got 'triangle'. Did you mean `kernel: triangular`\?"),
    (BASE + "degre: 2", r"^line 6: `degre` must be a known key; got an unknown key. Did you mean `degree`\?"),
    (BASE + "outcomes: y", r"^line 6: .*Did you mean `outcome`\?"),
    (BASE + "cutoff: 41", r"^line 6: `cutoff` must be given once; got it again \(first on line 4\)"),
    (BASE + "kernel:", r"^line 6: `kernel` must have a value"),
    (BASE + "just words", r"^line 6: a setting must be written `key: value`"),
    (BASE.replace("cutoff: 40", "cutoff: c0 + 1"), r"^line 4: `cutoff` must be a number, a column name, increasing "
                                                   r"numbers or the name of a notebook variable; got 'c0 \+ 1'. "
                                                   r"Expressions are not evaluated"),
    (BASE.replace("cutoff: 40", "cutoff: c9"), r"^line 4: .*got 'c9', which is neither. Did you mean 'c0'\?"),
    (BASE.replace("cutoff: 40", "cutoff: text"), r"^line 4: `cutoff` \(from the notebook variable `text`\) must "
                                                 r"be a number; got 'forty'"),
    (BASE.replace("score: reading_score", "score: readng_score"),
     r"^line 3: `score` must name a column of the data; got 'readng_score'.*Did you mean 'reading_score'\?"),
    (BASE + "covariates: age,, prior_math", r"^line 6: `covariates` must list names separated by single commas"),
    (BASE + "level: 1.5", r"^line 6: `level` must be between 0 and 1"),
    (BASE + "bandwidth: msee", r"^line 6: `bandwidth` must be one of .* Did you mean `bandwidth: mse`\?"),
    (BASE + "bandwidth: 1, 2, 3", r"^line 6: `bandwidth` must be one of mse, mse-split, coverage, ik, a number or "
                                  r"two numbers"),
    (BASE.replace("data: pupils", "data: pupils[pupils.age > 10]"), r"^line 2: `data` must be the name of a "
                                                                   r"DataFrame variable"),
    (BASE.replace("data: pupils", "data: c0"), r"^line 2: `data` must be a DataFrame"),
    ("data: pupils\nscore: reading_score", r"must declare data, score, cutoff, outcome; got no `cutoff`, `outcome`"),
])
def test_pointed_errors(ns, body, pattern):
    with pytest.raises(DesignSpecError, match=pattern):
        parse_spec(body, ns)


def test_a_score_unit_for_a_date_score(ns):
    visits = pd.DataFrame({"visit": pd.Timestamp("2024-07-01") + pd.to_timedelta(np.arange(-60, 60), unit="D"),
                           "y": np.arange(120.0)})
    body = "data: visits\nscore: visit\ncutoff: 2024-07-01\noutcome: y\nScore unit: Weeks\n"
    spec = parse_spec(body, {**ns, "visits": visits})
    assert spec.design_kwargs["score_unit"] == "weeks" and spec.lines["score_unit"] == 6
    assert parse_spec(body.replace("Weeks", "unit"), {**ns, "visits": visits, "unit": "months"}
                      ).design_kwargs["score_unit"] == "months"
    with pytest.raises(DesignSpecError, match=r"^line 6: `score_unit` must be one of days, hours, weeks, months, "
                                              r"years; got 'fortnights'"):
        parse_spec(body.replace("Weeks", "fortnights"), {**ns, "visits": visits})


def test_a_score_unit_on_a_numeric_score_points_at_its_line(ns):
    from seamline.notebook.magic import build_board
    spec = parse_spec(BASE + "score_unit: days\n", ns)
    with pytest.raises(DesignSpecError, match=r"^line 6: `score_unit` applies to date or time scores only; got "
                                              r"'days' for the numeric score 'reading_score'. Remove it, or "
                                              r"declare a date or datetime column as the score."):
        build_board(spec, ns)


def test_nothing_is_ever_evaluated(ns, tmp_path):
    marker = tmp_path / "ran"
    attempts = [f"cutoff: open({str(marker)!r}, 'w')", "cutoff: __import__('os').getcwd()",
                "cutoff: (lambda: 40)()", "cutoff: c0.__class__.__mro__"]
    for attempt in attempts:
        with pytest.raises(DesignSpecError, match="line 4: `cutoff`"):
            parse_spec(BASE.replace("cutoff: 40", attempt), ns)
    assert not marker.exists()


def test_board_names():
    assert parse_name(" tutoring ") == "tutoring"
    with pytest.raises(DesignSpecError, match="line 1: `%%cutoff` must be followed by a board name"):
        parse_name("")
    with pytest.raises(DesignSpecError, match="line 1: the board name must be a Python identifier; got '2x'"):
        parse_name("2x")
    with pytest.raises(DesignSpecError, match="line 1: `%%cutoff` takes one board name"):
        parse_name("a b")
    with pytest.raises(DesignSpecError, match="line 1: the board name must differ from the data variable"):
        parse_spec(BASE, {"pupils": pd.DataFrame({"x": [1.0]})}, name="pupils")


# ---- the magic in an IPython shell ----------------------------------------------------------------
@pytest.fixture
def shell(ip, scenario):
    before = set(ip.user_ns)
    live = {id(b) for b in boards()}
    ip.user_ns.update(pupils=scenario.data.copy(), c0=40.0)
    yield ip
    for b in boards():
        if id(b) not in live:
            b.close()
    for name in set(ip.user_ns) - before:
        del ip.user_ns[name]


def run(ip, code):
    with capture_output() as cap:
        result = ip.run_cell(code, store_history=False)
    return result, cap


CELL = """%%cutoff tut
data: pupils
score: reading_score
cutoff: c0
treated: below
outcome: math_gain
"""


def test_cell_binds_the_board_and_displays_widget_and_static_html(shell, scenario):
    result, cap = run(shell, CELL)
    assert result.success, result.error_in_exec
    board = shell.user_ns["tut"]
    assert isinstance(board, Board) and board.name == "tut" and board.status == "fresh"
    ref = seamline.Design(scenario.data, score="reading_score", cutoff=40, treated="below", outcome="math_gain")
    np.testing.assert_allclose(board.fit.estimate, ref.fit().estimate, rtol=1e-12)
    bundles = [o.data for o in cap.outputs]
    assert len(bundles) == 1, "one display call"
    assert WIDGET in bundles[0] and "<" in bundles[0]["text/html"]
    assert bundles[0][WIDGET]["model_id"] == board.view.model_id


def test_rerunning_the_cell_replaces_the_board(shell):
    run(shell, CELL)
    old = shell.user_ns["tut"]
    result, _ = run(shell, CELL.replace("cutoff: c0", "cutoff: 41"))
    new = shell.user_ns["tut"]
    assert result.success and new is not old
    assert old.closed and old not in boards() and new in boards()
    assert new.spec["cutoff"] == 41.0


def test_a_parse_error_keeps_the_earlier_board_and_its_view(shell):
    run(shell, CELL)
    old = shell.user_ns["tut"]
    result, cap = run(shell, CELL + "kernel: gaussian\n")
    assert isinstance(result.error_in_exec, DesignSpecError)
    assert str(result.error_in_exec).startswith("line 7: `kernel` must be one of")
    assert shell.user_ns["tut"] is old and not old.closed and old in boards()
    shown = [o.data for o in cap.outputs]
    assert shown and shown[0][WIDGET]["model_id"] == old.view.model_id   # the panels stay on screen
    assert run(shell, "1 + 1")[0].success                                  # the kernel is fine


def test_a_validation_error_points_at_the_line_of_the_setting(shell):
    result, _ = run(shell, CELL.replace("cutoff: c0", "cutoff: 1000"))
    assert isinstance(result.error_in_exec, DesignSpecError)
    assert str(result.error_in_exec).startswith("line 4: `cutoff` must lie within the range of score")
    result, _ = run(shell, CELL + "degree: 2\nderivative: 3\n")
    assert str(result.error_in_exec).startswith("line 8: `derivative` must be an integer from 0 to 1")
    assert "tut" not in shell.user_ns


def test_load_ext_is_light_and_registers_the_magic(tmp_path):
    import subprocess
    import sys
    code = ("import sys, time\n"
            "from IPython.core.interactiveshell import InteractiveShell\n"
            "ip = InteractiveShell.instance()\n"
            "ip.run_line_magic('load_ext', 'seamline')\n"
            "assert 'cutoff' in ip.magics_manager.magics['cell']\n"
            "print(sorted(m for m in ('ipywidgets', 'altair', 'vl_convert') if m in sys.modules))\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip().splitlines()[-1] == "[]"
    plain = subprocess.run([sys.executable, "-c", "import sys, seamline; seamline.board; print(sorted(m for m in "
                            "('IPython', 'ipywidgets', 'altair', 'vl_convert') if m in sys.modules))"],
                           capture_output=True, text=True, timeout=120)
    assert plain.returncode == 0, plain.stderr
    assert plain.stdout.strip() == "[]"
