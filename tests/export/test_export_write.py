"""Tests of write_table: the suffix picks the renderer and the file holds exactly its text."""
from __future__ import annotations

import pytest

from seamline.export import to_csv, to_html, to_latex, to_markdown, write_table


@pytest.mark.parametrize(
    ("name", "render"),
    [
        ("table.tex", to_latex),
        ("table.md", to_markdown),
        ("table.html", to_html),
        ("table.csv", to_csv),
        ("TABLE.TEX", to_latex),
    ],
)
def test_suffix_selects_the_format(tmp_path, small_model, name, render):
    written = write_table(small_model, tmp_path / name)
    assert written == tmp_path / name
    assert written.read_bytes() == render(small_model).encode("utf-8")


def test_accepts_a_string_path_and_replaces_an_existing_file(tmp_path, small_model):
    target = tmp_path / "out.csv"
    target.write_text("old content that is longer than the table " * 10)
    write_table(small_model, str(target))
    assert target.read_text(encoding="utf-8") == to_csv(small_model)


def test_unknown_suffix_is_refused(tmp_path, small_model):
    with pytest.raises(ValueError, match=r"`path` must end in one of \.tex, \.md, \.html, \.csv; got '.*table\.txt'\."):
        write_table(small_model, tmp_path / "table.txt")
    assert not (tmp_path / "table.txt").exists()


def test_non_model_is_refused(tmp_path):
    with pytest.raises(TypeError, match=r"`model` must be a TableModel; got str\."):
        write_table("not a model", tmp_path / "t.tex")  # type: ignore[arg-type]
