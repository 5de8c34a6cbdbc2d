"""What a user does in JupyterLab, as Playwright steps (selectors tested on JupyterLab 4.6)."""
from __future__ import annotations

import json
import re
import time
from pathlib import Path

import nbformat
from playwright.sync_api import Page, expect

ARTIFACTS = Path(__file__).resolve().parents[1] / "artifacts" / "browser"
RUN_TIMEOUT_MS = 240_000
IDLE = ".jp-Notebook-ExecutionIndicator[data-status='idle']"
# The status bar names the kernel once one is connected ("No Kernel | Initializing" before).
KERNEL_IDLE = re.compile(r"\(ipykernel\) \| Idle")
NUMBER = re.compile(r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?")


def write_notebook(lab, name: str, cells: list[str | tuple[str, str]]) -> str:
    """Write a notebook into the server's folder; a cell is code, or ("markdown", text)."""
    notebook = nbformat.v4.new_notebook()
    notebook.metadata["kernelspec"] = {"name": "python3", "display_name": "Python 3",
                                       "language": "python"}
    for cell in cells:
        if isinstance(cell, tuple):
            notebook.cells.append(nbformat.v4.new_markdown_cell(cell[1]))
        else:
            notebook.cells.append(nbformat.v4.new_code_cell(cell))
    nbformat.write(notebook, lab.notebooks / name)
    return name


def open_notebook(page: Page, lab, name: str) -> None:
    """Open a notebook in a fresh workspace and wait until its kernel is idle."""
    page.goto(lab.url(f"/lab/tree/{name}", reset=""))
    expect(page.locator(".jp-NotebookPanel").first).to_be_visible(timeout=60_000)
    expect(page.locator(".jp-StatusBar-TextItem", has_text=KERNEL_IDLE).first).to_be_visible(
        timeout=90_000)
    expect(page.locator(IDLE).first).to_be_attached(timeout=90_000)


def run_all(page: Page) -> None:
    """Run > Run All Cells, then wait until every code cell has run and the kernel is idle."""
    page.locator(".lm-MenuBar-itemLabel", has_text=re.compile(r"^Run$")).click()
    page.locator(".lm-Menu-itemLabel", has_text=re.compile(r"^Run All Cells$")).click()
    wait_all_ran(page)


def wait_all_ran(page: Page, timeout_ms: int = RUN_TIMEOUT_MS) -> None:
    """Every code cell shows an execution count ([n]) and the kernel is idle."""
    page.wait_for_function(
        """() => {
            const prompts = [...document.querySelectorAll(
                '.jp-NotebookPanel:not(.lm-mod-hidden) .jp-CodeCell .jp-InputPrompt')];
            return prompts.length > 0 && prompts.every(p => /\\[\\d+\\]/.test(p.textContent));
        }""",
        timeout=timeout_ms,
    )
    expect(page.locator(IDLE).first).to_be_attached(timeout=timeout_ms)


def wait_idle(page: Page, timeout_ms: int = RUN_TIMEOUT_MS) -> None:
    """The kernel has been idle for a moment (no cell or widget message being handled)."""
    deadline = time.monotonic() + timeout_ms / 1000
    while time.monotonic() < deadline:
        expect(page.locator(IDLE).first).to_be_attached(timeout=timeout_ms)
        page.wait_for_timeout(400)
        if page.locator(IDLE).count():
            return
    raise AssertionError("the kernel did not settle")


def add_cell_at_end(page: Page, source: str) -> None:
    """Type a new code cell below the last one (like a user, in the editor)."""
    last = page.locator(".jp-NotebookPanel .jp-Cell").last
    last.scroll_into_view_if_needed()
    last.locator(".jp-InputPrompt").click()
    page.keyboard.press("Escape")
    page.keyboard.press("b")
    page.keyboard.press("Enter")
    # CodeMirror auto-indents and closes brackets: paste-like input keeps the text exact.
    page.keyboard.insert_text(source)


def run_active_cell(page: Page) -> None:
    """Shift+Enter on the active cell and wait for the kernel to finish."""
    page.keyboard.press("Shift+Enter")
    page.wait_for_timeout(300)
    wait_idle(page)


def run_code(page: Page, source: str) -> str:
    """Add a cell at the end, run it, and return its plain-text output."""
    add_cell_at_end(page, source)
    before = page.locator(".jp-NotebookPanel .jp-CodeCell").count()
    run_active_cell(page)
    cell = page.locator(".jp-NotebookPanel .jp-CodeCell").nth(before - 1)
    expect(cell.locator(".jp-InputPrompt")).to_have_text(re.compile(r"\[\d+\]"), timeout=60_000)
    return cell.locator(".jp-OutputArea").text_content()


def design_cell(page: Page, name: str):
    """The cell declaring ``%%cutoff name`` (it carries the extension's marker class)."""
    return page.locator(".jp-Cell.seamline-design-cell").filter(
        has=page.locator(f".seamline-chip[data-name='{name}']"))


def chip(page: Page, name: str):
    return page.locator(f".seamline-chip[data-name='{name}']")


def wait_chip(page: Page, name: str, status: str = "fresh", timeout_ms: int = 120_000):
    locator = chip(page, name)
    expect(locator).to_have_attribute("data-status", status, timeout=timeout_ms)
    return locator


def chip_estimate(page: Page, name: str) -> float:
    text = chip(page, name).locator(".seamline-chip-estimate").text_content()
    return float(NUMBER.search(text).group())


def open_designs_panel(page: Page) -> None:
    """Show the Designs side panel (through the command palette, as a user would)."""
    if page.locator("#seamline-designs-panel:visible").count():
        return
    page.keyboard.press("Control+Shift+c")
    palette = page.locator(".lm-CommandPalette-input")
    expect(palette).to_be_visible(timeout=10_000)
    palette.fill("Show Cutoff Designs")
    page.locator(".lm-CommandPalette-item", has_text="Show Cutoff Designs").first.click()
    expect(page.locator("#seamline-designs-panel")).to_be_visible(timeout=10_000)


def save_notebook(page: Page, lab, name: str) -> dict:
    """Save with Ctrl+S and return the notebook as saved on disk."""
    path = Path(lab.notebooks) / name
    before = path.stat().st_mtime_ns
    page.locator(".jp-NotebookPanel .jp-Cell").first.locator(".jp-InputPrompt").click()
    page.keyboard.press("Escape")
    page.keyboard.press("Control+s")
    deadline = time.monotonic() + 30
    while path.stat().st_mtime_ns == before and time.monotonic() < deadline:
        time.sleep(0.2)
    assert path.stat().st_mtime_ns != before, f"{name} was not saved"
    # The server may still be writing the file (an empty or partial read on a busy machine): read
    # until the text is a whole JSON document.
    deadline = time.monotonic() + 30
    while True:
        time.sleep(0.3)
        try:
            return json.loads(path.read_text())
        except json.JSONDecodeError:
            if time.monotonic() > deadline:
                raise


def screenshot(page: Page, name: str) -> Path:
    """Save a screenshot under tests/artifacts/browser/ and return its path."""
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    path = ARTIFACTS / f"{name}.png"
    page.wait_for_timeout(300)
    page.screenshot(path=str(path))
    return path


def assert_clean(page: Page) -> None:
    """No request left 127.0.0.1, no dialog opened, no uncaught page error."""
    record = page.record
    assert record.outside_requests == [], f"requests left 127.0.0.1: {record.outside_requests[:5]}"
    assert record.dialogs == [], f"dialogs fired: {record.dialogs}"
    assert record.page_errors == [], f"page errors: {record.page_errors[:5]}"
