"""Every export of every result speaks to a reader: no machine column name in any format.

``table()`` keeps machine names for code; LaTeX, Markdown, HTML and CSV go through
``seamline.export.labels``. The results come from invented, seeded demo data (smoke data, no
reference values); the CSV round trip is read back with pandas.read_csv.
"""
from __future__ import annotations

import html
import io
import re
import shutil
import subprocess

import numpy as np
import pandas as pd
import pytest

import seamline
from seamline.demo_data import fuzzy_scenario, sharp_scenario
from seamline.export import labels
from seamline.export.methods import methods_paragraph
from seamline.results.base import CAUTION

FORMATS = ("latex", "markdown", "html", "csv", "text")


@pytest.fixture(scope="module")
def results() -> dict:
    sharp = sharp_scenario(n=2000, seed=4)
    fuzzy = fuzzy_scenario(n=3000, seed=4)
    ds = seamline.Design(sharp.data, **sharp.design_kwargs())
    df = seamline.Design(fuzzy.data, **fuzzy.design_kwargs())
    fuzzy_fit = df.fit()
    return {
        "sharp fit": ds.fit(),
        "fuzzy fit": fuzzy_fit,
        "first stage": fuzzy_fit.first_stage,
        "sensitivity": ds.sensitivity(),
        "placebo": ds.placebo_cutoffs(),
        "donut": ds.donut(),
        "bins": ds.bins(),
        "density (local-cdf)": ds.density_test(),
        "density (binned)": ds.density_test(method="binned"),
        "balance": df.balance(),
        "score profile": ds.score_profile(),
        "checks": df.checks(),
    }


def bandwidth_rules() -> pd.DataFrame:
    """The board's bandwidth-rules table (a plain DataFrame, rendered through labels.labelled_model)."""
    s = sharp_scenario(n=600, seed=1)
    return seamline.Design(s.data, **s.design_kwargs()).bandwidths()


def machine_names(results: dict) -> set[str]:
    names = set()
    for result in results.values():
        names.update(str(c) for c in result.table().columns)
    names.update(bandwidth_rules().columns)
    return names


def render(result, fmt: str) -> str:
    return {"latex": result.to_latex, "markdown": result.to_markdown, "html": result.to_html,
            "csv": result.to_csv, "text": lambda: labels.export_table(result, "text")}[fmt]()


def header_cells(text: str, fmt: str, result=None) -> list[str]:
    """The header row's cells, read from the rendered text."""
    if fmt == "csv":
        return [str(c) for c in pd.read_csv(io.StringIO(text)).columns]
    if fmt == "markdown":
        line = next(line for line in text.splitlines() if line.startswith("| "))
        return [c.strip().replace("\\", "") for c in line.strip("|").split(" | ")]
    if fmt == "html":
        return [html.unescape(c) for c in re.findall(r"<th[^>]*>(.*?)</th>", text)]
    if fmt == "text":   # title, then pandas' to_string header: the labels in order, padded with spaces
        line, cells = text.splitlines()[1], []
        for label in labels.result_model(result).columns:
            start = line.index(label)
            assert not line[:start].strip(), (line, label)
            cells.append(label)
            line = line[start + len(label):]
        assert not line.strip(), line
        return cells
    lines = text.splitlines()
    header = lines[lines.index(r"\toprule") + 1]
    return [c.strip().replace("\\", "") for c in header.removesuffix(r" \\").split(" & ")]


def test_every_result_column_has_a_label(results):
    known = set(labels.COLUMN_LABELS) | {name for pair in labels.INTERVAL_COLUMNS for name in pair}
    assert machine_names(results) - known == set()


@pytest.mark.parametrize("fmt", FORMATS)
def test_no_machine_column_name_in_any_export(results, fmt):
    names = machine_names(results)
    snake = sorted(n for n in names if "_" in n)
    for kind, result in results.items():
        text = render(result, fmt)
        for name in snake:   # escaped as LaTeX and Markdown escape an underscore, and raw
            assert name not in text and name.replace("_", r"\_") not in text, (kind, fmt, name)
        header = header_cells(text, fmt, result)
        assert header, (kind, fmt)
        leaked = [cell for cell in header if cell in names]
        assert not leaked, (kind, fmt, leaked)


def test_board_bandwidth_rules_table_is_labelled(results):
    frame = bandwidth_rules()
    model = labels.labelled_model(frame, title="Bandwidth rules")
    assert model.columns == ("Bandwidth rule", "Bandwidth (below)", "Bandwidth (above)",
                             "Pilot bandwidth (below)", "Pilot bandwidth (above)")
    assert model.rows[0][0] == "MSE-optimal"


def test_csv_keeps_full_precision_under_reader_labels(results):
    fit = results["sharp fit"]
    back = pd.read_csv(io.StringIO(fit.to_csv()))   # Reference: pandas.read_csv reading the export back
    table = fit.table()
    assert list(back.columns) == ["Estimator", "Estimate", "Std. error", "95% CI (low)", "95% CI (high)",
                                  "p-value"]
    np.testing.assert_array_equal(back["Estimate"].to_numpy(), table["estimate"].to_numpy())
    np.testing.assert_array_equal(back["95% CI (high)"].to_numpy(), table["ci_high"].to_numpy())


def test_interval_labels_carry_the_level(results):
    fit90 = results["sharp fit"].with_level(0.9)
    assert "90% CI" in fit90.to_markdown()
    assert "Robust 95% CI" in results["sensitivity"].to_markdown()
    assert "Robust 95% CI" in results["balance"].to_markdown()   # balance intervals are the robust ones


def test_table_keeps_machine_names_for_code(results):
    assert list(results["sharp fit"].table().columns) == ["estimator", "estimate", "std_error", "ci_low",
                                                           "ci_high", "p_value"]


def test_caution_is_not_repeated_under_tables(results):
    for kind, result in results.items():
        assert CAUTION not in result.notes(), kind
        for fmt in FORMATS:
            assert "local to the cutoff" not in render(result, fmt), (kind, fmt)
    text = methods_paragraph(results["sharp fit"], diagnostics={"density": results["density (local-cdf)"]})
    assert text.count(CAUTION) == 1


def test_labelled_frame_leaves_the_input_alone(results):
    table = results["sensitivity"].table()
    before = table.copy()
    labels.labelled_frame(table, level=0.95)
    pd.testing.assert_frame_equal(table, before)


@pytest.mark.parametrize("fmt", FORMATS)
def test_export_table_renders_results_and_frames_alike(results, fmt):
    fit = results["sharp fit"]
    if fmt != "text":
        assert labels.export_table(fit, fmt) == render(fit, fmt)
    frame = bandwidth_rules()
    text = labels.export_table(frame, fmt, title="Bandwidth rules")
    assert "Pilot bandwidth (below)" in text and "pilot_below" not in text


def test_export_table_text_header_has_only_labels(results):
    text = labels.export_table(results["sensitivity"], "text")
    header = text.splitlines()[1]
    assert "Robust 95% CI" in header and "robust_ci_low" not in header
    with pytest.raises(seamline.errors.InvalidOptionError, match=r"`fmt` must be one of .*got 'pdf'"):
        labels.export_table(results["sensitivity"], "pdf")


@pytest.mark.skipif(shutil.which("pdflatex") is None, reason="no TeX installation (pdflatex) on this machine; "
                    "the LaTeX text is still checked above")
def test_every_latex_export_compiles(results, tmp_path):
    tables = "\n\\clearpage\n".join(result.to_latex() for result in results.values())
    source = ("\\documentclass{article}\n\\usepackage{booktabs}\n\\usepackage[margin=1cm,landscape]{geometry}\n"
              "\\begin{document}\n\\tiny\n" + tables + "\\end{document}\n")
    (tmp_path / "t.tex").write_text(source, encoding="utf-8")
    # Reference: pdflatex (a TeX installation) typesets the file without an error
    result = subprocess.run(["pdflatex", "-interaction=nonstopmode", "-halt-on-error", "t.tex"], cwd=tmp_path,
                            capture_output=True, text=True, timeout=300)
    assert result.returncode == 0, result.stdout[-3000:]
