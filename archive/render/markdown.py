"""Memos as Markdown; every piece of text escaped with md_text."""

from __future__ import annotations

from collections.abc import Callable

from archive.render.formats import md_text
from archive.render.model import Memo, Section


def markdown_sections(
    sections: list[Section], level: int = 2, cell: Callable[[str, str], str] | None = None
) -> list[str]:
    """Sections as Markdown lines; every cell and sentence escaped with :func:`md_text`. ``cell(header, value)``,
    when given, writes the table cells instead (the site wraps some of them in coloured labels)."""
    out: list[str] = []
    for section in sections:
        out += [f"{'#' * level} {md_text(section.heading)}", ""]
        out += [md_text(p) + "\n" for p in section.paragraphs]
        for table in section.tables:
            out.append("| " + " | ".join(md_text(h) for h in table.headers) + " |")
            out.append("|" + "---|" * len(table.headers))
            out += [
                "| " + " | ".join(cell(h, c) if cell else md_text(c) for h, c in zip(table.headers, row, strict=False))
                + " |"
                for row in table.rows
            ]
            out.append("")
        out += [f"- {md_text(b)}" for b in section.bullets]
        if section.bullets:
            out.append("")
    return out


def render_markdown(memo: Memo) -> str:
    out = [f"# {md_text(memo.title)}", ""]
    out += [md_text(p) + "\n" for p in memo.lead]
    out += markdown_sections(memo.sections)
    return "\n".join(out).rstrip() + "\n"
