"""Rendering: text from records is escaped before it reaches Markdown or HTML."""

from __future__ import annotations

import pytest

from archive.render.formats import md_text
from archive.render.markdown import render_markdown
from archive.render.model import Memo, Section, Table

CORPUS = [
    ("<script>alert(1)</script>", "&lt;script&gt;alert(1)&lt;/script&gt;"),
    ("<img src=x onerror=alert(1)>", "&lt;img src=x onerror=alert(1)&gt;"),
    ("[click](javascript:alert(1))", "\\[click\\](javascript:alert(1))"),
    ("a | b", "a \\| b"),
    ("**bold** _it_ `code`", "\\*\\*bold\\*\\* \\_it\\_ \\`code\\`"),
    ("# not a heading", "\\# not a heading"),
    ("- not a list", "\\- not a list"),
    ("1. not a list", "1\\. not a list"),
    ("two\nlines", "two lines"),
    ("-3.7% and 33.7%", "-3.7% and 33.7%"),
]


@pytest.mark.parametrize(("raw", "expected"), CORPUS)
def test_md_text_escapes(raw: str, expected: str) -> None:
    assert md_text(raw) == expected


def test_table_cells_cannot_break_the_table() -> None:
    memo = Memo("t", [], [Section("s", tables=[Table(["a", "b"], [["x | y", "z\n| w"]])])])
    lines = [line for line in render_markdown(memo).splitlines() if line.startswith("| x")]
    assert lines == ["| x \\| y | z \\| w |"]
