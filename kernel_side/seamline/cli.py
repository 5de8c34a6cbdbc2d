"""The command line: ``seamline report SPEC --out DIR`` (also ``python -m seamline report ...``).

SPEC is a text file in the ``key: value`` syntax of a ``%%cutoff`` cell (an optional first line
``%%cutoff NAME`` names the board); its ``data:`` names a CSV or Parquet file, read relative to
the spec file's folder. The report is the board a notebook would show, computed headlessly:

    DIR/report.html      the static board, the caution once, the methods paragraph
    DIR/tables/          every panel's table as LaTeX (.tex) and Markdown (.md), plus headline.*
    DIR/figures/         every chart as SVG and PDF (drawn offline by vl-convert)
    DIR/methods.txt      the methods paragraph
    DIR/replicate.py     a standalone script that rebuilds the numbers from the data file

Exit codes: 0 done; 2 a bad spec or data file (the message names the spec file's line); 1 the
main estimate could not be computed.
"""
from __future__ import annotations

import argparse
import datetime as _dt
import html
import re
import sys
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from .errors import DesignSpecError, SeamlineError, shown

__all__ = ["main", "write_report", "read_spec"]

DATA_VARIABLE = "report_data"   # the name the spec's data file is bound to while parsing
DATA_SUFFIXES = {".csv": "CSV", ".parquet": "Parquet", ".pq": "Parquet"}
_DATA_LINE = re.compile(r"^\s*data\s*:\s*(.*?)\s*$", re.IGNORECASE)
_MAGIC_LINE = re.compile(r"^\s*%%cutoff\b(.*)$")


class ReportError(Exception):
    """The report cannot be made; ``code`` is the exit code (2 for the input, 1 for the estimate)."""

    def __init__(self, message: str, code: int = 2):
        super().__init__(message)
        self.code = code


def _exact_floats(pd) -> dict:
    """read_csv options that read floats back bit for bit: pandas 3 does by default (and deprecates
    the option); pandas 2 needs the round-trip parser."""
    return {} if int(pd.__version__.split(".")[0]) >= 3 else {"float_precision": "round_trip"}


def _load_data(text: str, line: int, folder: Path):
    """The data file named on the spec's ``data:`` line, as a pandas DataFrame."""
    import pandas as pd

    name = text.strip().strip("'\"")
    path = Path(name) if Path(name).is_absolute() else folder / name
    suffix = path.suffix.lower()
    if suffix not in DATA_SUFFIXES:
        raise DesignSpecError(f"line {line}: `data` must name a CSV or Parquet file (.csv, .parquet); got "
                              f"{shown(name)}. Save the data as CSV or Parquet and name that file.")
    if not path.is_file():
        raise DesignSpecError(f"line {line}: `data` must name an existing file; got {shown(name)}, not found at "
                              f"{path}. Relative paths are read from the spec file's folder.")
    try:
        if suffix == ".csv":
            return pd.read_csv(path, **_exact_floats(pd))
        return pd.read_parquet(path)
    except Exception as exc:  # noqa: BLE001 - any reader failure is a bad data file for the user
        raise DesignSpecError(f"line {line}: `data` must be a readable {DATA_SUFFIXES[suffix]} file; got "
                              f"{shown(name)}, which failed to load ({type(exc).__name__}: {exc}). Check the "
                              "file.") from None


def read_spec(path: str | Path):
    """Parse a spec file into the board's declaration, with the data file loaded.

    Parameters
    ----------
    path : str or Path
        The spec file.

    Returns
    -------
    (ParsedSpec, Path)
        The parsed declaration (see ``seamline.notebook.magic.parse_spec``) and the data file.

    Raises
    ------
    DesignSpecError
        "line N: ..." counting the spec file's own lines.
    """
    from .notebook.magic import _strip_comment, parse_name, parse_spec   # the cell's own comment rule

    spec_path = Path(path)
    try:
        lines = spec_path.read_text(encoding="utf-8").splitlines()
    except (OSError, UnicodeDecodeError) as exc:
        raise DesignSpecError(f"`SPEC` must be a readable text file; got {shown(str(path))} ({exc}). "
                              "Check the path.") from None
    first = 0   # index of the first body line
    name = re.sub(r"\W", "_", spec_path.stem) or "report"
    name = name if name.isidentifier() else f"report_{name}"
    for i, text in enumerate(lines):
        stripped = _strip_comment(text).strip()
        if not stripped:
            continue
        match = _MAGIC_LINE.match(stripped)
        if match:
            try:
                name = parse_name(match.group(1))
            except DesignSpecError as exc:
                raise DesignSpecError(str(exc).replace("line 1:", f"line {i + 1}:", 1)) from None
            first = i + 1
        break
    body = list(lines[first:])
    data_path, namespace = None, {}
    for offset, text in enumerate(body):
        match = _DATA_LINE.match(_strip_comment(text))
        if match and match.group(1):
            line = first + offset + 1
            data = _load_data(match.group(1), line, spec_path.parent)
            data_path = (spec_path.parent / match.group(1).strip().strip("'\"")).resolve()
            namespace = {DATA_VARIABLE: data}
            body[offset] = f"data: {DATA_VARIABLE}"
            break
    if name == DATA_VARIABLE:
        name = "report"
    parsed = parse_spec("\n".join(body), namespace, name=name, first_line=first + 1)
    return parsed, data_path


# ---- writing the report ---------------------------------------------------------------------
def _page(board, spec_path: Path, data_path: Path, files: Sequence[str]) -> str:
    from . import __version__
    from .notebook.static import static_html

    esc = html.escape
    methods = board.methods_paragraph()
    links = "".join(f'<li><a href="{esc(f)}">{esc(f)}</a></li>' for f in files)
    rows = len(board.data)
    stamp = _dt.datetime.now().astimezone().isoformat(timespec="seconds")
    return (
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
        f"<title>seamline report: {esc(board.name)}</title>\n</head>\n"
        '<body style="max-width:1100px;margin:1.5em auto;padding:0 1em;font-family:Helvetica,Arial,sans-serif">\n'
        f"<h1 style=\"font-size:20px\">{esc(board.name)}</h1>\n"
        f"<p style=\"font-size:12px;color:#555\">Made by seamline {esc(__version__)} from {esc(spec_path.name)} "
        f"on {esc(stamp)}; data: {esc(str(data_path))} ({rows:,} rows).</p>\n"
        f"{static_html(board)}\n"          # the static board states the caution once
        f'<h2 style="font-size:16px">Methods</h2>\n<p class="seamline-methods">{esc(methods)}</p>\n'
        f'<h2 style="font-size:16px">Files</h2>\n<ul>{links}</ul>\n</body>\n</html>\n'
    )


def _write(path: Path, text: str | bytes) -> str:
    if isinstance(text, bytes):
        path.write_bytes(text)
    else:
        with open(path, "w", encoding="utf-8", newline="") as handle:
            handle.write(text)
    return path.name


def _tables(board, folder: Path) -> list[str]:
    """Every panel's table as LaTeX and Markdown, with reader labels, plus the headline table."""
    import pandas as pd

    from .export.labels import labelled_model
    from .export.paper import paper_table
    from .export.render import to_latex, to_markdown

    written = []
    headline = paper_table([board.fit], labels=[board.name])
    written += [_write(folder / "headline.tex", headline.to_latex(label="tab:headline")),
                _write(folder / "headline.md", headline.to_markdown())]
    names = {"fit": "estimate"}
    from .notebook.exports_designs import RESULT_EXPORTS
    for panel, result in board.results.items():
        if panel in ("bins", "first_stage_bins") or result is None or getattr(result, "applies", True) is False:
            continue    # binned means are chart data; a panel that does not apply has no table
        if panel in RESULT_EXPORTS:     # several cutoffs, subgroups, power: the board's own exports
            for what in RESULT_EXPORTS[panel]:
                if what == "decomposition" and getattr(result, "decomposition", None) is None:
                    continue
                written += [_write(folder / f"{what}.tex", board.export(what, "latex")),
                            _write(folder / f"{what}.md", board.export(what, "markdown"))]
            continue
        stem = names.get(panel, panel)
        if isinstance(result, pd.DataFrame):
            model = labelled_model(result, title=f"{board.name}: {panel.replace('_', ' ')}")
            latex, markdown = to_latex(model), to_markdown(model)
        else:
            latex, markdown = result.to_latex(), result.to_markdown()
        written += [_write(folder / f"{stem}.tex", latex), _write(folder / f"{stem}.md", markdown)]
    return written


def _figures(board, folder: Path, progress: Callable[[str], Any]) -> list[str]:
    """Every chart that applies as SVG and PDF (the PDF converted from the same SVG drawing)."""
    import vl_convert

    from .notebook import charts

    written = []
    for what in charts.CHART_NAMES:
        try:
            chart = charts.chart_for(board, what)
        except ValueError as exc:   # the panel does not apply or has no result
            progress(f"  skipped the {what} chart: {exc}")
            continue
        svg = charts.to_svg(chart)
        written += [_write(folder / f"{what}.svg", svg), _write(folder / f"{what}.pdf", vl_convert.svg_to_pdf(svg))]
    return written


def write_report(spec_path: str | Path, out: str | Path, *, progress: Callable[[str], Any] = print) -> Path:
    """Compute a board from a spec file and write its report folder.

    Parameters
    ----------
    spec_path : str or Path
        The spec file (``key: value`` lines, as in a ``%%cutoff`` cell; ``data:`` names a CSV or
        Parquet file).
    out : str or Path
        The report folder (created if needed; files in it are replaced).
    progress : callable, default print
        Called with one line of text per step.

    Returns
    -------
    Path
        The report folder.

    Raises
    ------
    ReportError
        With ``code`` 2 for a bad spec or data file, 1 when the main estimate fails.
    """
    from .notebook.magic import build_board
    from .export.script import board_script

    spec_path, out = Path(spec_path), Path(out)
    steps = 7
    progress(f"[1/{steps}] reading {spec_path}")
    try:
        parsed, data_path = read_spec(spec_path)
        progress(f"[2/{steps}] declaring board {parsed.name!r} on {data_path.name} ({len(parsed.data):,} rows)")
        board = build_board(parsed, {DATA_VARIABLE: parsed.data})
    except DesignSpecError as exc:
        raise ReportError(f"{spec_path}: {exc}", code=2) from None
    progress(f"[3/{steps}] computing {len(board.panels)} panels")
    board.refresh()
    if board.fit is None:
        raise ReportError(f"{spec_path}: the main estimate could not be computed: "
                          f"{board.errors.get('fit', 'unknown error')}", code=1)
    for panel, message in board.errors.items():
        progress(f"  panel {panel}: {message}")
    tables, figures = out / "tables", out / "figures"
    for folder in (out, tables, figures):
        folder.mkdir(parents=True, exist_ok=True)
    progress(f"[4/{steps}] writing tables to {tables}")
    files = [f"tables/{name}" for name in _tables(board, tables)]
    progress(f"[5/{steps}] drawing figures to {figures}")
    files += [f"figures/{name}" for name in _figures(board, figures, progress)]
    progress(f"[6/{steps}] writing {out / 'methods.txt'} and {out / 'replicate.py'}")
    files.append(_write(out / "methods.txt", board.methods_paragraph() + "\n"))
    board_script(board, out / "replicate.py", data_path=data_path)
    files.append("replicate.py")
    progress(f"[7/{steps}] writing {out / 'report.html'}")
    _write(out / "report.html", _page(board, spec_path, data_path, files))
    board.close()
    progress(f"done: {out}")
    return out


# ---- entry point -----------------------------------------------------------------------------
def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="seamline", description="seamline: cutoff-design analysis.")
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    report = commands.add_parser("report", help="compute a board from a spec file and write its report",
                                 description=__doc__.split("\n\n")[1])
    report.add_argument("spec", metavar="SPEC", help="spec file: `key: value` lines as in a %%%%cutoff cell")
    report.add_argument("--out", metavar="DIR", required=True, help="report folder (created if needed)")
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit code (the console script exits with it)."""
    args = _parser().parse_args(argv)
    if args.command == "report":
        try:
            write_report(args.spec, args.out, progress=lambda line: print(line, flush=True))
        except ReportError as exc:
            print(f"seamline report: {exc}", file=sys.stderr)
            return exc.code
        except SeamlineError as exc:   # an input the spec's checks let through
            print(f"seamline report: {args.spec}: {exc}", file=sys.stderr)
            return 2
    return 0
