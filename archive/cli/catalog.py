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
    NoSyncOption,
    RecordsOption,
    chosen_format,
    emit_rows,
    err,
    open_archive,
    out,
    ready,
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


def index(
    records: RecordsOption = None,
    db: DbOption = None,
    full: Annotated[
        bool, typer.Option("--full", help="Re-hash every file instead of trusting unchanged stamps.")
    ] = False,
) -> None:
    """Sync the store with the records: read, check and analyse what changed (creates the store if needed)."""
    with user_errors():
        archive = open_archive(records, db)
        waiting = lambda: err.print("another sync is running; waiting for it to finish")  # noqa: E731
        if show_progress():
            from rich.progress import Progress

            with Progress(console=err, transient=True) as bar:
                task = bar.add_task("analysing changed records", total=None)
                report = archive.index(full, progress=lambda n: bar.advance(task, n), on_wait=waiting)
        else:
            report = archive.index(full, on_wait=waiting)
    for problem in report.warnings:
        out.print(str(problem), style="yellow", markup=False)
    if report.rebuilt:
        err.print("the store was made by another version of archive: rebuilt from the records.")
    err.print(
        f"indexed {report.total} record(s): {len(report.added)} added, {len(report.updated)} updated, "
        f"{len(report.reanalysed)} re-analysed for new settings, {len(report.removed)} removed, "
        f"{report.unchanged} unchanged; {len(report.warnings)} warning(s). Store: {archive.display_url}",
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


_FILTER_KINDS = (("theme", "theme"), ("page_area", "page area"), ("tag", "tag"), ("owner", "owner"))
_FIXED = {"status": ("planned", "running", "finished", "stopped-early"), "outcome": ("ship", "keep-control", "iterate")}


def known_value(kind: str, label: str, value: str, known: list[str] | tuple[str, ...]) -> None:
    """Refuse a filter value nobody uses, suggesting the nearest one in use."""
    import difflib

    if value in known:
        return
    near = difflib.get_close_matches(value, list(known), n=1, cutoff=0.6)
    hint = f"; did you mean {near[0]!r}?" if near else (f"; in use: {', '.join(known)}" if len(known) <= 12 else "")
    raise LookupError(f"no {label} {value!r}{hint}")


def _query(records: Path | None, db: str | None, filters: Filters, fmt: Format, title: str, no_sync: bool) -> None:
    from archive.store.query import LIST_COLUMNS

    with user_errors():
        archive = open_archive(records, db, no_sync)
        ready(archive)
        for name, fixed in _FIXED.items():
            value = getattr(filters, name)
            if value:
                known_value(name, name, value, fixed)
        for name, label in _FILTER_KINDS:
            value = getattr(filters, name)
            if value:
                known_value(name, label, value, archive.values(name))
        rows = archive.find(filters)
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
    records: RecordsOption = None,
    db: DbOption = None,
    no_sync: NoSyncOption = False,
) -> None:
    """List tests, filtered by theme, page area, status, outcome, owner, tag or dates."""
    filters = _filters(theme, page_area, status, outcome, owner, tag, since, until)
    _query(records, db, filters, chosen_format(fmt, as_json, as_csv), "Tests", no_sync)


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
    records: RecordsOption = None,
    db: DbOption = None,
    no_sync: NoSyncOption = False,
) -> None:
    """Find tests whose title, hypothesis or learnings contain every word of TEXT."""
    filters = _filters(theme, page_area, status, outcome, owner, tag, since, until, words)
    _query(records, db, filters, chosen_format(fmt, as_json, as_csv), f"Tests matching {words!r}", no_sync)


def show(
    record_id: Annotated[str, typer.Argument(metavar="ID", help="Id of the test.")],
    fmt: Annotated[Format, typer.Option("--format", "-f", help="table (readable) or json.")] = Format.table,
    as_json: JsonFlag = False,
    records: RecordsOption = None,
    db: DbOption = None,
    no_sync: NoSyncOption = False,
) -> None:
    """Show one test: what was tried, the numbers, the decision and the learnings."""
    fmt = chosen_format(fmt, as_json)
    with user_errors():
        if fmt is Format.csv:
            raise ValueError("show gives a table or json; use `archive analyze ID -f csv` for the arms' figures")
        archive = open_archive(records, db, no_sync)
        ready(archive)
        known_value("id", "test", record_id, archive.ids())
        record = archive.record(record_id)
    if fmt is not Format.table:
        sys.stdout.write(json.dumps(record.model_dump(mode="json"), indent=2, ensure_ascii=False) + "\n")
        return
    _print_record(record, archive.settings.currency)


def _print_record(r: Record, currency: str) -> None:
    from rich.markup import escape
    from rich.table import Table
    from rich.text import Text

    from archive.render.formats import money

    out.print(f"[bold]{escape(r.title)}[/bold]  ({escape(r.id)})")
    out.print(
        f"status {r.status} · {r.started or '?'} to {r.ended or '?'} · page area {r.page_area} · "
        f"themes {', '.join(r.themes)}" + (f" · owner {r.owner}" if r.owner else ""),
        markup=False,
    )
    if r.iterates_on:
        out.print(f"iterates on {r.iterates_on}", markup=False)
    out.print(f"\nHypothesis: {r.hypothesis_text()}", markup=False)
    table = Table(header_style="bold")
    for column in ("arm", "visitors", "conversions", "rate", "orders", f"revenue ({currency})", "revenue/visitor"):
        table.add_column(column, justify="left" if column == "arm" else "right")
    for arm in r.arms:
        rate = f"{arm.conversions / arm.visitors:.2%}" if arm.visitors and arm.conversions is not None else ""
        rpv = money(arm.revenue / arm.visitors, currency=currency) if arm.visitors and arm.revenue is not None else ""
        table.add_row(
            Text(arm.name + (" (control)" if arm.control and arm.name != "control" else "")),
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


def labels(
    kind: Annotated[str, typer.Option("--kind", help="theme, page-area or tag.")] = "theme",
    fmt: FormatOption = Format.table,
    as_json: JsonFlag = False,
    as_csv: CsvFlag = False,
    records: RecordsOption = None,
    db: DbOption = None,
    no_sync: NoSyncOption = False,
) -> None:
    """The themes (or page areas, tags) in use, with their tests, win rate and latest test: reuse them."""
    fmt = chosen_format(fmt, as_json, as_csv)
    with user_errors():
        archive = open_archive(records, db, no_sync)
        ready(archive)
        rows = archive.labels(kind)
    shown = [
        {**row, "win_rate": "" if row["win_rate"] is None else f"{row['win_rate']:.0%}"} if fmt is Format.table else row
        for row in rows
    ]
    emit_rows(
        shown, ["value", "tests", "comparisons", "winners", "win_rate", "last"], chosen_format(fmt, as_json, as_csv)
    )
    if fmt is Format.table:
        err.print(
            f"{len(rows)} value(s). Win rate: comparisons the analysis calls winners, of all compared (observed, "
            "not shrunk; `archive pool` gives intervals)."
        )
