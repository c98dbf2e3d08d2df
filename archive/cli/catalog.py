"""Commands about the index: index, list, search, show."""

from __future__ import annotations

import datetime as dt
import json
import sys
from pathlib import Path
from typing import TYPE_CHECKING, Annotated

import typer

from archive.cli.common import (
    CsvFlag,
    DbOption,
    Format,
    FormatOption,
    JsonFlag,
    RecordsOption,
    chosen_format,
    emit_rows,
    err,
    out,
    show_progress,
    user_errors,
)

if TYPE_CHECKING:
    from archive.records.model import Record
    from archive.store.query import Filters

ThemeOpt = Annotated[str | None, typer.Option("--theme", help="Only tests with this theme.")]
AreaOpt = Annotated[str | None, typer.Option("--page-area", help="Only tests on this page area.")]
StatusOpt = Annotated[str | None, typer.Option("--status", help="planned, running, finished or stopped-early.")]
OutcomeOpt = Annotated[str | None, typer.Option("--outcome", help="ship, keep-control or iterate.")]
OwnerOpt = Annotated[str | None, typer.Option("--owner", help="Only tests run by this owner.")]
TagOpt = Annotated[str | None, typer.Option("--tag", help="Only tests with this tag.")]
SinceOpt = Annotated[
    dt.datetime | None, typer.Option("--since", formats=["%Y-%m-%d"], help="Running on or after this day.")
]
UntilOpt = Annotated[
    dt.datetime | None, typer.Option("--until", formats=["%Y-%m-%d"], help="Running on or before this day.")
]


def index(records: RecordsOption = Path("records"), db: DbOption = None) -> None:
    """Load the records into the index (only changed files are read again)."""
    from archive.store.engine import make_engine, resolve_url
    from archive.store.sync import index_archive

    url = resolve_url(records, db)
    with user_errors():
        engine = make_engine(url)
        if show_progress():
            from rich.progress import Progress

            with Progress(console=err, transient=True) as bar:
                task = bar.add_task("indexing", total=None)
                report = index_archive(records, engine, progress=lambda n: bar.advance(task, n))
        else:
            report = index_archive(records, engine)
    for problem in report.warnings:
        out.print(str(problem), style="yellow", markup=False)
    note = " (index rebuilt for a new schema version)" if report.rebuilt else ""
    err.print(
        f"indexed {report.total} record(s){note}: {len(report.added)} added, {len(report.updated)} updated, "
        f"{len(report.removed)} removed, {report.unchanged} unchanged; {len(report.warnings)} warning(s). "
        f"Index: {url}",
        markup=False,
    )


def _filters(theme, page_area, status, outcome, owner, tag, since, until, text=None) -> Filters:  # type: ignore[no-untyped-def]
    from archive.store.query import Filters

    return Filters(
        theme=theme,
        page_area=page_area,
        status=status,
        outcome=outcome,
        owner=owner,
        tag=tag,
        since=since.date() if since else None,
        until=until.date() if until else None,
        text=text,
    )


def _query(records: Path, db: str | None, filters: Filters, fmt: Format, title: str) -> None:
    from archive.store.engine import make_engine, prepare, resolve_url
    from archive.store.query import LIST_COLUMNS, find_tests, index_size

    with user_errors():
        engine = make_engine(resolve_url(records, db))
        prepare(engine)
        if index_size(engine) == 0:
            err.print("the index is empty: run `archive index` first.")
            raise typer.Exit(1)
        rows = find_tests(engine, filters)
    emit_rows(rows, LIST_COLUMNS, fmt, title)
    if fmt is Format.table:
        err.print(f"{len(rows)} test(s).")


def list_tests(
    theme: ThemeOpt = None,
    page_area: AreaOpt = None,
    status: StatusOpt = None,
    outcome: OutcomeOpt = None,
    owner: OwnerOpt = None,
    tag: TagOpt = None,
    since: SinceOpt = None,
    until: UntilOpt = None,
    fmt: FormatOption = Format.table,
    as_json: JsonFlag = False,
    as_csv: CsvFlag = False,
    records: RecordsOption = Path("records"),
    db: DbOption = None,
) -> None:
    """List indexed tests, filtered by theme, page area, status, outcome, owner, tag or dates."""
    filters = _filters(theme, page_area, status, outcome, owner, tag, since, until)
    _query(records, db, filters, chosen_format(fmt, as_json, as_csv), "Tests")


def search(
    words: Annotated[str, typer.Argument(metavar="TEXT", help="Words that must all occur.")],
    theme: ThemeOpt = None,
    page_area: AreaOpt = None,
    status: StatusOpt = None,
    outcome: OutcomeOpt = None,
    owner: OwnerOpt = None,
    tag: TagOpt = None,
    since: SinceOpt = None,
    until: UntilOpt = None,
    fmt: FormatOption = Format.table,
    as_json: JsonFlag = False,
    as_csv: CsvFlag = False,
    records: RecordsOption = Path("records"),
    db: DbOption = None,
) -> None:
    """Find tests whose title, hypothesis or learnings contain every word of TEXT."""
    filters = _filters(theme, page_area, status, outcome, owner, tag, since, until, words)
    _query(records, db, filters, chosen_format(fmt, as_json, as_csv), f"Tests matching {words!r}")


def show(
    record_id: Annotated[str, typer.Argument(metavar="ID", help="Id of the test.")],
    fmt: Annotated[Format, typer.Option("--format", "-f", help="table (readable) or json.")] = Format.table,
    as_json: JsonFlag = False,
    records: RecordsOption = Path("records"),
    db: DbOption = None,
) -> None:
    """Show one indexed test: what was tried, the numbers, the decision and the learnings."""
    from archive.store.engine import make_engine, prepare, resolve_url
    from archive.store.query import get_record

    fmt = chosen_format(fmt, as_json)
    with user_errors():
        engine = make_engine(resolve_url(records, db))
        prepare(engine)
        record = get_record(engine, record_id)
    if fmt is not Format.table:
        sys.stdout.write(json.dumps(record.model_dump(mode="json"), indent=2, ensure_ascii=False) + "\n")
        return
    _print_record(record)


def _print_record(r: Record) -> None:
    from rich.table import Table

    out.print(f"[bold]{r.title}[/bold]  ({r.id})")
    out.print(
        f"status {r.status} · {r.started or '?'} to {r.ended or '?'} · page area {r.page_area} · "
        f"themes {', '.join(r.themes)}" + (f" · owner {r.owner}" if r.owner else ""),
        markup=False,
    )
    if r.iterates_on:
        out.print(f"iterates on {r.iterates_on}", markup=False)
    out.print(f"\nHypothesis: {r.hypothesis}", markup=False)
    table = Table(header_style="bold")
    for column in ("arm", "visitors", "conversions", "rate", "orders", "revenue", "revenue/visitor"):
        table.add_column(column, justify="left" if column == "arm" else "right")
    for arm in r.arms:
        rate = f"{arm.conversions / arm.visitors:.2%}" if arm.visitors and arm.conversions is not None else ""
        rpv = f"{arm.revenue / arm.visitors:.3f}" if arm.visitors and arm.revenue is not None else ""
        table.add_row(
            arm.name + (" (control)" if arm.control else ""),
            *("" if v is None else f"{v:,}" for v in (arm.visitors, arm.conversions)),
            rate,
            "" if arm.orders is None else f"{arm.orders:,}",
            "" if arm.revenue is None else f"{arm.revenue:,.2f}",
            rpv,
        )
    out.print(table)
    out.print("Observed figures only; `archive analyze` gives intervals and verdicts.", style="dim")
    if r.segments:
        out.print("Segments: " + ", ".join(f"{d} ({len(v)} values)" for d, v in r.segments.items()), markup=False)
    if r.decision:
        chosen = f" {r.decision.arm}" if r.decision.arm else ""
        out.print(f"\nDecision: {r.decision.outcome}{chosen}. {r.decision.rationale}", markup=False)
    if r.learnings:
        out.print("\nLearnings:")
        for item in r.learnings:
            out.print(f"  - {item}", markup=False)
    for link in r.links:
        out.print(f"  {link.label}: {link.url}", markup=False)
