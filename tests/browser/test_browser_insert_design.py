"""Scenario 5 (issue 5): the insert-design command writes a working design cell from a form.

Also: the front end degrades gracefully in a kernel that has not loaded seamline (the chip and
the panel say what to do; the command explains instead of failing).

The data are invented (``seamline.demo_data``); the inserted design's estimate is compared with
the same design fitted afresh in the kernel.
"""
from __future__ import annotations

import re

import pytest

import playwright.sync_api  # noqa: F401  (a required test dependency: missing, the suite fails)

from playwright.sync_api import expect  # noqa: E402

import lab_ui as ui  # noqa: E402

SETUP = ("%load_ext seamline\n"
         "from seamline.demo_data import sharp_scenario\n"
         "pupils = sharp_scenario(n=2500, seed=8).data   # invented data\n"
         "labels = ['not', 'a', 'frame']")


def form_field(page, name):
    return page.locator(f".seamline-design-form [data-field='{name}'] select, "
                        f".seamline-design-form [data-field='{name}'] input")


def test_insert_design_command_creates_a_working_cell(page, lab):
    name = ui.write_notebook(lab, "insert.ipynb", [SETUP])
    ui.open_notebook(page, lab, name)
    ui.run_all(page)

    # The toolbar button opens the form; the DataFrame list comes from the kernel.
    page.locator(".jp-NotebookPanel-toolbar .seamline-insert-design-button").click()
    form = page.locator(".seamline-design-form")
    expect(form).to_be_visible(timeout=30_000)
    data = form_field(page, "data")
    assert data.locator("option").all_text_contents() == ["pupils (2500 rows)"]
    score_options = form_field(page, "score").locator("option").all_text_contents()
    assert "reading_score (float64)" in score_options
    form_field(page, "score").select_option("reading_score")
    form_field(page, "outcome").select_option("math_gain")
    form_field(page, "treated").select_option("below")
    form_field(page, "cutoff").fill("forty")
    ui.screenshot(page, "scenario5-insert-design-form")
    page.locator(".jp-Dialog-button", has_text="Insert and run").click()

    # A wrong cutoff brings the form back with the problem stated and the choices kept.
    expect(page.locator(".seamline-form-problems")).to_contain_text("The cutoff must be a number")
    expect(form_field(page, "outcome")).to_have_value("math_gain")
    form_field(page, "cutoff").fill("40")
    page.locator(".jp-Dialog-button", has_text="Insert and run").click()
    expect(page.locator(".seamline-design-form")).to_have_count(0)

    chip = ui.wait_chip(page, "design")
    cell = ui.design_cell(page, "design")
    source = cell.locator(".jp-InputArea-editor").text_content()
    for line in ("%%cutoff design", "data: pupils", "score: reading_score", "cutoff: 40",
                 "treated: below", "outcome: math_gain"):
        assert line in source, source
    expect(cell.locator(".seamline-board .seamline-headline")).to_contain_text("Estimate")
    expect(cell.locator(".jp-InputPrompt")).to_have_text(re.compile(r"\[\d+\]"))
    cell.evaluate("node => node.scrollIntoView({block: 'start'})")
    ui.screenshot(page, "scenario5-inserted-design")

    reference = float(ui.run_code(
        page, "import seamline as _s\nprint(repr(_s.Design(pupils, score='reading_score', "
              "cutoff=40, treated='below', outcome='math_gain').fit().estimate))"
    ).strip().splitlines()[-1])
    assert abs(ui.chip_estimate(page, "design") - reference) < 6e-4
    expect(chip).to_have_attribute("data-status", "fresh")
    ui.assert_clean(page)


def test_without_seamline_the_front_end_explains(page, lab):
    name = ui.write_notebook(lab, "no_seamline.ipynb", [
        "import pandas as pd\nframe = pd.DataFrame({'x': [1.0, 2.0], 'y': [3.0, 4.0]})",
        "%%cutoff orphan\ndata: frame\nscore: x\ncutoff: 1.5\noutcome: y",
    ])
    ui.open_notebook(page, lab, name)
    chip = ui.chip(page, "orphan")
    expect(page.locator(".jp-Cell.seamline-design-cell")).to_have_count(1)
    expect(chip).to_contain_text("seamline is not loaded in this kernel", timeout=30_000)

    ui.open_designs_panel(page)
    expect(page.locator("#seamline-designs-panel .seamline-panel-state")).to_contain_text(
        "has not loaded seamline")
    page.locator(".jp-NotebookPanel-toolbar .seamline-insert-design-button").click()
    dialog = page.locator(".jp-Dialog")
    expect(dialog).to_contain_text("seamline is not loaded")
    ui.screenshot(page, "degrade-without-seamline")
    dialog.locator(".jp-Dialog-button", has_text="Ok").click()
    expect(dialog).to_have_count(0)

    # Loading seamline later connects the notebook without a page reload.
    page.locator(".jp-NotebookPanel .jp-CodeCell").first.locator(".jp-InputPrompt").click()
    page.keyboard.press("Escape")
    page.keyboard.press("a")
    page.keyboard.press("Enter")
    page.keyboard.insert_text("%load_ext seamline")
    ui.run_active_cell(page)
    expect(page.locator("#seamline-designs-panel .seamline-panel-state")).to_have_attribute(
        "data-state", "ready", timeout=30_000)
    item = page.locator("#seamline-designs-panel .seamline-design-item[data-name='orphan']")
    expect(item.locator(".seamline-status")).to_have_text("not run")
    expect(chip).to_contain_text("not run yet in this kernel")
    ui.assert_clean(page)
