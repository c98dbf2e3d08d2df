"""Tables that fit: a rich table sized to the terminal, or plain rows (tab-separated, JSON, CSV) for programs.

A table never splits a value across lines. When the full table is wider than the terminal, long headers are
abbreviated first (a legend under the table explains them); then columns are left out, least important first.
Left-out columns of prose (a detail, a note) are shown under the table as one wrapped line per row; the others are
named under the table, with the way to see them all.
"""

from __future__ import annotations

import csv
import datetime as dt
import json
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import IO, Any

#: blank characters between two columns of the terminal table (one divider plus the padding on either side)
GAP = 3

#: short forms of long headers, used only when the terminal is too narrow for the full header
SHORT_HEADERS = {
    "page area": "area",
    "conversions": "conv.",
    "comparisons": "comp.",
    "rate (95% credible)": "rate (95% CrI)",
    "lift vs control (95% CI)": "lift (95% CI)",
    "P(beats control)": "P(beat)",
    "expected loss (rate points)": "exp. loss",
    "revenue/visitor": "RPV",
    "avg order value": "AOV",
    "RPV difference (95% CI)": "RPV diff. (95% CI)",
    "RPV lift (95% CI)": "RPV lift",
    "pooled lift (95% CI)": "lift (95% CI)",
    "next test (95% PI)": "next test",
    "winners (Jeffreys 95%)": "winners",
    "visitors (arm / control)": "visitors",
    "share of traffic": "share",
    "rate (arm / control)": "rate",
}

#: columns kept longest when some must go: the first column, then these (by header), then the others in order
KEY_HEADERS = ("id", "title", "verdict", "status", "outcome", "lift", "started")

#: a left-out column whose longest value has this many words is prose, shown under the table row by row
PROSE_WORDS = 4


@dataclass(frozen=True)
class Layout:
    """Which columns a table shows at a width, under which headers, and which of them wrap."""

    shown: list[int]  # indices of the columns shown, in table order
    headers: list[str]  # the header of each shown column (full or short)
    wrap: list[int | None]  # per shown column: the width it wraps to at spaces (prose only), None: one line
    legend: list[tuple[str, str]]  # (short header, full header) for each abbreviation used
    prose: list[int]  # left-out prose columns, shown under the table one line per row
    hidden: list[int]  # left-out columns only named under the table


def cell_width(text: str) -> int:
    from rich.cells import cell_len

    return max((cell_len(line) for line in text.splitlines()), default=0)


def default_priority(headers: Sequence[str]) -> list[int]:
    """Column indices, most important first: the first column, key headers, then the rest from left to right."""
    order = [0] if headers else []
    for key in KEY_HEADERS:
        order += [i for i, h in enumerate(headers) if i not in order and h.lower().split(" (")[0].startswith(key)]
    return order + [i for i in range(len(headers)) if i not in order]


def short_header(header: str, value_width: int) -> str:
    """A shorter header for a narrow column: the listed short form, or the header cut at a word or letter."""
    if header in SHORT_HEADERS:
        return SHORT_HEADERS[header]
    first = header.split(" ")[0]
    if len(first) < len(header):
        return first
    return header[: max(value_width, 3)] + "." if len(header) > max(value_width, 3) + 1 else header


def _words(text: str) -> list[str]:
    return text.split()


def fit_columns(
    headers: Sequence[str], rows: Sequence[Sequence[str]], width: int, priority: Sequence[int] | None = None
) -> Layout:
    """The columns of a table that fit in ``width`` terminal cells without splitting a value.

    A column of prose (a cell of ``PROSE_WORDS`` words or more) may wrap, at spaces only and never narrower than its
    longest word; every other value stays on one line.
    """
    n = len(headers)
    cells = [[r[i] if i < len(r) else "" for r in rows] for i in range(n)]
    values = [max(map(cell_width, column), default=0) for column in cells]
    prose = [max((len(_words(c)) for c in column), default=0) >= PROSE_WORDS for column in cells]
    longest = [max((cell_width(w) for c in column for w in _words(c)), default=0) for column in cells]
    narrowest = [max(longest[i], min(values[i], 20)) if prose[i] else values[i] for i in range(n)]
    short = [short_header(h, values[i]) if cell_width(h) > values[i] else h for i, h in enumerate(headers)]
    order = list(priority) if priority is not None else default_priority(headers)

    def header_width(i: int, names: Sequence[str]) -> int:
        return max(map(cell_width, _words(names[i])), default=0) if prose[i] else cell_width(names[i])

    def total(columns: Sequence[int], names: Sequence[str], widths: Sequence[int]) -> int:
        return sum(max(widths[i], header_width(i, names)) for i in columns) + GAP * max(len(columns) - 1, 0)

    names = list(headers)
    kept = list(range(n))
    wrap: dict[int, int] = {}
    if total(kept, names, values) > width:
        names = short
        while len(kept) > 1 and total(kept, names, narrowest) > width:
            kept.remove(next(i for i in reversed(order) if i in kept))
        for i in kept:  # give back the full header wherever there is room for it
            trial = [*names[:i], headers[i], *names[i + 1 :]]
            if total(kept, trial, narrowest) <= width:
                names = trial
        spare = width - total(kept, names, narrowest)
        for i in [i for i in order if i in kept and prose[i]]:  # room left goes to prose, most important first
            own = max(narrowest[i], header_width(i, names))
            extra = min(max(spare, 0), max(values[i], header_width(i, names)) - own)
            spare -= extra
            if own + extra < values[i]:
                wrap[i] = own + extra
    left_out = [i for i in range(n) if i not in kept]
    return Layout(
        shown=kept,
        headers=[names[i] for i in kept],
        wrap=[wrap.get(i) for i in kept],
        legend=[(names[i], headers[i]) for i in kept if names[i] != headers[i]],
        prose=[i for i in left_out if prose[i]],
        hidden=[i for i in left_out if not prose[i]],
    )


Styler = Callable[[str], str]


def print_table(
    console: Any,
    headers: Sequence[str],
    rows: Sequence[Sequence[str]],
    title: str = "",
    style: Styler | None = None,
    priority: Sequence[int] | None = None,
    plain: bool | None = None,
) -> None:
    """Print a table on a rich console: fitted to its width in a terminal, tab-separated when piped."""
    if plain if plain is not None else not console.is_terminal:
        write_tsv(console.file, headers, rows)
        return
    from rich import box
    from rich.table import Table as RichTable
    from rich.text import Text

    layout = fit_columns(headers, rows, console.width, priority)
    table = RichTable(
        title=title or None,
        title_justify="left",
        header_style="bold",
        box=box.SIMPLE_HEAD,
        show_edge=False,
        pad_edge=False,
        padding=(0, 1),
    )
    values = [max((cell_width(r[i]) for r in rows if i < len(r)), default=0) for i in layout.shown]
    for header, value_width, wrap in zip(layout.headers, values, layout.wrap, strict=True):
        if wrap is None:
            table.add_column(header, no_wrap=True, overflow="ellipsis", min_width=max(value_width, cell_width(header)))
        else:
            table.add_column(header, width=wrap, overflow="ellipsis")
    for row in rows:
        cells = [row[i] if i < len(row) else "" for i in layout.shown]
        table.add_row(
            *(
                Text(c, style=style(c) if style else "", no_wrap=wrap is None, overflow="ellipsis")
                for c, wrap in zip(cells, layout.wrap, strict=True)
            )
        )
    console.print(table)
    notes = []
    for i in layout.prose:
        notes += [f"  {row[0]}, {headers[i]}: {row[i]}" for row in rows if i < len(row) and row[i]]
    if layout.legend:
        notes.append("  " + "; ".join(f"{s}: {full}" for s, full in layout.legend) + ".")
    if layout.hidden:
        notes.append(
            f"  Not shown at this width: {', '.join(headers[i] for i in layout.hidden)} "
            "(a wider terminal or a --format for programs shows every column)."
        )
    for note in notes:
        console.print(note, markup=False, highlight=False, soft_wrap=False, overflow="fold")


def _cell(value: Any) -> str:
    if isinstance(value, dt.date):
        return value.isoformat()
    if isinstance(value, list | tuple):
        return " ".join(map(str, value))
    return "" if value is None else str(value)


def write_tsv(stream: IO[str], headers: Sequence[str], rows: Sequence[Sequence[Any]]) -> None:
    """Tab-separated lines, a header first; tabs and line breaks inside a value become spaces."""
    for line in (headers, *rows):
        stream.write("\t".join(" ".join(_cell(v).split()) for v in line) + "\n")


def emit_rows(
    rows: list[dict[str, Any]],
    columns: Sequence[str],
    fmt: str,
    title: str = "",
    *,
    console: Any,
    plain: bool | None = None,
) -> None:
    """Rows of dicts as a table (fitted in a terminal, tab-separated when piped), JSON (a list of objects) or CSV.

    ``fmt`` is ``"table"``, ``"json"`` or ``"csv"``; ``plain`` forces (True) or refuses (False) the tab-separated
    form of a table, which by default is used when the console is not a terminal.
    """
    stream = console.file
    if fmt == "json":
        stream.write(json.dumps(rows, indent=2, default=str, ensure_ascii=False) + "\n")
        return
    if fmt == "csv":
        writer = csv.writer(stream, lineterminator="\n")
        writer.writerow(columns)
        for row in rows:
            writer.writerow([_cell(row.get(c)) for c in columns])
        return
    if plain if plain is not None else not console.is_terminal:
        write_tsv(stream, columns, [[row.get(c) for c in columns] for row in rows])
        return
    cells = [[" ".join(_cell(row.get(c)).split()) for c in columns] for row in rows]
    print_table(console, [c.replace("_", " ") for c in columns], cells, title, plain=False)
