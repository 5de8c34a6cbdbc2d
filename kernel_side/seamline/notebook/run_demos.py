"""Execute the demo notebooks headlessly and write executed copies plus static HTML pages.

Used by ``make demo HEADLESS=1`` and by the test suite::

    python -m seamline.notebook.run_demos                      # demo_notebooks/*.ipynb -> build/demos/
    python -m seamline.notebook.run_demos --output-dir out  a.ipynb b.ipynb

Each notebook runs in a fresh kernel (nbclient) with the widget state stored, as a saved notebook
would hold it. The HTML copy is made for reading offline: where an output carries both the live
widget and seamline's static rendition, the static ``text/html`` is shown (tables and inline SVG
charts), and no widget renderer is fetched from a CDN.
"""
from __future__ import annotations

import argparse
import copy
import re
import sys
import time
from collections.abc import Iterable, Sequence
from pathlib import Path

from ..errors import shown

__all__ = ["DEFAULT_SOURCE", "DEFAULT_OUTPUT", "demo_notebooks", "execute_notebook", "static_html_page",
           "run", "main"]

DEFAULT_SOURCE = Path("demo_notebooks")
DEFAULT_OUTPUT = Path("build") / "demos"
WIDGET_VIEW = "application/vnd.jupyter.widget-view+json"

# HTML shows seamline's static rendition ahead of the widget view (which needs a renderer from the
# internet); everything else keeps nbconvert's usual order.
_PRIORITY = ["text/html", "text/markdown", "image/svg+xml", "text/latex", "image/png", "image/jpeg",
             "text/plain", WIDGET_VIEW, "application/javascript"]


_SCRIPT = re.compile(r"<script\b[^>]*>.*?</script\s*>", re.DOTALL | re.IGNORECASE)


def demo_notebooks(folder: str | Path = DEFAULT_SOURCE) -> list[Path]:
    """The demo notebooks in ``folder`` (sorted; checkpoint copies excluded).

    Raises
    ------
    FileNotFoundError
        When the folder holds no notebook.
    """
    folder = Path(folder)
    found = sorted(p for p in folder.glob("*.ipynb") if ".ipynb_checkpoints" not in p.parts)
    if not found:
        raise FileNotFoundError(
            f"`folder` must contain demo notebooks (*.ipynb); got none in {shown(str(folder))}. "
            "Run from the repository root or pass --source.")
    return found


def execute_notebook(path: str | Path, *, timeout: int = 600, kernel_name: str = "python3"):
    """Run a notebook top to bottom in a fresh kernel and return the executed notebook.

    The kernel's working directory is the notebook's folder; widget state is stored in the
    notebook's metadata (``store_widget_state=True``). A cell that raises stops the run with
    ``nbclient.exceptions.CellExecutionError``.

    Parameters
    ----------
    path : path of the .ipynb file
    timeout : seconds allowed per cell
    kernel_name : Jupyter kernel to use

    Returns
    -------
    nbformat.NotebookNode
    """
    import nbformat
    from nbclient import NotebookClient

    path = Path(path)
    nb = nbformat.read(path, as_version=4)
    client = NotebookClient(nb, timeout=timeout, kernel_name=kernel_name,
                            resources={"metadata": {"path": str(path.parent.resolve())}},
                            store_widget_state=True)
    client.execute()
    return nb


def static_html_page(nb, *, title: str = "seamline demo") -> str:
    """A self-contained HTML page of an executed notebook that reads well offline.

    Outputs that hold seamline's static rendition show it instead of the live widget; the widget
    state is left out of the page and every ``<script>`` element is removed (nbconvert's template
    would fetch require.js, MathJax and Mermaid from a CDN), so the page loads nothing from the
    network and runs no code.

    Parameters
    ----------
    nb : nbformat.NotebookNode (executed)
    title : str
        The page title.

    Returns
    -------
    str
    """
    from nbconvert import HTMLExporter
    from traitlets.config import Config

    page = copy.deepcopy(nb)
    page.metadata.pop("widgets", None)
    for cell in page.cells:
        for output in cell.get("outputs", []):
            data = output.get("data", {})
            if WIDGET_VIEW in data and "text/html" in data:
                del data[WIDGET_VIEW]
    config = Config({"NbConvertBase": {"display_data_priority": _PRIORITY}})
    body, _resources = HTMLExporter(config=config).from_notebook_node(
        page, resources={"metadata": {"name": title}})
    return _SCRIPT.sub("", body)


def run(notebooks: Iterable[str | Path], output_dir: str | Path = DEFAULT_OUTPUT, *,
        timeout: int = 600, log=print) -> list[Path]:
    """Execute each notebook and write ``<name>.ipynb`` (executed) and ``<name>.html`` to ``output_dir``.

    Returns
    -------
    list of Path
        The files written.
    """
    import nbformat

    out = Path(output_dir)
    out.mkdir(parents=True, exist_ok=True)
    written: list[Path] = []
    for source in notebooks:
        source = Path(source)
        start = time.perf_counter()
        nb = execute_notebook(source, timeout=timeout)
        executed = out / source.name
        nbformat.write(nb, executed)
        page = out / (source.stem + ".html")
        page.write_text(static_html_page(nb, title=source.stem), encoding="utf-8")
        written += [executed, page]
        log(f"{source.name}: executed in {time.perf_counter() - start:.1f} s -> {executed} "
            f"({executed.stat().st_size / 1e6:.2f} MB), {page} ({page.stat().st_size / 1e6:.2f} MB)")
    return written


def main(argv: Sequence[str] | None = None) -> int:
    """Command-line entry point (``python -m seamline.notebook.run_demos``)."""
    parser = argparse.ArgumentParser(
        prog="python -m seamline.notebook.run_demos",
        description="Execute seamline's demo notebooks headlessly and write executed copies and HTML pages.")
    parser.add_argument("notebooks", nargs="*", help="notebooks to run (default: every demo)")
    parser.add_argument("--source", default=str(DEFAULT_SOURCE), help="folder of the demo notebooks")
    parser.add_argument("--output-dir", default=str(DEFAULT_OUTPUT), help="where to write the results")
    parser.add_argument("--timeout", type=int, default=600, help="seconds allowed per cell")
    args = parser.parse_args(argv)
    try:
        notebooks = [Path(p) for p in args.notebooks] or demo_notebooks(args.source)
        run(notebooks, args.output_dir, timeout=args.timeout)
    except FileNotFoundError as exc:
        print(exc, file=sys.stderr)
        return 2
    except Exception as exc:  # noqa: BLE001 - a failed demo is reported, with its cell, not a traceback dump
        print(f"a demo notebook failed: {type(exc).__name__}: {exc}", file=sys.stderr)
        return 1
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
