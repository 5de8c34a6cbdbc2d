"""Scenario (issue 10): from a board to the paper, in a real browser.

The Designs side panel's "Script: Copy | Save" asks the kernel for the board's replication script:
Copy puts it on the clipboard, Save writes ``<design>_replication.py`` next to the notebook and
never overwrites (an existing file makes it ``-2``). "Paper table: Add…" and the board's own
"Add to paper table" control add the headline to a named paper table of the kernel session,
which code then reads as ``seamline.paper_tables[name]``.

References: the saved and copied script must equal what ``Board.export("script")`` returns in
the same kernel; the paper table's cells must equal ``seamline.paper_table`` of a direct
``seamline.Design(...).fit()`` on the same data. The data are invented (``seamline.demo_data``).
"""
from __future__ import annotations

import re

import playwright.sync_api  # noqa: F401  (a required test dependency: missing, the suite fails)

from playwright.sync_api import expect  # noqa: E402

import lab_ui as ui  # noqa: E402

FOLDER = "paper"
NAME = f"{FOLDER}/draft.ipynb"
CELLS = [
    ("markdown", "Invented data: a seeded tutoring-grant scenario."),
    "%load_ext seamline\nimport seamline\nfrom seamline.demo_data import sharp_scenario\n"
    "pupils = sharp_scenario(n=2500, seed=8).data",
    "%%cutoff tutoring\ndata: pupils\nscore: reading_score\ncutoff: 40\ntreated: below\noutcome: math_gain",
]
PANEL = "#seamline-designs-panel"


def _last_line(text: str) -> str:
    return text.strip().splitlines()[-1]


def test_script_save_and_copy_and_paper_table_add(page, lab):
    (lab.notebooks / FOLDER).mkdir(exist_ok=True)
    mine = lab.notebooks / FOLDER / "tutoring_replication.py"
    mine.write_text("# the author's own edited script: must survive\n")
    ui.write_notebook(lab, NAME, CELLS)
    ui.open_notebook(page, lab, NAME)
    ui.run_all(page)
    ui.wait_chip(page, "tutoring")
    ui.open_designs_panel(page)
    item = page.locator(f"{PANEL} .seamline-design-item[data-name='tutoring']")
    expect(item).to_have_attribute("data-status", "fresh", timeout=60_000)

    # Save: next to the notebook, with -2 since the author's file exists (kept as it was).
    item.locator(".seamline-script-save").click()
    saved = lab.notebooks / FOLDER / "tutoring_replication-2.py"
    expect(page.locator(".Toastify__toast", has_text="tutoring_replication-2.py")).to_be_visible(timeout=30_000)
    assert mine.read_text() == "# the author's own edited script: must survive\n"
    item.locator(".seamline-script-save").click()
    third = lab.notebooks / FOLDER / "tutoring_replication-3.py"
    expect(page.locator(".Toastify__toast", has_text="tutoring_replication-3.py")).to_be_visible(timeout=30_000)

    # The kernel's own export, written by the kernel, is the reference for both files.
    ui.run_code(page, "open('expected_script.py', 'w', encoding='utf-8', newline='')"
                      ".write(tutoring.export('script')); print('written')")
    expected = (lab.notebooks / FOLDER / "expected_script.py").read_text(encoding="utf-8")
    assert "Replication script for the seamline board 'tutoring'" in expected
    assert saved.read_text(encoding="utf-8") == expected
    assert third.read_text(encoding="utf-8") == expected
    compile(expected, str(saved), "exec")

    # Copy: the same text on the clipboard.
    item.locator(".seamline-script-copy").click()
    expect(page.locator(".Toastify__toast", has_text="Copied the replication script of tutoring")).to_be_visible(
        timeout=30_000)
    assert page.evaluate("() => navigator.clipboard.readText()") == expected

    # Paper table: Add… asks for the name ("main" by default) and adds the headline.
    item.locator(".seamline-paper-add-button").click()
    name = page.locator(".jp-Dialog .seamline-paper-table-name")
    expect(name).to_have_value("main", timeout=30_000)
    ui.screenshot(page, "scenario10-paper-table-dialog")
    page.locator(".jp-Dialog-button", has_text=re.compile(r"^Add$")).click()
    expect(page.locator(".jp-Dialog")).to_have_count(0)
    expect(page.locator(".Toastify__toast", has_text="seamline.paper_tables['main']")).to_be_visible(
        timeout=30_000)

    # The board's own control adds to another table, named in its field.
    board = ui.design_cell(page, "tutoring").locator(".seamline-board")
    field = board.locator(".seamline-paper-name input")
    field.fill("robustness")
    field.press("Tab")
    board.locator(".seamline-paper-add").click()
    expect(board.locator(".seamline-paper-message")).to_contain_text("Paper table robustness: 1 column(s)",
                                                                     timeout=30_000)
    ui.screenshot(page, "scenario10-paper-control")

    check = ui.run_code(
        page,
        "direct = seamline.Design(pupils, score='reading_score', cutoff=40, treated='below', "
        "outcome='math_gain').fit()\n"
        "reference = seamline.paper_table([direct], labels=['tutoring']).cells()\n"
        "print(sorted(seamline.paper_tables), seamline.paper_tables['main'].columns,\n"
        "      seamline.paper_tables['main'].cells() == reference,\n"
        "      seamline.paper_tables['robustness'].cells() == reference)",
    )
    assert _last_line(check) == "['main', 'robustness'] ('tutoring',) True True", check
    latex = ui.run_code(page, "print(seamline.paper_tables['main'].to_latex().count('\\\\toprule'))")
    assert _last_line(latex) == "1"
    ui.assert_clean(page)
