"""The board's inference panels (issue 9): intervals side by side with the bias-aware one, the
weak-instrument-robust set on fuzzy boards, and the Local randomization tab.

Reference: a direct ``seamline.Design`` call on the same data with the same settings (a board only
routes, caches and re-reports what the engine computes; the engine's own checks against scipy and
published methods are in tests/inference/). Data: the package's invented demo scenarios.
"""
from __future__ import annotations

import html
import json
import os
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import ipywidgets  # noqa: F401  (required: a missing one fails the suite)

from seamline.demo_data import fuzzy_scenario, sharp_scenario
from seamline.errors import DesignSpecError
from seamline.estimate.design import Design
from seamline.notebook import static
from seamline.notebook.board import Board
from seamline.notebook.magic import parse_spec
from seamline.notebook.panels import BoardView
from seamline.notebook.spec import NotApplicable
from seamline.results.inference import LocalRandomization

TIGHT = dict(rtol=1e-12, atol=1e-12)
COVARIATES = ["age", "prior_math", "free_lunch"]
SEED = 20260314


@pytest.fixture(scope="module")
def sharp():
    return sharp_scenario(2000, seed=11)


@pytest.fixture(scope="module")
def sharp_board(sharp):
    board = Board("grant", {**sharp.design_kwargs(), "covariates": COVARIATES}, {"seed": SEED},
                  data=sharp.data.copy())
    yield board.wait()
    board.close()


@pytest.fixture(scope="module")
def fuzzy():
    return fuzzy_scenario(2000, seed=3)


@pytest.fixture(scope="module")
def fuzzy_board(fuzzy):
    board = Board("benefit", fuzzy.design_kwargs(), {"window": 0.1, "seed": SEED}, data=fuzzy.data.copy())
    yield board.wait()
    board.close()


def _text(fragment: str) -> str:
    return html.unescape(re.sub(r"<[^>]+>", " ", fragment))


# ---- numbers equal the engine's ------------------------------------------------------------------------
def test_bias_aware_and_randomization_equal_the_direct_design_calls(sharp, sharp_board):
    design = Design(sharp.data, **{**sharp.design_kwargs(), "covariates": COVARIATES})
    outcome = sharp.design_kwargs()["outcome"][0]
    want = design.bias_aware(outcome)
    got = sharp_board.results["bias_aware"]
    np.testing.assert_allclose(got.conf_int, want.conf_int, **TIGHT)
    np.testing.assert_allclose([got.estimate, got.max_bias, got.smoothness], [want.estimate, want.max_bias,
                                                                             want.smoothness], **TIGHT)
    pd.testing.assert_frame_equal(got.sensitivity, want.sensitivity)
    lr_want = design.local_randomization(outcome, seed=SEED)
    lr = sharp_board.results["local_randomization"]
    assert (lr.window, lr.p_value, lr.conf_int, lr.n_below, lr.n_above) == (
        lr_want.window, lr_want.p_value, lr_want.conf_int, lr_want.n_below, lr_want.n_above)
    pd.testing.assert_frame_equal(lr.windows, lr_want.windows)
    assert isinstance(sharp_board.results["weak_iv"], NotApplicable)


def test_estimate_panel_shows_three_intervals_side_by_side_with_m(sharp_board):
    text = _text(static.panel_html(sharp_board, "estimate", charts=False))
    fit, aware = sharp_board.results["fit"], sharp_board.results["bias_aware"]
    for label in ("conventional", "robust bias-corrected", "bias-aware"):
        assert label in text
    for low, high in (fit.conf_int, fit.robust_conf_int, aware.conf_int):
        assert f"[{low:.3f}, {high:.3f}]" in text
    assert f"M = {aware.smoothness:.4g}" in text and "smoothness:" in text
    assert "Its bandwidth is its own" in text          # what it ignores is said, never silent
    assert "Weak-instrument-robust set" not in text     # sharp board: nothing of the kind


def test_fuzzy_board_shows_the_weak_iv_set_beside_the_wald_interval(fuzzy, fuzzy_board):
    fit = fuzzy_board.results["fit"]
    want = fit.weak_iv_conf_set(fit.level)
    got = fuzzy_board.results["weak_iv"]
    assert got.intervals == want.intervals and got.wald_conf_int == want.wald_conf_int
    text = _text(static.panel_html(fuzzy_board, "estimate", charts=False))
    assert "Weak-instrument-robust set" in text and "Wald" in text
    assert got.explanation in text and got.shape == "interval" and "one bounded interval" in text


def test_weak_iv_set_is_recomputed_at_a_new_level(fuzzy, fuzzy_board):
    fuzzy_board.set_option("level", 0.9)
    try:
        got = fuzzy_board.results["weak_iv"]
        want = fuzzy_board.results["fit"].weak_iv_conf_set(0.9)
        assert got.level == 0.9 and got.intervals == want.intervals
        aware = Design(fuzzy.data, **fuzzy.design_kwargs()).bias_aware(level=0.9)
        np.testing.assert_allclose(fuzzy_board.results["bias_aware"].conf_int, aware.conf_int, **TIGHT)
    finally:
        fuzzy_board.set_option("level", 0.95)


def test_local_randomization_tab(sharp_board):
    text = _text(static.panel_html(sharp_board, "local_randomization", charts=False))
    lr = sharp_board.results["local_randomization"]
    lo, hi = lr.window
    assert f"[{lo:.2f}, {hi:.2f}]" in text            # half-width 1.96: two decimals, not [38, 42]
    assert "Windows" in text and "Sensitivity over windows" in text and f"seed {SEED}" in text
    assert "Smallest balance p-value" in text and "Half-width" in text
    assert ("Local randomization", "local_randomization") in [(t, k) for k, t in static.PANELS]


def test_a_window_too_small_is_shown_in_the_panel_and_the_board_goes_on(sharp):
    board = Board("small", {**sharp.design_kwargs(), "covariates": COVARIATES}, {"window": 0.01},
                  data=sharp.data.copy())
    try:
        board.wait()
        assert board.results["local_randomization"] is None
        message = board.errors["local_randomization"]
        assert "`window` must hold at least 5 units on each side" in message
        text = _text(static.panel_html(board, "local_randomization", charts=False))
        assert "could not be computed" in text and "at least 5 units" in text
        assert board.results["fit"] is not None                 # the rest of the board works
        board.set_option("window", 2.0)
        assert board.results["local_randomization"].window == (38.0, 42.0)
        assert "local_randomization" not in board.errors
    finally:
        board.close()


def test_without_window_or_covariates_the_tab_says_what_to_declare(sharp):
    board = Board("bare", sharp.design_kwargs() | {"covariates": None}, {}, data=sharp.data.copy())
    try:
        value = board.wait().results["local_randomization"]
        assert isinstance(value, NotApplicable) and "window: 2.5" in value.reason
    finally:
        board.close()


def test_a_donut_and_adjustment_are_named_where_the_interval_ignores_them(sharp):
    board = Board("caveats", {**sharp.design_kwargs(), "covariates": COVARIATES},
                  {"donut": 0.3, "adjust": True, "window": 2.0, "seed": 1}, data=sharp.data.copy())
    try:
        board.wait()
        aware = " ".join(board.results["bias_aware"].warnings)
        assert "donut (radius 0.3) is not applied" in aware and "does not adjust for the covariates" in aware
        lr = " ".join(board.results["local_randomization"].warnings)
        assert "donut (radius 0.3) is not applied" in lr
        board.set_option("donut", 0.0)          # the caveat goes with the setting
        assert "donut" not in " ".join(board.results["bias_aware"].warnings)
    finally:
        board.close()


# ---- keys and controls ---------------------------------------------------------------------------------
CELL = """data: pupils
score: reading_score
cutoff: 40
outcome: math_gain
treated: below
covariates: age, prior_math
{extra}"""


@pytest.mark.parametrize(("line", "key", "value"), [
    ("smoothness: 0.5", "smoothness", 0.5), ("smoothness: rule of thumb", "smoothness", None),
    ("window: 2.5", "window", 2.5), ("window: 37.5, 42.5", "window", (37.5, 42.5)),
    ("window: by balance", "window", None), ("statistic: rank sum", "statistic", "rank sum"),
    ("statistic: kolmogorov smirnov", "statistic", "Kolmogorov-Smirnov"),
    ("permutations: 2,000", "permutations", 2000), ("seed: 11", "seed", 11), ("seed: none", "seed", None),
])
def test_cell_keys(sharp, line, key, value):
    parsed = parse_spec(CELL.format(extra=line), {"pupils": sharp.data}, name="grant")
    assert parsed.fit_options[key] == value


@pytest.mark.parametrize(("line", "message"), [
    ("smoothness: 0", "`smoothness` must be a positive number"),
    ("window: -2", "`window` must be `by balance`, a positive half-width"),
    ("window: 42, 38", "low below high"),
    ("statistic: median", "`statistic` must be one of difference in means, Kolmogorov-Smirnov, rank sum"),
    ("permutations: 10", "`permutations` must be a whole number of at least 99"),
    ("seed: 1.5", "`seed` must be a whole number"),
])
def test_bad_cell_keys_name_the_line(sharp, line, message):
    with pytest.raises(DesignSpecError, match=re.escape(message)) as info:
        parse_spec(CELL.format(extra=line), {"pupils": sharp.data}, name="grant")
    assert "line 8" in str(info.value)


def test_smoothness_control_sets_m_and_shows_it(sharp):
    board = Board("control", sharp.design_kwargs(), {"window": 2.0, "seed": 1}, data=sharp.data.copy())
    view = BoardView(board)
    try:
        control = view._smoothness
        assert control.value == "rule of thumb"
        control.value = "0.5"
        aware = board.results["bias_aware"]
        assert board.options["smoothness"] == 0.5 and aware.smoothness == 0.5
        assert aware.smoothness_rule == "given"
        control.value = "-1"                       # rejected beside the controls; the board keeps 0.5
        assert board.options["smoothness"] == 0.5 and "smoothness" in view._message.value
        assert control.value == "0.5"
    finally:
        view.close()
        board.close()


# ---- exports, methods paragraph, script ---------------------------------------------------------------
EXPORTS = ("intervals", "bias_aware", "bias_aware_sensitivity", "local_randomization", "windows",
           "randomization_sensitivity")
MACHINE = re.compile(r"\b(ci_low|ci_high|std_error|max_bias|half_width|balance_p_value|n_below|n_above|"
                     r"least_balanced|smoothness_multiple|critical_value|neyman_ci_low)\b")


@pytest.mark.parametrize("what", EXPORTS)
def test_exports_use_reader_labels_with_the_level(sharp_board, what):
    markdown = sharp_board.export(what, "markdown")
    header = next(line for line in markdown.splitlines() if line.startswith("| "))
    assert not MACHINE.search(header), header
    if what != "windows":
        assert "95% CI" in header
    csv = sharp_board.export(what, "csv")
    assert not MACHINE.search(csv.splitlines()[0])
    for fmt in ("latex", "html", "text"):
        assert sharp_board.export(what, fmt)


def test_weak_iv_export_and_a_sharp_board_refuses_it(fuzzy_board, sharp_board):
    assert "Wald" in fuzzy_board.export("weak_iv", "markdown")
    with pytest.raises(ValueError, match="no first stage to be weak"):
        sharp_board.export("weak_iv", "markdown")


def test_methods_paragraph_cites_and_prints_the_window(sharp_board, fuzzy_board):
    text = sharp_board.methods_paragraph()
    lr = sharp_board.results["local_randomization"]
    assert "Armstrong and Kolesár 2018, 2020" in text
    assert "Cattaneo, Frandsen and Titiunik 2015" in text
    assert f"[{lr.window[0]:.2f}, {lr.window[1]:.2f}]" in text and f"seed {SEED}" in text
    assert "seed None" not in text
    fuzzy_text = fuzzy_board.methods_paragraph()
    assert "Feir, Lemieux and Marmer (2016)" in fuzzy_text and "one bounded interval" in fuzzy_text
    assert "the effect of assignment to treatment, not of take-up" in fuzzy_text
    assert "not of take-up" not in text


def test_a_drawn_seed_is_recorded_in_methods_and_script(sharp):
    board = Board("drawn", sharp.design_kwargs(), {"window": 2.0}, data=sharp.data.copy())
    try:
        seed = board.wait().results["local_randomization"].seed
        assert isinstance(seed, int)
        assert "seed None" not in board.methods_paragraph()
        assert f"'seed': {seed}," in board.export("script")
    finally:
        board.close()


def test_a_drawn_seed_stays_for_the_design_so_a_level_change_keeps_the_draws(sharp, monkeypatch):
    # `seed: none` draws one seed per Design: a level change keeps it, so the Monte Carlo draws, the
    # balance of the nested windows and each window's test are reused, and only the inversion moves
    from seamline.estimate import local_randomization as lr_module
    nested = []
    real = lr_module._nested_balance
    monkeypatch.setattr(lr_module, "_nested_balance", lambda *a, **k: nested.append(1) or real(*a, **k))
    board = Board("kept seed", {**sharp.design_kwargs(), "covariates": COVARIATES}, {}, data=sharp.data.copy())
    try:
        first = board.wait().results["local_randomization"]
        assert isinstance(first, LocalRandomization) and not first.exact and len(nested) == 1
        board.set_option("level", 0.9)
        again = board.wait().results["local_randomization"]
        assert again.seed == first.seed and again.level == 0.9 and len(nested) == 1
        assert (again.p_value, again.window) == (first.p_value, first.window)
        assert again.conf_int[1] - again.conf_int[0] < first.conf_int[1] - first.conf_int[0]
        board.set_option("level", 0.95)
        assert board.wait().results["local_randomization"].conf_int == first.conf_int
        # a new design (another cutoff) draws a new seed
        board.set_option("cutoff", 41.0)
        assert board.wait().results["local_randomization"].seed != first.seed
    finally:
        board.close()


def test_replication_script_rebuilds_the_inference_numbers(tmp_path, fuzzy, fuzzy_board):
    data_path = tmp_path / "benefit.csv"
    fuzzy.data.to_csv(data_path, index=False)
    script = tmp_path / "replicate.py"
    fuzzy_board.export("script", path=script, data_path=data_path)
    out = tmp_path / "numbers.json"
    package = str(Path(__file__).resolve().parents[2] / "kernel_side")
    env = {**os.environ, "PYTHONPATH": package}
    subprocess.run([sys.executable, str(script), "--json", str(out)], check=True, env=env, capture_output=True,
                   timeout=300)
    numbers = json.loads(out.read_text())
    design = Design(pd.read_csv(data_path), **fuzzy.design_kwargs())
    aware = design.bias_aware()
    assert numbers["bias_aware"]["table"][0]["ci_low"] == aware.conf_int[0]
    assert numbers["bias_aware"]["table"][0]["ci_high"] == aware.conf_int[1]
    weak = design.fit().weak_iv_conf_set(0.95)
    assert numbers["weak_iv"]["table"][0]["ci_low"] == weak.intervals[0][0]
    lr = design.local_randomization(window=0.1, seed=SEED)
    assert numbers["local_randomization"]["p_value"] == lr.p_value
    assert numbers["local_randomization"]["table"][0]["ci_low"] == lr.conf_int[0]


# ---- where the nodes run, and the "not yet current" state ---------------------------------------------
def test_weak_iv_set_runs_only_on_fuzzy_boards_and_only_when_its_inputs_change(sharp, fuzzy, monkeypatch):
    from seamline.results.fit import Fit
    calls = []
    real = Fit.weak_iv_conf_set
    monkeypatch.setattr(Fit, "weak_iv_conf_set", lambda self, level=None: calls.append(level) or real(self, level))
    sharp_only = Board("sharp-only", sharp.design_kwargs(), {"window": 2.0, "seed": 1}, data=sharp.data.copy())
    fuzzy_only = None
    try:
        sharp_only.wait()
        assert calls == []                           # sharp: NotApplicable without an engine call
        fuzzy_only = Board("fuzzy-only", fuzzy.design_kwargs(), {"window": 0.1, "seed": 1},
                           data=fuzzy.data.copy()).wait()
        assert calls == [0.95]
        fuzzy_only.set_option("donut", 0.0)          # unchanged value: nothing runs
        fuzzy_only.set_option("smoothness", 3.0)     # the bias-aware bound is not an input of the set
        fuzzy_only.wait()
        assert calls == [0.95]
        fuzzy_only.set_option("level", 0.9)
        fuzzy_only.wait()
        assert calls == [0.95, 0.9]
    finally:
        sharp_only.close()
        if fuzzy_only is not None:
            fuzzy_only.close()


def test_randomization_tab_says_when_it_is_not_yet_current(sharp, monkeypatch):
    import threading
    release, entered = threading.Event(), threading.Event()
    real = Design.local_randomization

    def held(self, *args, **kwargs):
        if kwargs.get("window") == 2.5:
            entered.set()
            release.wait(20)
        return real(self, *args, **kwargs)

    monkeypatch.setattr(Design, "local_randomization", held)
    board = Board("pending", sharp.design_kwargs(), {"window": 2.0, "seed": 1}, data=sharp.data.copy())
    try:
        board.wait()
        board.set_option("window", 2.5)
        threading.Thread(target=lambda: board.wait("local_randomization"), daemon=True).start()
        assert entered.wait(10)
        state = board.state()
        assert "local_randomization" in state.pending and "fit" not in state.pending
        page = static.panel_html(state, "local_randomization", charts=False)
        assert "Updating the local randomization panel" in _text(page) and "opacity:0.45" in page
        assert "[38.00, 42.00]" in _text(page)      # the previous numbers, dimmed
        release.set()
        assert board.wait().results["local_randomization"].window == (37.5, 42.5)
    finally:
        release.set()
        board.close()


def test_randomization_tab_controls_set_the_window_and_statistic(sharp):
    board = Board("tab-controls", {**sharp.design_kwargs(), "covariates": COVARIATES}, {"seed": 1},
                  data=sharp.data.copy())
    view = BoardView(board)
    try:
        tab = view._tabs.children[[k for k, _ in static.PANELS].index("local_randomization")]
        assert view._lr_controls in tab.children and view._window.value == "by balance"
        view._window.value = "37.5, 42.5"
        view._statistic.value = "rank sum"
        lr = board.results["local_randomization"]
        want = Design(sharp.data, **{**sharp.design_kwargs(), "covariates": COVARIATES}).local_randomization(
            window=(37.5, 42.5), statistic="rank sum", seed=1)
        assert (lr.window, lr.statistic, lr.p_value) == (want.window, "rank sum", want.p_value)
        view._window.value = "a few"                 # rejected beside the controls, the board unchanged
        assert board.options["window"] == (37.5, 42.5) and "window" in view._message.value
        assert view._window.value == "37.5, 42.5"
    finally:
        view.close()
        board.close()


def test_no_balanced_window_is_a_note_of_the_tab_not_a_board_error():
    """On data where even the smallest window is imbalanced (invented: a covariate that jumps at the
    cutoff), a board that was given no window shows the rule's finding as the tab's note."""
    from seamline.notebook.board import board
    from seamline.notebook.spec import NotApplicable
    rng = np.random.default_rng(3)
    x = rng.uniform(-1, 1, 3000)
    data = pd.DataFrame({"x": x, "y": x + (x >= 0) + rng.normal(0, 1, 3000),
                         "z": 3.0 * (x >= 0) + rng.normal(0, 0.1, 3000)})
    b = board(data, score="x", cutoff=0.0, outcome="y", covariates=["z"], permutations=199,
                       seed=1).wait()
    result = b.results["local_randomization"]
    assert isinstance(result, NotApplicable) and "balance" in str(result)
    b.set_option("window", 0.2)
    b.wait()
    assert b.results["local_randomization"].window == pytest.approx((-0.2, 0.2))
    b.close()
