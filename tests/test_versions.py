"""The Python package and the JupyterLab extension carry one version, written in one place.

extension/package.json holds it; hatch reads it from there (hatch-nodejs-version) for the wheel's
metadata, and the wheel ships the prebuilt extension built from the same package.json.
"""
from __future__ import annotations

import importlib.metadata
import json
import re
import subprocess
import sys
import tomllib
from pathlib import Path

import seamline

REPO = Path(__file__).resolve().parents[1]
PACKAGE_JSON = json.loads((REPO / "extension" / "package.json").read_text())
LABEXTENSION = Path(sys.prefix) / "share" / "jupyter" / "labextensions" / "seamline"


def test_version_is_written_only_in_package_json():
    project = tomllib.loads((REPO / "pyproject.toml").read_text())
    assert "version" not in project["project"]
    assert "version" in project["project"]["dynamic"]
    assert project["tool"]["hatch"]["version"] == {"source": "nodejs",
                                                   "path": "extension/package.json"}


def test_python_and_npm_versions_agree():
    npm = PACKAGE_JSON["version"]
    assert re.fullmatch(r"\d+\.\d+\.\d+", npm), npm  # plain versions read the same in both
    assert importlib.metadata.version("seamline") == npm
    assert seamline.__version__ == npm


def test_installed_labextension_matches_the_source():
    built = json.loads((LABEXTENSION / "package.json").read_text())
    assert built["name"] == PACKAGE_JSON["name"] == "seamline"
    assert built["version"] == PACKAGE_JSON["version"]
    assert (LABEXTENSION / "static" / "style.js").exists()
    assert seamline._jupyter_labextension_paths() == [{"src": "labextension", "dest": "seamline"}]


def test_jupyter_lists_the_extension_enabled():
    result = subprocess.run([sys.executable, "-m", "jupyter", "labextension", "list"],
                            capture_output=True, text=True, timeout=120, check=True)
    listing = re.sub(r"\x1b\[[0-9;]*m", "", result.stdout + result.stderr)
    assert re.search(rf"seamline v{re.escape(PACKAGE_JSON['version'])} enabled\s+OK", listing), \
        listing
