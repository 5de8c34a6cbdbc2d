"""Fixtures for the real-browser tests: our own JupyterLab server and Debian's chromium.

The server listens on 127.0.0.1 only, with a random token, and keeps its configuration, runtime
files, settings and workspaces in a temporary folder; it is stopped by its own PID afterwards.
The browser is Debian's ``/usr/bin/chromium`` driven by Python Playwright (never a browser
download). Every page records requests that leave 127.0.0.1, dialogs (``alert`` and friends) and
page errors, so a test can assert none happened.

All browser tests run in one xdist group so that a single server and a single browser serve them
while the other worker runs the rest of the suite (``make test`` passes ``--dist loadgroup``).
"""
from __future__ import annotations

import json
import os
import secrets
import shutil
import signal
import socket
import subprocess
import sys
import time
import urllib.parse
import urllib.request
from dataclasses import dataclass, field
from pathlib import Path

import pytest

CHROMIUM = "/usr/bin/chromium"
# Flags from ../shared/BROWSER.md: headless as root, and no background traffic to the internet.
CHROMIUM_ARGS = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync",
]
REPO = Path(__file__).resolve().parents[2]
ARTIFACTS = REPO / "tests" / "artifacts" / "browser"
LAB_START_TIMEOUT_S = 120


def _unavailable(reason: str) -> None:
    """Fail in CI (where `make test` installs everything), skip on a partial local set-up."""
    if os.environ.get("CI"):
        pytest.fail(reason)
    pytest.skip(reason)


def pytest_configure(config):
    config.addinivalue_line("markers", "browser: drives JupyterLab in a real browser")


def pytest_collection_modifyitems(items):
    for item in items:
        if Path(str(item.fspath)).parent == Path(__file__).parent:
            item.add_marker(pytest.mark.xdist_group("browser"))
            item.add_marker(pytest.mark.browser)


@dataclass
class Lab:
    """A running JupyterLab server of ours."""

    base: str
    token: str
    notebooks: Path
    process: subprocess.Popen
    log: Path

    def url(self, path: str, **query: str) -> str:
        params = urllib.parse.urlencode({"token": self.token, **query})
        return f"{self.base}{path}?{params}"

    def api(self, method: str, path: str):
        request = urllib.request.Request(self.url(path), method=method)
        with urllib.request.urlopen(request, timeout=10) as response:
            body = response.read()
            return json.loads(body) if body else None

    def shutdown_kernels(self) -> None:
        for kernel in self.api("GET", "/api/kernels") or []:
            try:
                self.api("DELETE", f"/api/kernels/{kernel['id']}")
            except OSError:
                pass


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def _status_ok(base: str, token: str) -> bool:
    try:
        with urllib.request.urlopen(f"{base}/api/status?token={token}", timeout=1) as response:
            return response.status == 200
    except OSError:
        return False


@pytest.fixture(scope="session")
def lab(tmp_path_factory) -> Lab:
    """Start JupyterLab on 127.0.0.1 with a token, in folders of its own; stop it afterwards."""
    try:
        import jupyterlab  # noqa: F401
    except ImportError:
        _unavailable("jupyterlab is not installed; run `make venv`")
    # JupyterLab takes the first seamline labextension on its data path; JUPYTER_PATH comes first,
    # so a fresh build can be tested without reinstalling (DEVELOPERS.md, "Working on the front end").
    from jupyter_core.paths import jupyter_path
    found = [Path(d) / "seamline" / "package.json" for d in jupyter_path("labextensions")]
    found = [p for p in found if p.exists()]
    if not found:
        _unavailable("the seamline labextension is not installed on the Jupyter data path; run `make venv`")
    print(f"seamline labextension used by the browser tests: {found[0].parent}", file=sys.stderr)
    root = tmp_path_factory.mktemp("lab")
    notebooks = root / "notebooks"
    notebooks.mkdir()
    for demo in sorted((REPO / "demo_notebooks").glob("*.ipynb")):
        shutil.copy(demo, notebooks / demo.name)
    settings = root / "app-settings"
    settings.mkdir()
    # No news or update toasts over the notebook (they would also try to reach the internet).
    (settings / "overrides.json").write_text(json.dumps({
        "@jupyterlab/apputils-extension:notification": {
            "fetchNews": "false", "checkForUpdates": False},
    }))
    token = secrets.token_hex(16)
    port = _free_port()
    base = f"http://127.0.0.1:{port}"
    env = dict(
        os.environ,
        JUPYTER_CONFIG_DIR=str(root / "config"),
        JUPYTER_RUNTIME_DIR=str(root / "runtime"),
        JUPYTERLAB_SETTINGS_DIR=str(root / "user-settings"),
        JUPYTERLAB_WORKSPACES_DIR=str(root / "workspaces"),
        IPYTHONDIR=str(root / "ipython"),
        MPLBACKEND="agg",
    )
    command = [
        sys.executable, "-m", "jupyterlab", "--no-browser", f"--port={port}",
        f"--IdentityProvider.token={token}", "--ServerApp.ip=127.0.0.1", "--allow-root",
        f"--ServerApp.root_dir={notebooks}", f"--LabApp.workspaces_dir={root / 'workspaces'}",
        f"--LabApp.app_settings_dir={settings}",
        "--LabApp.news_url=None",
        "--LabApp.check_for_updates_class=jupyterlab.NeverCheckForUpdate",
    ]
    log = root / "lab.log"
    started = time.monotonic()
    with open(log, "w") as log_file:
        process = subprocess.Popen(command, cwd=notebooks, env=env, stdout=log_file,
                                   stderr=subprocess.STDOUT)
    server = Lab(base=base, token=token, notebooks=notebooks, process=process, log=log)
    try:
        while not _status_ok(base, token):
            if process.poll() is not None or time.monotonic() - started > LAB_START_TIMEOUT_S:
                raise RuntimeError(f"jupyter lab did not start:\n{log.read_text()[-3000:]}")
            time.sleep(0.2)
        yield server
    finally:
        try:
            if process.poll() is None:
                server.shutdown_kernels()
        finally:
            process.send_signal(signal.SIGTERM)  # our own server, by its PID
            try:
                process.wait(timeout=30)
            except subprocess.TimeoutExpired:
                process.kill()
                process.wait(timeout=10)


@pytest.fixture(scope="session")
def browser():
    """Debian's chromium through Playwright (installed by `make test` when missing)."""
    if not os.path.exists(CHROMIUM):
        _unavailable(f"{CHROMIUM} is missing; `make test` installs it with apt-get")
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        _unavailable("playwright is not installed; run `make venv`")
    with sync_playwright() as playwright:
        chromium = playwright.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS)
        try:
            yield chromium
        finally:
            chromium.close()


@dataclass
class PageRecord:
    """What happened on a page that a test may want to rule out."""

    outside_requests: list[str] = field(default_factory=list)
    dialogs: list[str] = field(default_factory=list)
    page_errors: list[str] = field(default_factory=list)
    console: list[str] = field(default_factory=list)


def _leaves_loopback(url: str) -> bool:
    parsed = urllib.parse.urlparse(url)
    if parsed.scheme in ("data", "blob", "about", "chrome-extension"):
        return False
    return parsed.hostname != "127.0.0.1"


@pytest.fixture
def page(browser, lab, request):
    """A fresh browser context and page; records outside requests, dialogs and page errors."""
    (ARTIFACTS / f"FAILED-{request.node.name}.png").unlink(missing_ok=True)
    context = browser.new_context(viewport={"width": 1500, "height": 1000})
    context.grant_permissions(["clipboard-read", "clipboard-write"], origin=lab.base)
    new_page = context.new_page()
    record = PageRecord()
    new_page.on("request", lambda r: record.outside_requests.append(r.url)
                if _leaves_loopback(r.url) else None)

    def on_dialog(dialog):
        record.dialogs.append(f"{dialog.type}: {dialog.message}")
        dialog.dismiss()

    new_page.on("dialog", on_dialog)
    new_page.on("pageerror", lambda e: record.page_errors.append(str(e)))
    new_page.on("console", lambda m: record.console.append(f"{m.type}: {m.text}"))
    new_page.record = record
    yield new_page
    if getattr(request.node, "rep_call", None) is not None and request.node.rep_call.failed:
        ARTIFACTS.mkdir(parents=True, exist_ok=True)
        try:
            new_page.screenshot(path=str(ARTIFACTS / f"FAILED-{request.node.name}.png"))
        except Exception:  # noqa: BLE001 - a failed screenshot must not hide the test failure
            pass
    context.close()
    lab.shutdown_kernels()


@pytest.hookimpl(hookwrapper=True)
def pytest_runtest_makereport(item, call):
    outcome = yield
    report = outcome.get_result()
    setattr(item, f"rep_{report.when}", report)
