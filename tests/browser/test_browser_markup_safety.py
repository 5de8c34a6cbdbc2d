"""Scenario 6 (issue 5): a column named like markup is shown as text, never run as markup.

The score column is called ``<img src=x onerror=alert(1)>`` and the outcome ``<b>gain</b>``. The
names must appear literally in the chip, the Designs panel, the insert-design form and the board
view; no ``<img src=x>`` or ``<b>`` element may appear, and no dialog may open. The data are
invented (seamline.demo_data with the columns renamed).
"""
from __future__ import annotations

import pytest

import playwright.sync_api  # noqa: F401  (a required test dependency: missing, the suite fails)

from playwright.sync_api import expect  # noqa: E402

import lab_ui as ui  # noqa: E402

ODD_SCORE = "<img src=x onerror=alert(1)>"
ODD_OUTCOME = "<b>gain</b>"
SETUP = ("%load_ext seamline\n"
         "from seamline.demo_data import sharp_scenario\n"
         "odd = sharp_scenario(n=2000, seed=4).data.rename(columns={\n"
         f"    'reading_score': {ODD_SCORE!r}, 'math_gain': {ODD_OUTCOME!r}}})  # invented data")
DESIGN = ("%%cutoff odd_names\n"
          "data: odd\n"
          f"score: {ODD_SCORE}\n"
          "cutoff: 40\n"
          "treated: below\n"
          f"outcome: {ODD_OUTCOME}")


def test_markup_in_column_names_is_shown_as_text(page, lab):
    name = ui.write_notebook(lab, "odd_names.ipynb", [SETUP, DESIGN])
    ui.open_notebook(page, lab, name)
    ui.run_all(page)
    chip = ui.wait_chip(page, "odd_names")
    assert ODD_SCORE in chip.get_attribute("title")
    assert ODD_OUTCOME in chip.get_attribute("title")

    ui.open_designs_panel(page)
    item = page.locator("#seamline-designs-panel .seamline-design-item[data-name='odd_names']")
    expect(item.locator(".seamline-design-spec")).to_have_text(f"score: {ODD_SCORE} at 40")
    expect(item.locator(".seamline-design-outcome")).to_have_text(f"outcome: {ODD_OUTCOME} (sharp)")

    board = ui.design_cell(page, "odd_names").locator(".seamline-board")
    expect(board.locator(".seamline-header")).to_contain_text(ODD_SCORE)

    page.locator(".jp-NotebookPanel-toolbar .seamline-insert-design-button").click()
    form = page.locator(".seamline-design-form")
    expect(form).to_be_visible(timeout=30_000)
    options = form.locator("[data-field='score'] option").all_text_contents()
    assert f"{ODD_SCORE} (float64)" in options
    ui.screenshot(page, "scenario6-markup-as-text")
    page.locator(".jp-Dialog-button", has_text="Cancel").click()

    # Markup elements the user never wrote: board headers use <b> for numbers, so only count
    # <b> elements whose text is the column's inner text.
    injected = page.evaluate("""() => {
        const imgs = document.querySelectorAll('img[src="x"]').length;
        const bolds = [...document.querySelectorAll('b')].filter(
            b => b.textContent.trim() === 'gain').length;
        return imgs + bolds;
    }""")
    assert injected == 0
    page.wait_for_timeout(500)
    ui.assert_clean(page)   # includes: no alert dialog fired
