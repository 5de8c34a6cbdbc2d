"""Execute every demo notebook headlessly, as ``make demo HEADLESS=1`` does, and check the outputs.

Each notebook runs top to bottom in a fresh kernel (nbclient, widget state stored). The saved
notebook must hold the live board (a widget view whose model carries the "seamline-board" class,
with Vega-Lite chart specs in its state) next to the static HTML fallback (with SVG charts), show no error output, stay under
2 MB, and convert to an HTML page that needs no network.
"""
from __future__ import annotations

import json
from pathlib import Path

import pytest

import nbformat
import nbclient  # noqa: F401  (required: a missing one fails the suite)
import nbconvert  # noqa: F401  (required: a missing one fails the suite)
import ipykernel  # noqa: F401  (required: a missing one fails the suite)

from seamline.notebook.run_demos import WIDGET_VIEW, demo_notebooks, execute_notebook, static_html_page  # noqa: E402

DEMO_DIR = Path(__file__).resolve().parents[2] / "demo_notebooks"
NOTEBOOKS = demo_notebooks(DEMO_DIR)
MAX_BYTES = 2_000_000
WIDGET_STATE = "application/vnd.jupyter.widget-state+json"
VEGA_LITE = "application/vnd.vegalite.v5+json"


def test_there_are_the_four_demo_scenarios():
    text = " ".join(p.read_text(encoding="utf-8") for p in NOTEBOOKS)
    assert len(NOTEBOOKS) >= 4
    for scenario in ("sharp_scenario", "fuzzy_scenario", "discrete_scenario", "cumulative_grants_scenario"):
        assert scenario in text, scenario
    assert "takeup:" in text          # the fuzzy demo declares take-up
    assert "cutoff: 30, 60" in text and "groups:" in text and "effect:" in text   # the two-threshold demo


def _outputs(nb):
    for cell in nb.cells:
        for output in cell.get("outputs", []):
            yield cell, output


def _check_demo_runs_without_errors(executed):
    _source, nb, _saved = executed
    for cell, output in _outputs(nb):
        assert output["output_type"] != "error", (cell.source[:80], output.get("evalue"))
        if output["output_type"] == "stream" and output["name"] == "stderr":
            assert "Traceback" not in output["text"] and "Error" not in output["text"], output["text"]


def _check_demo_is_labelled_invented_and_walks_through_the_steps(executed):
    source, nb, _saved = executed
    first = nb.cells[0]
    assert first.cell_type == "markdown" and "Invented data" in first.source
    code = "\n".join(c.source for c in nb.cells if c.cell_type == "code")
    prose = "\n".join(c.source for c in nb.cells if c.cell_type == "markdown")
    assert code.count("%%cutoff ") == 1
    assert ".set_option(" in code                                 # changing a setting
    assert ".export(" in code                                     # exporting a table
    for heading in ("Declare the design", "Read the panels", "Change a setting",
                    "Edit the data upstream", "Export a table", "Cautions"):
        assert heading in prose, (source.name, heading)


def _check_board_output_holds_widget_view_and_static_fallback(executed):
    _source, nb, _saved = executed
    boards = [o for _c, o in _outputs(nb) if WIDGET_VIEW in o.get("data", {})]
    assert len(boards) == 1
    data = boards[0]["data"]
    fallback = data["text/html"]
    assert "seamline-static" in fallback and fallback.count("<svg") >= 6
    assert "<script" not in fallback.lower()

    state = nb.metadata["widgets"][WIDGET_STATE]["state"]
    model = state[data[WIDGET_VIEW]["model_id"]]
    assert "seamline-board" in model["state"]["_dom_classes"]
    html_values = [m["state"].get("value", "") for m in state.values() if m["model_name"] == "HTMLModel"]
    assert any("seamline-header" in v for v in html_values)
    # The live view's charts are Vega-Lite specs with inline data in Output widgets, drawn by the
    # browser; the widget state holds no kernel-drawn SVG.
    specs = [o["data"][VEGA_LITE] for m in state.values() if m["model_name"] == "OutputModel"
             for o in m["state"].get("outputs", []) if VEGA_LITE in o.get("data", {})]
    assert len(specs) >= 6 and all("url" not in s.get("data", {}) for s in specs)
    assert sum(v.count("<svg") for v in html_values) == 0


def _check_board_follows_the_upstream_edit(executed):
    # The static fallback is refreshed after cells: it shows the board's final numbers, which the
    # notebook printed from the board after editing the data.
    _source, nb, _saved = executed
    boards = [o for _c, o in _outputs(nb) if WIDGET_VIEW in o.get("data", {})]
    fallback = boards[0]["data"]["text/html"]
    state = nb.metadata["widgets"][WIDGET_STATE]["state"]
    header = [m["state"]["value"] for m in state.values()
              if m["model_name"] == "HTMLModel" and "seamline-header" in m["state"].get("value", "")]
    headline = header[0].split('class="seamline-headline"')[1].split("</div>")[0]
    assert headline in fallback                                   # widget and fallback agree


def _check_saved_demo_is_small(executed):
    _source, _nb, saved = executed
    size = saved.stat().st_size
    assert size < MAX_BYTES, f"{saved.name} is {size / 1e6:.2f} MB"


def _check_html_copy_reads_offline(executed):
    source, nb, _saved = executed
    page = static_html_page(nb, title=source.stem)
    assert "seamline-static" in page and "<svg" in page
    assert "<script" not in page.lower()
    assert WIDGET_VIEW not in page and "cdn" not in page.lower()
    json.dumps(nb.metadata["widgets"])    # the stored widget state is plain JSON


@pytest.mark.parametrize("notebook", NOTEBOOKS, ids=[p.stem for p in NOTEBOOKS])
def test_demo_notebook(notebook, tmp_path):
    # One test per notebook, so each notebook runs once even when the suite is split across
    # workers (pytest-xdist); the checks below each say what failed.
    nb = execute_notebook(notebook, timeout=300)
    saved = tmp_path / notebook.name
    nbformat.write(nb, saved)
    executed = (notebook, nb, saved)
    _check_demo_runs_without_errors(executed)
    _check_demo_is_labelled_invented_and_walks_through_the_steps(executed)
    _check_board_output_holds_widget_view_and_static_fallback(executed)
    _check_board_follows_the_upstream_edit(executed)
    _check_saved_demo_is_small(executed)
    _check_html_copy_reads_offline(executed)
