"""The publication table: its cells are the fits' numbers as formatted, in every format.

Numbers come from direct ``Design.fit`` calls run in the test on invented, seeded demo data; the
renderings are read back with outside readers: python-docx for Word, pandas.read_csv for CSV,
the standard library's html.parser for HTML, and pdflatex (when installed) for LaTeX.
"""
from __future__ import annotations

import io
import shutil
import subprocess
from html.parser import HTMLParser
from types import SimpleNamespace

import pandas as pd
import pytest

import seamline
from seamline.demo_data import fuzzy_scenario, sharp_scenario
from seamline.export import format_number
from seamline.export.paper import PaperTableError, paper_table

DECIMALS = 3   # the default of paper_table


@pytest.fixture(scope="module")
def fits():
    s = sharp_scenario(n=2000, seed=7)
    f = fuzzy_scenario(n=3000, seed=7)
    sharp = seamline.Design(s.data, **s.design_kwargs())
    fuzzy = seamline.Design(f.data, **f.design_kwargs())
    return {"sharp": sharp.fit(), "split": sharp.fit(bandwidth=(4.0, 6.0), kernel="uniform"),
            "fuzzy": fuzzy.fit()}


def n(value) -> str:
    return format_number(float(value), DECIMALS)


def column(table, j: int) -> dict[str, str]:
    """Column j of the shown grid as {row label (with the line beneath keyed by its row above): text}."""
    out, above = {}, None
    for row in table.cells():
        key = row[0] if row[0] else f"{above} (beneath)"
        out[key] = row[j + 1]
        above = row[0] or above
    return out


def test_cells_equal_the_fits_numbers_as_formatted(fits):
    items = [fits["sharp"], fits["split"], fits["fuzzy"]]
    table = paper_table(items, labels=["Main", "Uniform", "Fuzzy"])
    assert table.header() == ["", "Main", "Uniform", "Fuzzy"]
    for j, fit in enumerate(items):
        col = column(table, j)
        lo, hi = fit.robust_conf_int
        assert col["Outcome"] == fit.outcome
        assert col["Estimate"] == n(fit.estimate)
        assert col["Estimate (beneath)"] == f"({n(fit.std_error)})"
        assert col["Robust 95% CI"] == f"[{n(lo)}, {n(hi)}]"
        assert col["Robust p-value"] == n(fit.robust_p_value)
        assert col["Bandwidth (below)"] == n(fit.bandwidth[0])
        assert col["Bandwidth (above)"] == n(fit.bandwidth[1])
        assert col["Kernel"] == fit.kernel
        assert col["Degree"] == str(fit.degree)
        assert col["Observations (below)"] == str(fit.n_used[0])
        assert col["Observations (above)"] == str(fit.n_used[1])
        assert col["Clusters"] == ("" if fit.n_clusters is None else str(fit.n_clusters))
        if fit.first_stage is None:   # blank where not applicable
            assert col["First-stage estimate"] == col["First-stage F"] == col["First-stage estimate (beneath)"] == ""
        else:
            assert col["First-stage estimate"] == n(fit.first_stage.estimate)
            assert col["First-stage estimate (beneath)"] == f"({n(fit.first_stage.std_error)})"
            assert col["First-stage F"] == n(fit.first_stage_f)


def test_one_bandwidth_row_when_every_item_uses_one_bandwidth(fits):
    table = paper_table([fits["sharp"]])
    labels = [row[0] for row in table.cells()]
    assert "Bandwidth" in labels and "Bandwidth (below)" not in labels
    assert "First-stage estimate" not in labels   # no fuzzy item: the row is left out
    assert column(table, 0)["Bandwidth"] == n(fits["sharp"].bandwidth[0])


def test_a_board_contributes_its_headline_fit(fits):
    board = SimpleNamespace(name="tutoring", fit=fits["sharp"], errors={})
    assert paper_table([board]).cells() == paper_table([fits["sharp"]]).cells()
    broken = SimpleNamespace(name="tutoring", fit=None, errors={"fit": "`cutoff` must lie in range"})
    with pytest.raises(PaperTableError, match=r"items\[0\].*'tutoring'.*`cutoff` must lie in range"):
        paper_table([broken])


def test_bias_aware_results_fill_their_own_rows(fits):
    # An invented stand-in with the fields of a bias-aware result (estimate, std_error, max_bias, conf_int).
    bias_aware = SimpleNamespace(outcome="math_gain", estimate=2.0, std_error=0.5, max_bias=0.25,
                                 conf_int=(0.75, 3.25), bandwidth=(3.0, 3.0), n_used=(100, 120), level=0.95,
                                 kernel="triangular", degree=1)
    table = paper_table([fits["sharp"], bias_aware])
    col = column(table, 1)
    assert col["Bias-aware 95% CI"] == "[0.750, 3.250]"
    assert col["Worst-case bias"] == "0.250"
    assert col["Robust 95% CI"] == "" and col["Robust p-value"] == ""
    assert column(table, 0)["Bias-aware 95% CI"] == ""
    assert any("Armstrong and Kolesár" in note for note in table.notes)


def test_rows_pick_and_order(fits):
    table = paper_table([fits["fuzzy"]], rows=["first_stage_f", "robust_ci"], decimals=2)
    assert [row[0] for row in table.cells()] == ["Outcome", "Estimate", "", "First-stage F", "Robust 95% CI"]
    assert column(table, 0)["Estimate"] == format_number(fits["fuzzy"].estimate, 2)


def test_bad_arguments_are_pointed(fits):
    with pytest.raises(PaperTableError, match=r"`rows` must be among .*got \['standard'\]"):
        paper_table([fits["sharp"]], rows=["standard"])
    with pytest.raises(PaperTableError, match=r"`labels` must have one entry per item \(2\); got 1"):
        paper_table([fits["sharp"], fits["split"]], labels=["only one"])
    with pytest.raises(PaperTableError, match=r"`items` must share one confidence level; got \(0.9, 0.95\)"):
        paper_table([fits["sharp"], fits["split"].with_level(0.9)])
    with pytest.raises(PaperTableError, match=r"`items\[0\]` must be a fit, a board or a bias-aware result"):
        paper_table([42])
    with pytest.raises(PaperTableError, match=r"`decimals` must be a whole number from 0 to 15; got 2.5"):
        paper_table([fits["sharp"]], decimals=2.5)


def test_word_file_holds_the_same_cells(fits, tmp_path):
    import docx
    table = paper_table([fits["sharp"], fits["fuzzy"]], title="Invented estimates", notes=["Invented data."])
    path = table.to_docx(tmp_path / "table.docx")
    document = docx.Document(str(path))   # Reference: python-docx reading the file back
    assert len(document.tables) == 1
    read = [[cell.text for cell in row.cells] for row in document.tables[0].rows]
    assert read == [table.header(), *table.cells()]
    paragraphs = [p.text for p in document.paragraphs]
    assert paragraphs[0] == "Invented estimates"
    assert "Invented data." in paragraphs and "Standard errors in parentheses." in paragraphs


def test_csv_reads_back_at_full_precision(fits):
    table = paper_table([fits["sharp"], fits["fuzzy"]])
    back = pd.read_csv(io.StringIO(table.to_csv()), index_col=0)   # Reference: pandas.read_csv
    fuzzy = fits["fuzzy"]
    assert float(back.loc["Estimate", "(2)"]) == fuzzy.estimate
    assert float(back.loc["Std. error", "(2)"]) == fuzzy.std_error
    assert float(back.loc["Robust 95% CI (low)", "(2)"]) == fuzzy.robust_conf_int[0]
    assert float(back.loc["First-stage F", "(2)"]) == fuzzy.first_stage_f
    assert pd.isna(back.loc["First-stage F", "(1)"])


class _Cells(HTMLParser):
    def __init__(self):
        super().__init__()
        self.rows, self._cell = [], None

    def handle_starttag(self, tag, attrs):
        if tag == "tr":
            self.rows.append([])
        elif tag in ("td", "th"):
            self._cell = ""

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._cell is not None:
            self.rows[-1].append(self._cell)
            self._cell = None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell += data


def test_html_and_markdown_hold_the_same_cells(fits):
    table = paper_table([fits["sharp"], fits["fuzzy"]], notes=["<b>not bold</b>"])
    parser = _Cells()   # Reference: the standard library's html.parser
    parser.feed(table.to_html())
    grid = [table.header(), *table.cells()]
    assert parser.rows[: len(grid)] == grid
    assert "&lt;b&gt;not bold&lt;/b&gt;" in table.to_html()
    markdown = table.to_markdown().splitlines()
    estimate = next(line for line in markdown if line.startswith("| Estimate |"))
    assert estimate == "| Estimate | " + " | ".join(column(table, j)["Estimate"] for j in range(2)) + " |"


def test_latex_text(fits):
    negative = SimpleNamespace(outcome="invented_y", estimate=-1.25, std_error=0.5, max_bias=0.1,
                               conf_int=(-2.5, 0.0), level=0.95)   # an invented bias-aware stand-in
    table = paper_table([fits["sharp"], fits["fuzzy"], negative], title="Invented: 50% take-up",
                        notes=["Invented data."])
    text = table.to_latex(label="tab:main")
    lines = text.splitlines()
    for rule in (r"\toprule", r"\midrule", r"\bottomrule"):
        assert rule in lines
    assert r"\caption{Invented: 50\% take-up}" in text and r"\label{tab:main}" in text
    assert lines.index(r"\end{tabular}") < lines.index(r"Invented data.\par")
    assert r"\begin{tabular}{lccc}" in text
    assert r"Estimate & " in text and r" & $-$1.250 \\" in text   # a typeset minus, not a hyphen
    assert r"[$-$2.500, 0.000]" in text
    assert r"food\_security" in text


@pytest.mark.skipif(shutil.which("pdflatex") is None, reason="no TeX installation (pdflatex) on this machine; "
                    "the LaTeX text is still checked in test_latex_text")
def test_latex_compiles(fits, tmp_path):
    body = paper_table([fits["sharp"], fits["fuzzy"]], notes=["Invented data."]).to_latex()
    source = "\\documentclass{article}\n\\usepackage{booktabs}\n\\begin{document}\n" + body + "\\end{document}\n"
    (tmp_path / "t.tex").write_text(source, encoding="utf-8")
    result = subprocess.run(["pdflatex", "-interaction=nonstopmode", "-halt-on-error", "t.tex"], cwd=tmp_path,
                            capture_output=True, text=True, timeout=120)
    assert result.returncode == 0, result.stdout[-2000:]


def test_a_live_board_is_an_item():
    # seamline.board (read-only use of the notebook layer): the board stands for its headline fit.
    s = sharp_scenario(n=1500, seed=8)
    board = seamline.board(s.data, score=s.score, cutoff=s.cutoff, treated=s.treated, outcome="math_gain",
                           panels=["fit"], name="invented")
    try:
        assert paper_table([board], labels=["Board"]).cells() == paper_table([board.fit]).cells()
    finally:
        board.close()
