"""Commands about record files: check, new, schema."""

from __future__ import annotations

import datetime as dt
import json
from pathlib import Path
from typing import Annotated

import typer

from archive.cli.common import (
    DbOption,
    Format,
    RecordsOption,
    emit_rows,
    err,
    open_archive,
    out,
    print_problems,
    user_errors,
)


def check(
    records: RecordsOption = None,
    db: DbOption = None,
    strict: Annotated[bool, typer.Option("--strict", help="Fail on warnings too.")] = False,
    fmt: Annotated[Format, typer.Option("--format", "-f", help="table (one line per problem) or json.")] = Format.table,
) -> None:
    """Validate every record; print each problem as path:line: field: message. Writes nothing."""
    from archive.records.problems import blocking

    with user_errors():
        report = open_archive(records, db).check()
    failing = blocking(report.problems, strict)
    if fmt is Format.json:
        emit_rows([p.as_dict() for p in report.problems], ["path", "line", "field", "message", "severity"], Format.json)
    else:
        print_problems(report.problems)
    n_err = sum(p.severity == "error" for p in report.problems)
    n_warn = len(report.problems) - n_err
    err.print(f"{report.files} record(s) checked: {n_err} error(s), {n_warn} warning(s).")
    if failing:
        raise typer.Exit(1)


def new(
    record_id: Annotated[str, typer.Argument(metavar="ID", help="Id of the new test (lowercase-with-hyphens).")],
    title: Annotated[str, typer.Option(help="One-line title.")],
    page_area: Annotated[str, typer.Option(help="Where in the shop, e.g. product-page.")],
    theme: Annotated[list[str], typer.Option(help="Hypothesis theme; repeat for several.")],
    arm: Annotated[list[str] | None, typer.Option(help="Arm name; repeat (first is control).")] = None,
    results: Annotated[
        Path | None,
        typer.Option(
            help="Per-arm results, one row per arm: arm, visitors, conversions, and optionally revenue, orders, "
            "revenue_sum_of_squares, description. Comma, semicolon or tab separated; decimal point or comma."
        ),
    ] = None,
    orders: Annotated[
        Path | None,
        typer.Option(
            help="Order-level export, one row per order: arm, order_id or visitor_id, value. Gives orders, revenue "
            "and revenue sum of squares per arm; a copy is kept next to the record as <ID>-orders.csv."
        ),
    ] = None,
    control: Annotated[str | None, typer.Option(help="Which arm is the control.")] = None,
    status: Annotated[str | None, typer.Option(help="planned, running, finished or stopped-early.")] = None,
    owner: Annotated[str | None, typer.Option(help="Who runs the test.")] = None,
    started: Annotated[dt.datetime | None, typer.Option(formats=["%Y-%m-%d"], help="First day.")] = None,
    ended: Annotated[dt.datetime | None, typer.Option(formats=["%Y-%m-%d"], help="Last day.")] = None,
    observed: Annotated[str, typer.Option(help="Hypothesis: what was observed that prompted the test.")] = "",
    change: Annotated[str, typer.Option(help="Hypothesis: what the test changes.")] = "",
    audience: Annotated[str, typer.Option(help="Hypothesis: for whom (omit for every visitor).")] = "",
    expected: Annotated[str, typer.Option(help="Hypothesis: the effect expected.")] = "",
    hypothesis: Annotated[str, typer.Option(help="The hypothesis as one free sentence instead.")] = "",
    records: RecordsOption = None,
) -> None:
    """Start a record from options, a results CSV and/or an orders export; never overwrites a file."""
    from archive.records.files import FileExists, write_new
    from archive.records.template import (
        Draft,
        ScaffoldError,
        arms_from_csv,
        arms_from_names,
        arms_with_orders,
        hypothesis_parts,
        render,
    )

    with user_errors():
        folder = records if records is not None else open_archive(None).records_dir
        target = folder / f"{record_id}.yaml"
        orders_target = folder / f"{record_id}-orders.csv"
        try:
            arms = arms_from_csv(results, control) if results is not None else None
            export = None
            if orders is not None:
                from archive.records.exports import read_order_export

                export = read_order_export(orders)
                arms = arms_with_orders(arms, export, control)
            draft = Draft(
                id=record_id,
                title=title,
                page_area=page_area,
                themes=theme,
                arms=arms if arms is not None else arms_from_names(arm or ["control", "b"], control),
                status=status or ("finished" if arms is not None else "planned"),
                owner=owner,
                started=started.date() if started else None,
                ended=ended.date() if ended else None,
                hypothesis=hypothesis_parts(hypothesis, observed, change, audience, expected),
                orders_file=orders_target.name if export is not None else None,
            )
            text = render(draft)
        except ScaffoldError as exc:
            print_problems(exc.problems)
            raise typer.Exit(2) from None
        for existing in (target, orders_target) if export is not None else (target,):
            if existing.exists():
                raise FileExists(f"{existing} already exists; choose another id or edit the file")
        if export is not None:
            write_new(orders_target, export.orders_csv())
            err.print(
                f"read {len(export.rows)} orders from {orders} ({export.layout}); copy kept as {orders_target}",
                markup=False,
            )
            if export.id_column == "order_id":
                err.print(
                    "note: with order ids only, each order counts as its own visitor in revenue_sum_of_squares "
                    "(a lower bound if visitors ordered more than once); visitor ids give the exact figure.",
                    markup=False,
                )
        try:
            write_new(target, text)
        except FileExists:
            if export is not None:
                orders_target.unlink()
            raise
    out.print(f"wrote {target}; fill in the blanks, then run `archive check`.", markup=False)


def schema(
    markdown: Annotated[bool, typer.Option("--markdown", help="A field reference in Markdown instead.")] = False,
) -> None:
    """Print the JSON Schema of a record (for editors), or the field reference."""
    from archive.records.model import record_schema

    if markdown:
        from archive.records.fieldref import field_reference

        typer.echo(field_reference(), nl=False)
    else:
        typer.echo(json.dumps(record_schema(), indent=2, ensure_ascii=False))
