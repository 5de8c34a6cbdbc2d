"""``python -m seamline report SPEC --out DIR`` on a CSV and a Parquet file, and its errors.

The data are invented and seeded (seamline.demo_data). Numbers in the report are checked against a
direct ``seamline.Design`` fit run here; SVG files are parsed with the standard library's
xml.etree, PDF files checked for the PDF header (ISO 32000: a file starts with "%PDF-").
"""
from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path
from xml.etree import ElementTree

import pytest

import seamline
from seamline import cli
from seamline.demo_data import fuzzy_scenario, sharp_scenario
from seamline.export import format_number
from seamline.results.base import CAUTION

PACKAGE_PARENT = str(Path(seamline.__file__).resolve().parents[1])

SHARP_SPEC = """\
%%cutoff tutoring
# invented data (seamline.demo_data.sharp_scenario)
data: {data}
score: reading_score
cutoff: 40
treated: below
outcome: math_gain, attendance
covariates: age, prior_math
"""


def run_cli(*args: str, cwd: Path) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": PACKAGE_PARENT}
    return subprocess.run([sys.executable, "-m", "seamline", *args], capture_output=True, text=True,
                          timeout=600, cwd=cwd, env=env)


@pytest.fixture(scope="module")
def sharp(tmp_path_factory):
    folder = tmp_path_factory.mktemp("sharp")
    scenario = sharp_scenario(n=1500, seed=21)
    scenario.data.to_csv(folder / "invented.csv", index=False)
    return folder, scenario


def test_report_from_a_csv_file(sharp):
    folder, scenario = sharp
    (folder / "tutoring.txt").write_text(SHARP_SPEC.format(data="invented.csv"), encoding="utf-8")
    result = run_cli("report", "tutoring.txt", "--out", "report", cwd=folder)
    assert result.returncode == 0, result.stderr
    steps = [line for line in result.stdout.splitlines() if line.startswith("[")]
    assert [s.split("]")[0] for s in steps] == [f"[{i}/7" for i in range(1, 8)]   # a progress line per step

    out = folder / "report"
    fit = seamline.Design(scenario.data, score="reading_score", cutoff=40, treated="below",
                          outcome=["math_gain", "attendance"], covariates=["age", "prior_math"]).fit()
    headline = (out / "tables" / "headline.md").read_text(encoding="utf-8")
    assert f"| Estimate | {format_number(fit.estimate, 3)} |" in headline
    lo, hi = fit.robust_conf_int
    assert f"[{format_number(lo, 3)}, {format_number(hi, 3)}]" in headline
    for stem in ("estimate", "sensitivity", "balance", "density", "placebo", "donut", "bandwidths"):
        assert (out / "tables" / f"{stem}.tex").read_text(encoding="utf-8").startswith(r"\begin{table}")
        assert (out / "tables" / f"{stem}.md").is_file()
    assert not (out / "tables" / "first_stage.tex").exists()   # a sharp design has no first stage
    for what in ("estimate", "sensitivity", "balance", "density", "placebo", "donut"):
        ElementTree.parse(out / "figures" / f"{what}.svg")      # Reference: xml.etree parses the SVG
        assert (out / "figures" / f"{what}.pdf").read_bytes().startswith(b"%PDF-")
    methods = (out / "methods.txt").read_text(encoding="utf-8")
    assert methods.startswith("We estimate the jump in math_gain") and format_number(fit.estimate, 3) in methods
    page = (out / "report.html").read_text(encoding="utf-8")
    assert page.count(CAUTION) == 2          # once for the board, once ending the methods paragraph
    assert "Std. error" in page and "Robust 95% CI" in page
    assert 'href="figures/estimate.svg"' in page and (out / "replicate.py").is_file()


def test_report_from_a_parquet_file_in_process(tmp_path, capsys):
    scenario = fuzzy_scenario(n=2000, seed=21)
    scenario.data.to_parquet(tmp_path / "invented.parquet", index=False)
    spec = (f"data: invented.parquet\nscore: {scenario.score}\ncutoff: {scenario.cutoff:g}\n"
            f"treated: {scenario.treated}\noutcome: {scenario.outcome[0]}\ntakeup: {scenario.takeup}\n")
    (tmp_path / "benefit.txt").write_text(spec, encoding="utf-8")
    code = cli.main(["report", str(tmp_path / "benefit.txt"), "--out", str(tmp_path / "out")])
    assert code == 0, capsys.readouterr().err
    assert "declaring board 'benefit'" in capsys.readouterr().out   # named after the spec file
    fit = seamline.Design(scenario.data, score=scenario.score, cutoff=scenario.cutoff, treated=scenario.treated,
                          outcome=scenario.outcome[0], takeup=scenario.takeup).fit()
    first = (tmp_path / "out" / "tables" / "first_stage.md").read_text(encoding="utf-8")
    assert f"| {format_number(fit.first_stage.estimate, 3)} |" in first
    headline = (tmp_path / "out" / "tables" / "headline.md").read_text(encoding="utf-8")
    assert f"| First-stage F | {format_number(fit.first_stage_f, 3)} |" in headline
    assert (tmp_path / "out" / "figures" / "first_stage.pdf").read_bytes().startswith(b"%PDF-")


BAD_SPECS = [
    # (spec text, the pointed message)
    ("data: invented.csv\nscore: reading_score\ncutoff: forty\noutcome: math_gain\n",
     "line 3: `cutoff` must be a number, a column name, increasing numbers or the name of a notebook variable; "
     "got 'forty'"),
    ("%%cutoff tutoring\ndata: invented.csv\nscore: reading_score\ncutoff: 40\noutcome: math_gian\n",
     "line 5: `outcome` must name a column of the data; got 'math_gian'"),
    ("data: invented.csv\nscore: reading_score\ncutoff: 40\noutcome: math_gain\nkernal: uniform\n",
     "line 5: `kernal` must be a known key; got an unknown key. Did you mean `kernel`?"),
    ("# comment\n\ndata: missing.csv\nscore: reading_score\ncutoff: 40\noutcome: math_gain\n",
     "line 3: `data` must name an existing file; got 'missing.csv'"),
    ("data: invented.xlsx\nscore: reading_score\ncutoff: 40\noutcome: math_gain\n",
     "line 1: `data` must name a CSV or Parquet file"),
    ("score: reading_score\ncutoff: 40\noutcome: math_gain\n", "must declare data, score, cutoff, outcome"),
    ("data: invented.csv\nscore: reading_score\ncutoff: 400\noutcome: math_gain\n",
     "line 3: `cutoff` must lie within the range of score"),
    ("data: invented.csv\nscore: reading_score\ncutoff: 40\noutcome: math_gain\nscore_unit: fortnights\n",
     "line 5: `score_unit` must be one of days, hours, weeks, months, years; got 'fortnights'"),
    ("data: invented.csv\nscore: reading_score\ncutoff: 40\noutcome: math_gain\nscore_unit: weeks\n",
     "line 5: `score_unit` applies to date or time scores only; got 'weeks' for the numeric score "
     "'reading_score'. Remove it, or declare a date or datetime column as the score."),
]


@pytest.mark.parametrize(("spec", "message"), BAD_SPECS, ids=[m.split(";")[0][:40] for _, m in BAD_SPECS])
def test_a_bad_spec_gives_the_pointed_error_and_exit_code_2(sharp, tmp_path, capsys, spec, message):
    folder, _ = sharp
    path = folder / f"bad_{abs(hash(spec))}.txt"
    path.write_text(spec, encoding="utf-8")
    code = cli.main(["report", str(path), "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err
    assert code == 2
    assert message in err, err
    assert "Traceback" not in err
    assert not (tmp_path / "out").exists()    # nothing written for a bad spec


def test_the_module_entry_point_exits_2_without_a_traceback(sharp):
    folder, _ = sharp
    (folder / "bad.txt").write_text(BAD_SPECS[0][0], encoding="utf-8")
    result = run_cli("report", "bad.txt", "--out", "never", cwd=folder)
    assert result.returncode == 2
    assert BAD_SPECS[0][1] in result.stderr and "Traceback" not in result.stderr


def test_report_of_cumulative_cutoffs_writes_the_new_tables_and_figures(tmp_path, capsys):
    # Reference: the board's own exports (checked against Design calls in tests/notebook/test_designs_board.py).
    from seamline.demo_cutoffs import cumulative_grants_scenario
    scenario = cumulative_grants_scenario(2500, seed=12)
    scenario.data.to_csv(tmp_path / "farms.csv", index=False)
    spec = ("data: farms.csv\nscore: support_points\ncutoff: 30, 60\noutcome: investment\n"
            "groups: cooperative\neffect: 0.5\n")
    (tmp_path / "grants.txt").write_text(spec, encoding="utf-8")
    code = cli.main(["report", str(tmp_path / "grants.txt"), "--out", str(tmp_path / "out")])
    assert code == 0, capsys.readouterr().err
    tables, figures = tmp_path / "out" / "tables", tmp_path / "out" / "figures"
    for stem in ("by_cutoff", "subgroups", "power", "sample_size"):
        assert (tables / f"{stem}.tex").read_text(encoding="utf-8").startswith(r"\begin{table}"), stem
        assert "robust_ci_low" not in (tables / f"{stem}.md").read_text(encoding="utf-8")
    assert not (tables / "decomposition.tex").exists()      # cumulative cutoffs have no pooled estimate
    for what in ("by_cutoff", "subgroups", "power"):
        ElementTree.parse(figures / f"{what}.svg")
    methods = (tmp_path / "out" / "methods.txt").read_text(encoding="utf-8")
    assert "cumulative cutoffs 30, 60" in methods and "Cattaneo, Titiunik and Vazquez-Bare (2019)" in methods
    page = (tmp_path / "out" / "report.html").read_text(encoding="utf-8")
    assert page.count(CAUTION) == 2          # the new tabs do not repeat the cautions
