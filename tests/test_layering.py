"""The one-way layers: core -> data -> estimate -> results -> export -> notebook.

Each module of a layer is imported in a fresh interpreter and the modules it pulled in are listed.
The package's own ``seamline/__init__.py`` is bypassed (a bare package object stands in for it),
so a module is judged by its own imports, not by what the public API happens to import. Modules
are discovered from the file system, so new ones are checked as soon as they exist.
"""
from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

PACKAGE_DIR = Path(__file__).resolve().parents[1] / "kernel_side" / "seamline"
LAYERS = ("core", "data", "estimate", "results", "export", "notebook")

# What each checked layer must not pull in, directly or through other modules.
FORBIDDEN_THIRD_PARTY = {
    "core": ("pandas", "ipywidgets", "altair", "IPython"),
    "export": ("ipywidgets", "altair"),
}

_PROBE = r"""
import importlib, json, sys, types
package = types.ModuleType("seamline")
package.__path__ = [sys.argv[1]]
sys.modules["seamline"] = package
importlib.import_module(sys.argv[2])
print(json.dumps(sorted(sys.modules)))
"""


def _modules_of(layer: str) -> list[str]:
    """Dotted names of the layer's package and every module below it, found on disk."""
    folder = PACKAGE_DIR / layer
    names = []
    if folder.is_dir():
        for path in sorted(folder.rglob("*.py")):
            parts = path.relative_to(PACKAGE_DIR).with_suffix("").parts
            if parts[-1] == "__init__":
                parts = parts[:-1]
            names.append(".".join(("seamline", *parts)))
    elif (PACKAGE_DIR / f"{layer}.py").is_file():
        names.append(f"seamline.{layer}")
    return names


def _imported_by(module: str) -> set[str]:
    result = subprocess.run(
        [sys.executable, "-c", _PROBE, str(PACKAGE_DIR), module],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert result.returncode == 0, f"importing {module} failed:\n{result.stderr}"
    return set(json.loads(result.stdout.strip().splitlines()[-1]))


CASES = [(layer, module) for layer in FORBIDDEN_THIRD_PARTY for module in _modules_of(layer)]


@pytest.mark.parametrize(("layer", "module"), CASES, ids=[m for _, m in CASES])
def test_layer_imports_stay_in_their_lane(layer, module):
    imported = _imported_by(module)
    tops = {name.split(".")[0] for name in imported}
    pulled = [pkg for pkg in FORBIDDEN_THIRD_PARTY[layer] if pkg in tops]
    assert not pulled, f"{module} (layer {layer}) imports {pulled}"
    # A layer may use the layers above it in LAYERS, never those below it.
    below = LAYERS[LAYERS.index(layer) + 1 :]
    reached = sorted(
        name
        for name in imported
        if name.startswith("seamline.") and name.split(".")[1] in below
    )
    assert not reached, f"{module} (layer {layer}) imports lower layers: {reached}"


def test_discovery_finds_the_layers_that_exist():
    # Guards the discovery itself: a layer folder on disk must yield at least its package.
    for layer in FORBIDDEN_THIRD_PARTY:
        if (PACKAGE_DIR / layer / "__init__.py").is_file():
            assert f"seamline.{layer}" in _modules_of(layer)
    assert "seamline.export.render" in _modules_of("export")
    assert "seamline.core.locpoly" in _modules_of("core")


def test_plain_import_defers_widgets_and_charts():
    # `import seamline` (and so `%load_ext seamline`) must stay fast: widget and chart packages
    # are imported on first use only (STYLE.md: optional packages are imported lazily).
    result = subprocess.run(
        [sys.executable, "-c", "import json, sys, seamline; print(json.dumps(sorted(sys.modules)))"],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert result.returncode == 0, result.stderr
    tops = {name.split(".")[0] for name in json.loads(result.stdout.strip().splitlines()[-1])}
    assert not tops & {"ipywidgets", "altair"}, sorted(tops & {"ipywidgets", "altair"})
