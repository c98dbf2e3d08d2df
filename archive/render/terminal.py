"""Memos in the terminal (rich); record text is never read as markup."""

from __future__ import annotations

from archive.render.model import Memo


def render_terminal(memo: Memo, console) -> None:  # type: ignore[no-untyped-def]
    from rich.table import Table as RichTable

    console.print(f"[bold]{_rich_escape(memo.title)}[/bold]")
    for line in memo.lead:
        console.print(line, markup=False)
    for section in memo.sections:
        console.print(f"\n[bold underline]{section.heading}[/bold underline]")
        for p in section.paragraphs:
            console.print(p, markup=False)
        for table in section.tables:
            rich_table = RichTable(header_style="bold", show_lines=False)
            for header in table.headers:
                rich_table.add_column(header, overflow="fold")
            for row in table.rows:
                rich_table.add_row(*(_styled(c) for c in row))
            console.print(rich_table)
        for b in section.bullets:
            console.print(f"  - {b}", markup=False)


def _rich_escape(text: str) -> str:
    from rich.markup import escape

    return escape(text)


_STYLES = {"winner": "green", "loser": "red", "FAILED": "bold red", "check": "yellow", "trade-off": "magenta"}


def _styled(cell: str):  # type: ignore[no-untyped-def]
    from rich.text import Text

    return Text(cell, style=_STYLES.get(cell, ""))
