"""``pip install seamline`` alone gives a working ``%%cutoff`` cell (no extras).

The test builds the wheel from this source tree, installs it without extras into a fresh virtual
environment -- no ``--system-site-packages``, which would hide a missing dependency -- and runs a
demo notebook on a kernel of that environment (nbclient from the test environment drives it). It
takes minutes: the wheel build runs the extension's build and the install resolves every
dependency (pip's cache and the package index keep it short).
"""
from __future__ import annotations

import json
import os
import subprocess
import sys
import venv
from pathlib import Path

import pytest

import nbformat
import nbclient

pytestmark = pytest.mark.slow

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demo_notebooks" / "01_sharp_tutoring_grant.ipynb"


def _clean_env() -> dict[str, str]:
    # Without PYTHONPATH: the fresh environment must import its own installed copy of seamline.
    return {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "VIRTUAL_ENV", "PIP_USER")}


def _run(args, **kwargs) -> subprocess.CompletedProcess:
    result = subprocess.run([str(a) for a in args], capture_output=True, text=True, env=_clean_env(), **kwargs)
    assert result.returncode == 0, f"{args}\n{result.stdout[-3000:]}\n{result.stderr[-3000:]}"
    return result


@pytest.fixture(scope="module")
def plain_env(tmp_path_factory) -> Path:
    base = tmp_path_factory.mktemp("plain")
    _run([sys.executable, "-m", "pip", "wheel", ROOT, "--no-deps", "--quiet", "-w", base / "dist"], timeout=1500)
    wheel = next((base / "dist").glob("seamline-*.whl"))
    env_dir = base / "venv"
    venv.EnvBuilder(with_pip=True, system_site_packages=False).create(env_dir)
    python = env_dir / "bin" / "python"
    _run([python, "-m", "pip", "install", "--quiet", wheel], timeout=1500)
    return env_dir


def test_the_wheel_pulls_in_what_the_cell_needs_and_no_test_extras(plain_env):
    python = plain_env / "bin" / "python"
    probe = ("import importlib.util as u, json; print(json.dumps({m: u.find_spec(m) is not None for m in "
             "['seamline', 'ipywidgets', 'altair', 'vl_convert', 'IPython', 'ipykernel', 'docx', 'pytest', "
             "'statsmodels']}))")
    found = json.loads(_run([python, "-c", probe]).stdout)
    assert found == {"seamline": True, "ipywidgets": True, "altair": True, "vl_convert": True, "IPython": True,
                     "ipykernel": True, "docx": True, "pytest": False, "statsmodels": False}
    where = _run([python, "-c", "import seamline; print(seamline.__file__)"]).stdout.strip()
    assert where.startswith(str(plain_env)), where


def test_the_console_script_is_installed(plain_env, tmp_path):
    (tmp_path / "bad.txt").write_text("data: invented.csv\nscore: x\ncutoff: forty\noutcome: y\n", encoding="utf-8")
    result = subprocess.run([str(plain_env / "bin" / "seamline"), "report", "bad.txt", "--out", "out"],
                            capture_output=True, text=True, cwd=tmp_path, env=_clean_env(), timeout=300)
    assert result.returncode == 2
    assert "line 1: `data` must name an existing file" in result.stderr


def test_a_demo_notebook_runs_on_the_plain_install(plain_env, tmp_path, monkeypatch):
    # A kernel spec that starts the fresh environment's Python.
    spec_dir = tmp_path / "share" / "kernels" / "seamline-plain"
    spec_dir.mkdir(parents=True)
    (spec_dir / "kernel.json").write_text(json.dumps({
        "argv": [str(plain_env / "bin" / "python"), "-m", "ipykernel_launcher", "-f", "{connection_file}"],
        "display_name": "seamline (plain install)", "language": "python",
        "env": {"PYTHONPATH": ""},
    }), encoding="utf-8")
    monkeypatch.setenv("JUPYTER_PATH", str(tmp_path / "share"))
    monkeypatch.delenv("PYTHONPATH", raising=False)

    nb = nbformat.read(DEMO, as_version=4)
    nb.cells.insert(0, nbformat.v4.new_code_cell("import seamline; print(seamline.__file__)"))
    client = nbclient.NotebookClient(nb, kernel_name="seamline-plain", timeout=600, resources={
        "metadata": {"path": str(DEMO.parent)}})
    client.execute()

    where = "".join(o.get("text", "") for o in nb.cells[0].outputs).strip()
    assert where.startswith(str(plain_env)), where
    errors = [(c.source[:60], o.get("evalue")) for c in nb.cells if c.cell_type == "code"
              for o in c.get("outputs", []) if o["output_type"] == "error"]
    assert not errors
    boards = [o for c in nb.cells if c.cell_type == "code" for o in c.get("outputs", [])
              if "application/vnd.jupyter.widget-view+json" in o.get("data", {})]
    assert len(boards) == 1                                   # the board view, not an ImportError
    assert "seamline-static" in boards[0]["data"]["text/html"]
