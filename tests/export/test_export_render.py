"""Snapshot and property tests of the four table renderers.

Snapshots were written by hand-checking the rendered output of the fixed model in conftest.py;
a change to any renderer's output must update them on purpose. The shape checks (balanced LaTeX
environments, escaping, number round trips through pandas, HTML text through the standard
library's HTML parser) need no snapshot.
"""
from __future__ import annotations

import io
import math
import re
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest

from seamline.export import (
    TableModel,
    from_dataframe,
    latex_escape,
    markdown_escape,
    to_csv,
    to_html,
    to_latex,
    to_markdown,
)

LATEX_SNAPSHOT = r"""\begin{table}[htbp]
\centering
\caption{Invented estimates: tutoring \& 50\% take-up}
\label{tab:invented}
\begin{tabular}{lrrrr}
\toprule
Estimator & Estimate & Std. error & N used & 95\% interval \\
\midrule
Conventional & 3.142 & 0.500 & 1234 & [2.10, 4.20] \\
Robust\_bias-corrected & $-$2.718 &  & 987 & [$-$3.00, 0.00] \\
\bottomrule
\end{tabular}
\par\smallskip{\footnotesize\raggedright
Invented numbers.\par
Bandwidth h = 5 (\$ units).\par
}
\end{table}
"""

MARKDOWN_SNAPSHOT = r"""**Invented estimates: tutoring & 50% take-up**

| Estimator | Estimate | Std. error | N used | 95% interval |
| :--- | ---: | ---: | ---: | ---: |
| Conventional | 3.142 | 0.500 | 1234 | [2.10, 4.20] |
| Robust\_bias-corrected | -2.718 |  | 987 | [-3.00, 0.00] |

Invented numbers.

Bandwidth h = 5 (\$ units).
"""

_TH = "border-bottom:1px solid currentColor;padding:0.2em 0.6em;font-weight:bold"
_TD = "padding:0.2em 0.6em"
_NOTE = "text-align:left;font-size:85%;padding:0.3em 0.6em 0 0.6em"
HTML_SNAPSHOT = (
    '<table class="seamline-table" style="border-collapse:collapse;'
    'border-top:2px solid currentColor;margin:0.5em 0">\n'
    '<caption style="caption-side:top;text-align:left;font-weight:bold;padding:0.25em 0">'
    "Invented estimates: tutoring &amp; 50% take-up</caption>\n"
    "<thead>\n"
    f'<tr><th style="{_TH};text-align:left">Estimator</th>'
    f'<th style="{_TH};text-align:right">Estimate</th>'
    f'<th style="{_TH};text-align:right">Std. error</th>'
    f'<th style="{_TH};text-align:right">N used</th>'
    f'<th style="{_TH};text-align:right">95% interval</th></tr>\n'
    "</thead>\n"
    '<tbody style="border-bottom:2px solid currentColor">\n'
    f'<tr><td style="{_TD};text-align:left">Conventional</td>'
    f'<td style="{_TD};text-align:right">3.142</td>'
    f'<td style="{_TD};text-align:right">0.500</td>'
    f'<td style="{_TD};text-align:right">1234</td>'
    f'<td style="{_TD};text-align:right">[2.10, 4.20]</td></tr>\n'
    f'<tr><td style="{_TD};text-align:left">Robust_bias-corrected</td>'
    f'<td style="{_TD};text-align:right">-2.718</td>'
    f'<td style="{_TD};text-align:right"></td>'
    f'<td style="{_TD};text-align:right">987</td>'
    f'<td style="{_TD};text-align:right">[-3.00, 0.00]</td></tr>\n'
    "</tbody>\n"
    "<tfoot>\n"
    f'<tr><td colspan="5" style="{_NOTE}">Invented numbers.</td></tr>\n'
    f'<tr><td colspan="5" style="{_NOTE}">Bandwidth h = 5 ($ units).</td></tr>\n'
    "</tfoot>\n"
    "</table>\n"
)

CSV_SNAPSHOT = (
    "Estimator,Estimate,Std. error,N used,95% interval\n"
    'Conventional,3.14159265,0.5,1234,"[2.1, 4.2]"\n'
    'Robust_bias-corrected,-2.71828,,987,"[-3.0, -1e-05]"\n'
)

SPECIALS = "&%$#_{}~^\\"


# ------------------------------------------------------------------------------------------
# snapshots
# ------------------------------------------------------------------------------------------


def test_latex_snapshot(small_model):
    assert to_latex(small_model) == LATEX_SNAPSHOT


def test_markdown_snapshot(small_model):
    assert to_markdown(small_model) == MARKDOWN_SNAPSHOT


def test_html_snapshot(small_model):
    assert to_html(small_model) == HTML_SNAPSHOT


def test_csv_snapshot(small_model):
    assert to_csv(small_model) == CSV_SNAPSHOT


def test_renderers_are_pure(small_model):
    # Rendering twice gives the same text and leaves the model as it was.
    before = (small_model.rows, small_model.columns, small_model.notes)
    for render in (to_latex, to_markdown, to_html, to_csv):
        assert render(small_model) == render(small_model)
    assert (small_model.rows, small_model.columns, small_model.notes) == before


# ------------------------------------------------------------------------------------------
# LaTeX shape and escaping
# ------------------------------------------------------------------------------------------


def _strip_escapes(tex: str) -> str:
    """Remove escaped characters (\\&, \\{, \\\\, ...) so what is left is LaTeX syntax."""
    return re.sub(r"\\[&%$#_{}\\]", "", tex)


def assert_balanced_latex(tex: str) -> None:
    """Environments close in the order they open and braces pair up (a compile-shape check)."""
    stack = []
    for kind, name in re.findall(r"\\(begin|end)\{([^}]*)\}", tex):
        if kind == "begin":
            stack.append(name)
        else:
            assert stack and stack[-1] == name, f"\\end{{{name}}} closes {stack[-1:]}"
            stack.pop()
    assert stack == [], f"unclosed environments: {stack}"
    depth = 0
    for char in _strip_escapes(tex):
        depth += {"{": 1, "}": -1}.get(char, 0)
        assert depth >= 0, "a closing brace without an opening one"
    assert depth == 0, "unclosed braces"
    # Inline math switches pair up on every line (negative numbers are typeset as $-$).
    for line in _strip_escapes(tex).splitlines():
        assert line.count("$") % 2 == 0, line


def test_latex_escape_of_every_special():
    assert latex_escape(SPECIALS) == (
        r"\&\%\$\#\_\{\}\textasciitilde{}\textasciicircum{}\textbackslash{}"
    )
    assert latex_escape("a\nb") == "a b"
    assert latex_escape("<x>") == r"\textless{}x\textgreater{}"


def test_latex_escapes_every_text_cell_header_and_note():
    nasty = "R&D 5% $x #1 a_b {c} ~d ^e \\f"
    model = TableModel(
        title=f"Title {nasty}",
        columns=(f"col {nasty}", "value"),
        rows=((f"cell {nasty}", -1.5), ("plain", 2.0)),
        decimals=(0, 2),
        notes=(f"note {nasty}",),
        label="tab:nasty",
    )
    tex = to_latex(model)
    assert_balanced_latex(tex)
    escaped = latex_escape(nasty)
    assert tex.count(escaped) == 4  # title, header, cell, note
    body = _strip_escapes(tex)
    # After removing escapes, no special is left bare outside LaTeX's own syntax: & only as the
    # column separator (one per table line), %, # and _ nowhere, $ only in the $-$ minus.
    for line in tex.splitlines():
        bare = _strip_escapes(line).count("&")
        assert bare == (1 if line.endswith(r" \\") else 0), line
    assert not re.search(r"[%#_]", body.replace(r"\label{tab:nasty}", ""))
    assert body.count("$") == 2  # the one "$-$"


def test_latex_balanced_on_fixture_and_rows_have_one_cell_per_column(small_model):
    tex = to_latex(small_model)
    assert_balanced_latex(tex)
    lines = tex.splitlines()
    start, stop = lines.index(r"\toprule"), lines.index(r"\bottomrule")
    table_lines = [ln for ln in lines[start:stop] if ln.endswith(r"\\")]
    assert len(table_lines) == 1 + len(small_model.rows)
    for line in table_lines:
        assert len(re.findall(r"(?<!\\)&", line)) == len(small_model.columns) - 1
    assert r"\begin{tabular}{lrrrr}" in lines


def test_latex_without_title_notes_or_label():
    model = TableModel(title="", columns=("a",), rows=((1,),), decimals=(0,))
    tex = to_latex(model)
    assert r"\caption" not in tex and r"\label" not in tex and r"\footnotesize" not in tex
    assert_balanced_latex(tex)


# ------------------------------------------------------------------------------------------
# Markdown and CSV round trips
# ------------------------------------------------------------------------------------------


@pytest.fixture
def numbers_frame() -> pd.DataFrame:
    rng = np.random.default_rng(7)  # invented numbers spanning signs and magnitudes
    return pd.DataFrame(
        {
            "estimate": rng.normal(0, 1, 12) * 10.0 ** rng.integers(-3, 6, 12),
            "std_error": rng.gamma(2.0, 0.3, 12),
            "n_used": rng.integers(0, 10**7, 12),
            "p_value": rng.random(12),
        }
    )


def _read_markdown_table(text: str) -> pd.DataFrame:
    lines = [ln for ln in text.splitlines() if ln.startswith("|")]
    del lines[1]  # the alignment row
    stripped = "\n".join(ln.strip().strip("|") for ln in lines)
    frame = pd.read_csv(io.StringIO(stripped), sep="|", skipinitialspace=True)
    # Undo Markdown's backslash escapes in the labels (std\_error -> std_error).
    frame.columns = [re.sub(r"\\(.)", r"\1", c.strip()) for c in frame.columns]
    return frame


def test_markdown_round_trips_rounded_numbers(numbers_frame):
    model = from_dataframe(numbers_frame, title="Invented", decimals={"estimate": 4, "p_value": 3})
    parsed = _read_markdown_table(to_markdown(model))
    assert list(parsed.columns) == list(numbers_frame.columns)
    np.testing.assert_allclose(parsed["estimate"], numbers_frame["estimate"].round(4), rtol=0, atol=1e-9)
    np.testing.assert_allclose(parsed["std_error"], numbers_frame["std_error"].round(3), rtol=0, atol=1e-12)
    np.testing.assert_allclose(parsed["p_value"], numbers_frame["p_value"].round(3), rtol=0, atol=1e-12)
    np.testing.assert_array_equal(parsed["n_used"], numbers_frame["n_used"])


def test_csv_round_trips_numbers_exactly(numbers_frame):
    frame = numbers_frame.copy()
    frame.loc[3, "estimate"] = 0.1 + 0.2  # needs all 17 significant digits
    frame.loc[4, "estimate"] = -1.2345678901234567e-300
    frame.loc[5, "std_error"] = np.nan  # missing -> empty field -> NaN again
    frame["label"] = [f'row {i}, "quoted"' for i in range(len(frame))]
    model = from_dataframe(frame, title="Invented", decimals=2)
    parsed = pd.read_csv(io.StringIO(to_csv(model)))
    pd.testing.assert_frame_equal(parsed, frame, check_exact=True, check_dtype=False)
    assert parsed["n_used"].dtype.kind == "i"


def test_csv_keeps_large_integers_exact():
    model = TableModel(title="", columns=("n",), rows=((2**53 + 1,),), decimals=(0,))
    assert to_csv(model) == f"n\n{2**53 + 1}\n"


def test_markdown_escapes_text_that_would_break_the_table():
    model = TableModel(
        title="a|b", columns=("x|y", "*z*"), rows=(("<b>bold</b> | [l](u)", 1.0),), decimals=(0, 1)
    )
    text = to_markdown(model)
    row = text.splitlines()[-1]
    assert row == r"| \<b\>bold\</b\> \| \[l\](u) | 1.0 |"
    assert len(re.findall(r"(?<!\\)\|", row)) == 3  # two cells -> three unescaped pipes
    assert markdown_escape("`a`\\") == r"\`a\`\\"


# ------------------------------------------------------------------------------------------
# HTML escaping
# ------------------------------------------------------------------------------------------


class _TextCollector(HTMLParser):
    """Collect tag names and text per element, using the standard library's HTML parser."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[str] = []
        self.text: dict[str, list[str]] = {}
        self._open: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self._open.append(tag)

    def handle_endtag(self, tag):
        assert self._open and self._open[-1] == tag, (tag, self._open)
        self._open.pop()

    def handle_data(self, data):
        if self._open:
            self.text.setdefault(self._open[-1], []).append(data)


def test_html_shows_script_like_text_as_text():
    attack = "<img src=x onerror=alert(1)>"
    model = TableModel(
        title=f"title {attack}",
        columns=(attack, "value"),
        rows=((f"<script>alert('x')</script> & {attack}", 1.0),),
        decimals=(0, 2),
        notes=(f"note {attack}",),
    )
    page = to_html(model)
    assert "<img" not in page and "<script" not in page
    assert "&lt;img src=x onerror=alert(1)&gt;" in page
    parser = _TextCollector()
    parser.feed(page)
    parser.close()
    assert set(parser.tags) == {"table", "caption", "thead", "tbody", "tfoot", "tr", "th", "td"}
    assert parser.text["th"][0] == attack
    assert parser.text["caption"] == [f"title {attack}"]
    assert f"<script>alert('x')</script> & {attack}" in parser.text["td"]
    assert f"note {attack}" in parser.text["td"]


def test_html_structure_of_fixture(small_model):
    parser = _TextCollector()
    parser.feed(to_html(small_model))
    parser.close()
    assert parser.tags.count("th") == 5
    assert parser.tags.count("tr") == 1 + 2 + 2  # header, rows, notes
    assert parser.text["th"] == list(small_model.columns)


def test_missing_and_infinite_values():
    model = TableModel(
        title="", columns=("a", "b"), rows=((math.inf, None), (-math.inf, float("nan"))),
        decimals=(2, 2),
    )
    assert model.rows[1][1] is None
    assert to_csv(model) == "a,b\ninf,\n-inf,\n"
    assert "| inf |  |" in to_markdown(model)
    assert r"$-$inf &  \\" in to_latex(model)
    parsed = pd.read_csv(io.StringIO(to_csv(model)))
    assert parsed["a"].tolist() == [math.inf, -math.inf]
