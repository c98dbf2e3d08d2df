"""Memos in the terminal (rich), fitted to its width; plain text with tab-separated tables when piped. Record
text is never read as markup."""

from __future__ import annotations

from typing import Any

from archive.render.model import Memo
from archive.render.tables import print_table


def render_terminal(memo: Memo, console: Any, plain: bool | None = None, details: bool = False) -> None:
    """Print a memo; ``plain`` (default: the console is not a terminal) gives text and tab-separated tables.
    Sections marked as details (the statistics behind the answer) are printed only with ``details``."""
    plain = not console.is_terminal if plain is None else plain
    wrap: dict[str, Any] = {"markup": False, "highlight": False}
    if not plain:  # wrap prose at spaces to the terminal's width
        wrap.update(soft_wrap=False, overflow="fold")
    if plain:
        console.print(memo.title, **wrap)
    else:
        console.print(f"[bold]{_rich_escape(memo.title)}[/bold]", soft_wrap=False, overflow="fold")
    for line in memo.lead:
        console.print(line, **wrap)
    hidden = [s.heading for s in memo.sections if s.details and not details]
    for section in memo.sections:
        if section.details and not details:
            continue
        if plain:
            console.print(f"\n{section.heading}", **wrap)
        else:
            console.print(f"\n[bold underline]{_rich_escape(section.heading)}[/bold underline]", soft_wrap=False)
        for p in section.paragraphs:
            console.print(p, **wrap)
        for table in section.tables:
            print_table(console, table.headers, table.rows, style=_style, plain=plain)
        for b in section.bullets:
            console.print(f"  - {b}", **wrap)
    if hidden:
        console.print(f"\nNot shown: {', '.join(hidden)}. Add --details to see them.", **wrap)


def _rich_escape(text: str) -> str:
    from rich.markup import escape

    return escape(text)


_STYLES = {"winner": "green", "loser": "red", "FAILED": "bold red", "check": "yellow", "trade-off": "magenta"}


def _style(cell: str) -> str:
    return _STYLES.get(cell, "")
