"""Paper tables kept for the session (``seamline.paper_tables``) and the board's "Add to paper
table" control.

Reference: a paper-table column must hold exactly the numbers of a direct ``seamline.Design(...)
.fit(...)`` call on the same data and options, as ``seamline.paper_table`` formats them (three
decimals); the Word file is read back with python-docx. Data: the package's invented demo scenarios.
"""
from __future__ import annotations

import docx
import pytest

import seamline
from seamline.demo_data import fuzzy_scenario, sharp_scenario
from seamline.export.paper import PaperTableError
from seamline.export.paper_session import PaperTables, UnknownPaperTableError
from seamline.notebook.board import boards
from seamline.notebook.paper_control import PaperControl
from seamline.notebook.panels import BoardView


@pytest.fixture(autouse=True)
def _clean():
    before = {id(b) for b in boards()}
    seamline.paper_tables.clear()
    yield
    seamline.paper_tables.clear()
    for b in boards():
        if id(b) not in before:
            b.close()


@pytest.fixture(scope="module")
def sharp():
    return sharp_scenario(n=2000, seed=11)


def _board(s, name, **options):
    return seamline.board(s.data, name=name, panels=["fit"], **s.design_kwargs(), **options).wait()


def test_a_board_control_adds_the_headline_and_code_reads_the_table(sharp, tmp_path):
    main = _board(sharp, "tutoring")
    uniform = _board(sharp, "uniform", kernel="uniform")
    control = PaperControl(main)
    assert control.add() and "1 column(s)" in control.message.value
    assert "seamline.paper_tables[&#x27;main&#x27;]" in control.message.value
    PaperControl(uniform).add()
    table = seamline.paper_tables["main"]
    assert table.columns == ("tutoring", "uniform")
    design = seamline.Design(sharp.data, **sharp.design_kwargs())
    direct = seamline.paper_table([design.fit(), design.fit(kernel="uniform")], labels=["tutoring", "uniform"])
    assert table.cells() == direct.cells()
    estimate = design.fit().estimate
    for text in (table.to_latex(), table.to_markdown(), table.to_html()):
        assert f"{estimate:.3f}" in text and "uniform" in text
    assert repr(estimate) in table.to_csv()   # CSV keeps full precision
    path = table.to_docx(tmp_path / "main.docx")
    read = [[c.text for c in row.cells] for row in docx.Document(str(path)).tables[0].rows]
    assert read[1:] == table.cells()


def test_adding_again_replaces_the_column_with_the_newer_numbers(sharp):
    b = _board(sharp, "tutoring")
    seamline.paper_tables.add(b, "main")
    before = seamline.paper_tables["main"].cells()
    b.set_option("kernel", "epanechnikov")
    b.wait()
    assert seamline.paper_tables["main"].cells() == before     # a snapshot, not a live view
    assert seamline.paper_tables.add(b, "main") == ("tutoring",)
    expected = seamline.Design(sharp.data, **sharp.design_kwargs()).fit(kernel="epanechnikov")
    assert seamline.paper_tables["main"].cells()[1][1] == seamline.paper_table([expected]).cells()[1][1]


def test_a_fuzzy_board_brings_its_first_stage():
    s = fuzzy_scenario(n=2000, seed=2)
    b = _board(s, "takeup")
    seamline.paper_tables.add(b, "fuzzy")
    rows = {row[0]: row[1] for row in seamline.paper_tables["fuzzy"].cells()}
    direct = seamline.Design(s.data, **s.design_kwargs()).fit()
    assert rows["First-stage estimate"] == f"{direct.first_stage.estimate:.3f}"
    assert rows["First-stage F"] == f"{direct.first_stage_f:.3f}"


def test_the_control_shows_errors_beside_the_button_and_changes_nothing(sharp):
    b = _board(sharp, "tutoring")
    control = PaperControl(b)
    control.name.value = "   "
    assert not control.add()
    assert "seamline-error" in control.message.value and "1 to 60 printable characters" in control.message.value
    assert len(seamline.paper_tables) == 0
    seamline.paper_tables.add(b, "main")
    other = _board(sharp, "at90", level=0.9)
    control = PaperControl(other)
    assert not control.add()
    assert "share one confidence level; got (0.9, 0.95)" in control.message.value
    assert seamline.paper_tables.columns("main") == ("tutoring",)


def test_the_board_view_carries_the_control(sharp):
    b = _board(sharp, "tutoring")
    view = BoardView(b)
    try:
        controls = [w for w in view.children[1].children if isinstance(w, PaperControl)]
        assert len(controls) == 1 and controls[0].board is b
        controls[0].button.click()
        assert seamline.paper_tables.columns("main") == ("tutoring",)
    finally:
        view.close()


def test_the_session_collection_is_a_mapping_with_pointed_errors(sharp):
    tables = PaperTables()
    fit = seamline.Design(sharp.data, **sharp.design_kwargs()).fit()
    assert tables.add(fit, "main") == ("(1)",)
    assert tables.add(fit, "main", label="Again") == ("(1)", "Again")
    assert "main" in tables and " main " in tables and "other" not in tables
    assert dict(tables.items()).keys() == {"main"}
    with pytest.raises(UnknownPaperTableError, match=r"`table` must name a paper table of this session \('main'\); "
                                                     r"got 'other'"):
        tables["other"]
    with pytest.raises(KeyError, match="got 'other'"):
        tables["other"]
    with pytest.raises(PaperTableError, match=r"`table` must be the name of a paper table \(text\); got 3"):
        tables.add(fit, 3)
    with pytest.raises(PaperTableError, match=r"`label` must be a column of paper table 'main'"):
        tables.remove("main", "nope")
    tables.remove("main", "Again")
    assert tables.columns("main") == ("(1)",)
    assert tables.table("main", decimals=2, title="Main").title == "Main"
    tables.remove("main")
    assert len(tables) == 0
    with pytest.raises(PaperTableError, match="must be a fit, a board or a bias-aware result"):
        tables.add(object(), "main")
