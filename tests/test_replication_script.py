"""The replication script, run in a fresh interpreter, reproduces the numbers exactly.

Each case writes invented, seeded demo data to a file (CSV or Parquet), generates the script with
``seamline.export.script.replication_script`` and runs it with ``python -I`` (isolated: no
PYTHONPATH, no user site; the package location is put on ``sys.path`` explicitly). Its JSON is
compared with direct ``seamline.Design`` calls run here on the in-memory data -- exact equality,
no tolerance: the script must rebuild the same floats.
"""
from __future__ import annotations

import json
import math
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import seamline
from seamline.demo_data import fuzzy_scenario, sharp_scenario
from seamline.errors import InvalidOptionError
from seamline.export.script import PANEL_CALLS, board_script, replication_script

PACKAGE_PARENT = str(Path(seamline.__file__).resolve().parents[1])
ALL_PANELS = ("fit", *PANEL_CALLS)

_RUNNER = ("import runpy, sys; sys.path.insert(0, sys.argv[1]); script = sys.argv[2]; "
           "sys.argv = [script, *sys.argv[3:]]; runpy.run_path(script, run_name='__main__')")


def run_script(path: Path, *args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-I", "-c", _RUNNER, PACKAGE_PARENT, str(path), *args],
                          capture_output=True, text=True, timeout=300, cwd=path.parent)


def plain(value):
    """What JSON holds for a value: NaN as null, tuples as lists."""
    if isinstance(value, (np.floating, np.integer)):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, (tuple, list)):
        return [plain(v) for v in value]
    return value


def records(frame: pd.DataFrame) -> list[dict]:
    return [{k: plain(v) for k, v in row.items()} for row in frame.to_dict("records")]


def sharp_data():
    s = sharp_scenario(n=2500, seed=11)
    return s.data, {"score": s.score, "cutoff": s.cutoff, "outcome": ("math_gain", "attendance"),
                    "treated": s.treated, "covariates": ("age", "prior_math")}


CASES = {
    # name: (data and design, fit options, panels, file suffix)
    # a fixed seed: the randomization p-values are then the direct call's, draw for draw
    "sharp": (sharp_data, {"outcome": "math_gain", "seed": 7}, ALL_PANELS, ".csv"),
    "clustered": (lambda: (sharp_data()[0], {**sharp_data()[1], "cluster": "school"}),
                  {"outcome": "attendance", "kernel": "epanechnikov", "variance": "hc1"},
                  ("fit", "sensitivity", "placebo", "bandwidths"), ".parquet"),
    "covariate-adjusted": (sharp_data, {"outcome": "math_gain", "adjust": True, "bandwidth": "coverage",
                                        "level": 0.9},
                           ("fit", "balance", "donut", "density"), ".csv"),
    "fuzzy": (lambda: (lambda f: (f.data, {"score": f.score, "cutoff": f.cutoff, "outcome": ("food_security",),
                                           "treated": f.treated, "takeup": f.takeup,
                                           "covariates": tuple(f.covariates)}))(fuzzy_scenario(n=3000, seed=11)),
              {"outcome": "food_security", "bandwidth": "mse-split", "pilot_bandwidth": "two-step"},
              ("fit", "first_stage", "first_stage_bins", "bins", "checks", "score_profile"), ".parquet"),
}


def direct(design, options: dict, panel: str):
    """The panel computed by direct Design calls (the board's recipe, written out here)."""
    inference = {k: options[k] for k in INFERENCE if k in options}
    opts = {k: v for k, v in options.items() if k != "outcome" and k not in INFERENCE}
    outcome = options["outcome"]
    fit = design.fit(outcome, **opts)
    level = opts.get("level", 0.95)
    calls = {
        "fit": lambda: fit,
        "first_stage": lambda: fit.first_stage,
        "first_stage_bins": lambda: design.bins(design.takeup, **{**opts, "bandwidth": fit.bandwidth,
                                                                  "pilot_bandwidth": fit.pilot_bandwidth}),
        "bins": lambda: design.bins(outcome=outcome, **opts),
        "bandwidths": lambda: design.bandwidths(outcome, **{k: opts.get(k, d) for k, d in (
            ("kernel", "triangular"), ("degree", 1), ("variance", "neighbors"))}),
        "density": lambda: design.density_test(level=opts.get("level", 0.95)),
        "balance": lambda: design.balance(rule=opts.get("bandwidth", "mse"),
                                          **{k: v for k, v in opts.items() if k not in ("bandwidth", "adjust")}),
        "sensitivity": lambda: design.sensitivity(outcome=outcome, **opts),
        "placebo": lambda: design.placebo_cutoffs(outcome=outcome, **opts),
        "donut": lambda: design.donut(outcome=outcome, **opts),
        "score_profile": lambda: design.score_profile(outcome=outcome, **opts),
        "checks": lambda: design.checks(outcome=outcome, **opts),
        "power": lambda: design.power_curve(outcome=outcome, **opts),
        "bias_aware": lambda: design.bias_aware(outcome, smoothness=inference.get("smoothness"),
                                                kernel=opts.get("kernel", "triangular"), degree=opts.get("degree", 1),
                                                level=level),
        "weak_iv": lambda: fit.weak_iv_conf_set(level),
        "local_randomization": lambda: design.local_randomization(
            outcome, **{k: v for k, v in inference.items() if k != "smoothness"}, level=level),
    }
    return calls[panel]()


INFERENCE = ("smoothness", "window", "statistic", "permutations", "seed")


def check_fit(record: dict, fit) -> None:
    assert record["estimate"] == fit.estimate
    assert record["std_error"] == fit.std_error
    assert record["bias_corrected_estimate"] == fit.bias_corrected_estimate
    assert record["robust_std_error"] == fit.robust_std_error
    assert record["robust_conf_int"] == list(fit.robust_conf_int)
    assert record["robust_p_value"] == plain(fit.robust_p_value)
    assert record["bandwidth"] == list(fit.bandwidth)
    assert record["pilot_bandwidth"] == list(fit.pilot_bandwidth)
    assert record["n_used"] == list(fit.n_used)
    assert record["n_clusters"] == fit.n_clusters
    assert record["level"] == fit.level and record["kind"] == fit.kind


@pytest.mark.parametrize("case", list(CASES))
def test_script_reproduces_direct_design_calls(case, tmp_path):
    make, options, panels, suffix = CASES[case]
    data, spec = make()
    data_path = tmp_path / f"invented{suffix}"
    if suffix == ".csv":
        data.to_csv(data_path, index=False)
    else:
        data.to_parquet(data_path, index=False)
    script = tmp_path / "replicate.py"
    script.write_text(replication_script(spec, options, panels, data_path=data_path, name=case), encoding="utf-8")

    out = tmp_path / "numbers.json"
    result = run_script(script, "--json", str(out))
    assert result.returncode == 0, result.stderr
    numbers = json.loads(out.read_text(encoding="utf-8"))
    assert numbers["seamline_version"] == numbers["written_by_version"] == seamline.__version__
    assert set(numbers) == {"board", "seamline_version", "written_by_version", "data", *panels}

    design = seamline.Design(data, **spec)
    opts = {k: v for k, v in options.items() if k != "outcome" and k not in INFERENCE}
    check_fit(numbers["fit"], design.fit(options["outcome"], **opts))
    for panel in panels:
        if panel == "fit":
            continue
        if (panel.startswith("first_stage") or panel == "weak_iv") and design.takeup is None:   # sharp: the panel does not apply
            assert numbers[panel]["applies"] is False and "Sharp design" in numbers[panel]["reason"]
            continue
        if panel in ("by_cutoff", "subgroups"):     # one cutoff, no groups declared: they do not apply
            assert numbers[panel]["applies"] is False and "`" in numbers[panel]["reason"]
            continue
        expected = direct(design, options, panel)
        if panel == "first_stage":
            check_fit(numbers[panel], expected)
            assert numbers["fit"]["first_stage_f"] == design.fit(options["outcome"], **opts).first_stage_f
            continue
        assert "error" not in numbers[panel], numbers[panel]
        table = expected if isinstance(expected, pd.DataFrame) else expected.table()
        assert numbers[panel]["table"] == records(table), panel
        if panel == "density":
            assert numbers[panel]["p_value"] == expected.p_value
            assert numbers[panel]["statistic"] == expected.statistic
        if panel == "balance":
            assert numbers[panel]["joint_p_value"] == plain(expected.joint_p_value)
        if panel == "local_randomization":
            assert numbers[panel]["p_value"] == expected.p_value and numbers[panel]["seed"] == 7


def test_without_data_path_the_constant_is_marked_and_checked(tmp_path):
    data, spec = sharp_data()
    text = replication_script(spec, {"outcome": "math_gain"}, ("fit",))
    first = next(line for line in text.splitlines() if line.startswith("DATA_PATH"))
    assert "<-- EDIT" in first
    script = tmp_path / "replicate.py"
    script.write_text(text, encoding="utf-8")
    result = run_script(script)
    assert result.returncode != 0 and "Set DATA_PATH at the top of this script" in result.stderr
    data.to_csv(tmp_path / "mine.csv", index=False)
    printed = run_script(script, "--data", str(tmp_path / "mine.csv"))
    assert printed.returncode == 0, printed.stderr
    fit = seamline.Design(data, **spec).fit("math_gain")
    estimate = next(line for line in printed.stdout.splitlines() if line.startswith("| Estimate |"))
    assert f"| {fit.estimate:.3f} |" in estimate   # the headline table, three decimals


def test_script_uses_the_public_api_only():
    data, spec = sharp_data()
    text = replication_script(spec, {"outcome": "math_gain", "bandwidth": (4.0, 5.0)}, ALL_PANELS,
                              data_path="invented.csv")
    assert "import seamline\n" in text
    assert "from seamline" not in text
    assert not re.findall(r"\b(?:seamline|design|fit)\._(?!_)", text)   # no private names
    assert "'bandwidth': (4.0, 5.0)," in text
    compile(text, "replicate.py", "exec")


def test_bad_inputs_are_pointed():
    with pytest.raises(InvalidOptionError, match=r"`panels` must be among .*got \['charts'\]"):
        replication_script({"score": "x", "cutoff": 0.0, "outcome": "y"}, {}, ("fit", "charts"))
    with pytest.raises(InvalidOptionError, match=r"`spec` must declare `cutoff`"):
        replication_script({"score": "x", "outcome": "y"}, {})
    with pytest.raises(InvalidOptionError, match=r"`cutoff` must be a number, text or a list.*got a DataFrame"):
        replication_script({"score": "x", "cutoff": pd.DataFrame({"a": range(50)}), "outcome": "y"}, {})
    with pytest.raises(InvalidOptionError, match=r"`options` must be fit options; got \['colour'\]"):
        replication_script({"score": "x", "cutoff": 0.0, "outcome": "y"}, {"colour": "red"})


def test_matches_a_board_built_from_the_same_declaration(tmp_path):
    # The board (seamline.board, read-only use) and the script must agree on every panel's numbers.
    data, spec = sharp_data()
    board = seamline.board(data, **{k: list(v) if isinstance(v, tuple) else v for k, v in spec.items()},
                           name="invented")
    data_path = tmp_path / "invented.csv"
    data.to_csv(data_path, index=False)
    script = tmp_path / "replicate.py"
    text = board_script(board, script, data_path=data_path)    # what Board.export("script", ...) returns
    assert script.read_text(encoding="utf-8") == text and "'invented'" in text
    out = tmp_path / "numbers.json"
    assert run_script(script, "--json", str(out)).returncode == 0
    numbers = json.loads(out.read_text(encoding="utf-8"))
    check_fit(numbers["fit"], board.fit)
    for panel, value in board.results.items():
        if panel == "fit":
            continue
        if getattr(value, "applies", True) is False:
            assert numbers[panel]["applies"] is False
            continue
        table = value if isinstance(value, pd.DataFrame) else value.table()
        assert numbers[panel]["table"] == records(table), panel
    board.close()


def test_a_board_with_cumulative_cutoffs_groups_and_an_effect_is_rebuilt(tmp_path):
    # Reference: the board's own panels (each checked against direct Design calls in
    # tests/notebook/test_designs_board.py); the script must rebuild the same floats.
    from seamline.demo_cutoffs import cumulative_grants_scenario
    s = cumulative_grants_scenario(3000, seed=8)
    board = seamline.board(s.data, score=s.score, cutoff=list(s.cutoff), outcome="investment",
                           groups="cooperative", effect=0.5, headline_cutoff=60.0, name="farms",
                           panels=["fit", "by_cutoff", "subgroups", "power", "density"])
    data_path = tmp_path / "farms.csv"
    s.data.to_csv(data_path, index=False)
    script = tmp_path / "replicate.py"
    board_script(board, script, data_path=data_path)
    out = tmp_path / "numbers.json"
    result = run_script(script, "--json", str(out))
    assert result.returncode == 0, result.stderr
    numbers = json.loads(out.read_text(encoding="utf-8"))
    check_fit(numbers["fit"], board.fit)
    assert board.fit.cutoff == 60.0
    for panel in ("by_cutoff", "subgroups", "power", "density"):
        assert numbers[panel]["table"] == records(board.results[panel].table()), panel
    effects = board.results["by_cutoff"]
    assert numbers["by_cutoff"]["equality"]["p_value"] == plain(effects.equality.p_value)
    report = board.results["power"]
    assert numbers["power"]["sample_size"]["n_total"] == report.sample.n_total
    assert numbers["power"]["power"]["power"] == report.power.power
    board.close()


def visits_data(n: int = 2500, seed: int = 4) -> pd.DataFrame:
    """Invented visits around a cutoff date (seeded; demo data only)."""
    rng = np.random.default_rng(seed)
    hours = rng.integers(-300 * 24, 300 * 24, n)
    days = hours / 24
    y = 0.4 * (days >= 0) + 0.003 * days + rng.normal(0, 1, n)
    return pd.DataFrame({"visit": pd.Timestamp("2024-07-01") + pd.to_timedelta(hours, unit="h"), "y": y,
                         "z": rng.normal(size=n)})


@pytest.mark.parametrize(("suffix", "cutoff"), [(".csv", "2024-07-01"), (".parquet", pd.Timestamp("2024-07-01"))])
def test_a_weeks_board_on_a_date_score_is_rebuilt(suffix, cutoff, tmp_path):
    # Reference: the board's own panels (checked against Design(score_unit="weeks") in
    # tests/notebook/test_chart_dates.py); the script must rebuild the same floats from the file.
    data = visits_data()
    board = seamline.board(data, score="visit", cutoff=cutoff, outcome="y", covariates=["z"], score_unit="weeks",
                           name="visits", panels=["fit", "bandwidths", "placebo", "donut", "density"])
    data_path = tmp_path / f"visits{suffix}"
    data.to_csv(data_path, index=False) if suffix == ".csv" else data.to_parquet(data_path, index=False)
    script = tmp_path / "replicate.py"
    text = board_script(board, script, data_path=data_path)
    assert "'score_unit': 'weeks'," in text and "'cutoff': '2024-07-01'," in text
    out = tmp_path / "numbers.json"
    result = run_script(script, "--json", str(out))
    assert result.returncode == 0, result.stderr
    numbers = json.loads(out.read_text(encoding="utf-8"))
    check_fit(numbers["fit"], board.fit)
    for panel in ("bandwidths", "placebo", "donut", "density"):
        value = board.results[panel]
        assert numbers[panel]["table"] == records(value if isinstance(value, pd.DataFrame) else value.table()), panel
    assert board.results["placebo"].table()["cutoff_date"].notna().all()      # a date board's placebo table
    board.close()
