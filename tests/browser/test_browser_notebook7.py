"""Scenario (issue 10): the extension in Jupyter Notebook 7, not only JupyterLab.

Notebook 7 is built from JupyterLab's components and loads the same prebuilt extension. A demo
notebook opened there and run from the Run menu must show the live board, and the ``%%cutoff``
cell its marker and a fresh status chip, with no request leaving 127.0.0.1. The server is our own:
127.0.0.1, a random token, configuration and runtime files in a temporary folder, stopped by its
PID.
"""
from __future__ import annotations

import json
import os
import re
import secrets
import shutil
import signal
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import pytest

import playwright.sync_api  # noqa: F401  (a required test dependency: missing, the suite fails)

from playwright.sync_api import TimeoutError as PlaywrightTimeout, expect  # noqa: E402

import lab_ui as ui  # noqa: E402

REPO = Path(__file__).resolve().parents[2]
DEMO = "01_sharp_tutoring_grant.ipynb"
START_TIMEOUT_S = 120


def _port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def _up(base: str, token: str) -> bool:
    try:
        with urllib.request.urlopen(f"{base}/api/status?token={token}", timeout=1) as response:
            return response.status == 200
    except OSError:
        return False


@pytest.fixture(scope="module")
def notebook7(tmp_path_factory):
    """A Notebook 7 server of ours on 127.0.0.1; yields (base URL, token)."""
    try:
        import notebook
    except ImportError:
        if os.environ.get("CI"):
            pytest.fail("the `notebook` package (Notebook 7) is not installed; run `make venv`")
        pytest.skip("the `notebook` package (Notebook 7) is not installed; run `make venv`")
    if int(notebook.__version__.split(".")[0]) < 7:
        pytest.skip(f"Notebook {notebook.__version__} is not Notebook 7")
    root = tmp_path_factory.mktemp("notebook7")
    folder = root / "notebooks"
    folder.mkdir()
    shutil.copy(REPO / "demo_notebooks" / DEMO, folder / DEMO)
    token, port = secrets.token_hex(16), _port()
    base = f"http://127.0.0.1:{port}"
    env = dict(os.environ, JUPYTER_CONFIG_DIR=str(root / "config"), JUPYTER_RUNTIME_DIR=str(root / "runtime"),
               JUPYTERLAB_SETTINGS_DIR=str(root / "user-settings"),
               JUPYTERLAB_WORKSPACES_DIR=str(root / "workspaces"), IPYTHONDIR=str(root / "ipython"))
    command = [sys.executable, "-m", "notebook", "--no-browser", f"--port={port}",
               f"--IdentityProvider.token={token}", "--ServerApp.ip=127.0.0.1", "--allow-root",
               f"--ServerApp.root_dir={folder}"]
    # The kernel dialog: loaded, Notebook 7 raised it again and again over the Run menu (seen in full
    # runs, even with the notebook's session started beforehand through the REST API). With the
    # preferred kernel started without asking, as a user who ticked "Always start the preferred
    # kernel" has it (a user setting: Notebook 7 reads no lab overrides file), there is no dialog.
    tracker = root / "user-settings" / "@jupyterlab" / "notebook-extension"
    tracker.mkdir(parents=True)
    (tracker / "tracker.jupyterlab-settings").write_text(json.dumps({"autoStartDefaultKernel": True}))
    log = root / "notebook.log"
    with open(log, "w") as handle:
        process = subprocess.Popen(command, cwd=folder, env=env, stdout=handle, stderr=subprocess.STDOUT)
    started = time.monotonic()
    try:
        while not _up(base, token):
            if process.poll() is not None or time.monotonic() - started > START_TIMEOUT_S:
                raise RuntimeError(f"jupyter notebook did not start:\n{log.read_text()[-3000:]}")
            time.sleep(0.2)
        yield base, token
    finally:
        process.send_signal(signal.SIGTERM)   # our own server, by its PID
        try:
            process.wait(timeout=30)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait(timeout=10)


def _answer_dialogs(page, seen: list[str]) -> None:
    """Accept a dialog the server raised while the machine was loaded (seen once in a full run, with
    the Run menu behind it), keeping its text for the failure message: the board checks below still
    decide the test."""
    dialogs = page.locator(".jp-Dialog")
    for _ in range(3):
        if dialogs.count() == 0:
            return
        seen.append(dialogs.first.inner_text(timeout=5_000).strip()[:300])
        accept = dialogs.first.locator(".jp-Dialog-button.jp-mod-accept")
        (accept.first if accept.count() else dialogs.first.locator(".jp-Dialog-button").last).click()
        page.wait_for_timeout(500)


def _click_past_dialogs(page, target, seen: list[str]) -> None:
    """Click ``target``; a dialog raised late (after ``_answer_dialogs`` looked) covers the menu and
    swallows the click (seen three times in loaded full runs), and on a cold first start the menu can
    take long to answer, so answer any dialog and click again, for about two minutes in all."""
    for attempt in range(4):
        try:
            target.click(timeout=30_000)
            return
        except PlaywrightTimeout as error:
            if attempt == 3:
                raise AssertionError(f"could not click {target}; dialogs answered: {seen}") from error
            _answer_dialogs(page, seen)


def test_demo_board_runs_in_notebook_7(browser, notebook7):
    base, token = notebook7
    context = browser.new_context(viewport={"width": 1400, "height": 1000})
    page = context.new_page()
    page_errors, outside = [], []
    page.on("pageerror", lambda e: page_errors.append(str(e)))
    page.on("request", lambda r: outside.append(r.url) if r.url.startswith("http")
            and not r.url.startswith("http://127.0.0.1") else None)
    try:
        page.goto(f"{base}/notebooks/{DEMO}?token={token}")
        expect(page.locator(".jp-NotebookPanel").first).to_be_visible(timeout=60_000)
        expect(page.locator(ui.IDLE).first).to_be_attached(timeout=90_000)
        board = page.locator(".seamline-board").first
        # Run All can be swallowed while Notebook 7 is still connecting its kernel (seen once in a full
        # run: no cell started); ask again, at most three times, before judging the board.
        dialogs: list[str] = []
        for attempt in range(3):
            _answer_dialogs(page, dialogs)
            _click_past_dialogs(page, page.locator(".lm-MenuBar-itemLabel", has_text=re.compile(r"^Run$")), dialogs)
            _click_past_dialogs(page, page.locator(".lm-Menu-itemLabel", has_text=re.compile(r"^Run All Cells$")),
                                dialogs)
            try:
                expect(board).to_be_attached(timeout=ui.RUN_TIMEOUT_MS // 3)
                break
            except AssertionError:
                if attempt == 2:
                    raise AssertionError(f"no board after three Run All; dialogs answered: {dialogs}") from None
                ui.wait_idle(page)
        expect(board.locator(".seamline-headline")).to_contain_text("Estimate", timeout=60_000)
        ui.wait_idle(page)
        design = page.locator(".jp-Cell.seamline-design-cell")
        assert design.count() == 1
        expect(design.locator(".seamline-chip")).to_have_attribute("data-status", "fresh", timeout=60_000)
        tracebacks = page.locator(".jp-OutputArea-output[data-mime-type='application/vnd.jupyter.stderr']",
                                  has_text="Traceback")
        assert tracebacks.count() == 0, tracebacks.first.text_content()
        board.scroll_into_view_if_needed()
        ui.screenshot(page, "notebook7-demo")
        # Notebook 7 itself logs an unrelated page error on load; none may come from seamline.
        assert not [e for e in page_errors if "seamline" in e.lower()], page_errors
        assert outside == [], outside
    finally:
        context.close()
