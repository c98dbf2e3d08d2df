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
        Path | None, typer.Option(help="CSV with columns arm, visitors, conversions, revenue (one row per arm).")
    ] = None,
    control: Annotated[str | None, typer.Option(help="Which arm is the control.")] = None,
    status: Annotated[str | None, typer.Option(help="planned, running, finished or stopped-early.")] = None,
    owner: Annotated[str | None, typer.Option(help="Who runs the test.")] = None,
    started: Annotated[dt.datetime | None, typer.Option(formats=["%Y-%m-%d"], help="First day.")] = None,
    ended: Annotated[dt.datetime | None, typer.Option(formats=["%Y-%m-%d"], help="Last day.")] = None,
    hypothesis: Annotated[str, typer.Option(help="The hypothesis, in one sentence.")] = "",
    records: RecordsOption = None,
) -> None:
    """Start a record from options or a results CSV; never overwrites a file."""
    from archive.records.files import write_new
    from archive.records.template import Draft, ScaffoldError, arms_from_csv, arms_from_names, render

    with user_errors():
        try:
            if results is not None:
                arms = arms_from_csv(results, control)
            else:
                arms = arms_from_names(arm or ["control", "b"], control)
            draft = Draft(
                id=record_id,
                title=title,
                page_area=page_area,
                themes=theme,
                arms=arms,
                status=status or ("finished" if results is not None else "planned"),
                owner=owner,
                started=started.date() if started else None,
                ended=ended.date() if ended else None,
                hypothesis=hypothesis,
            )
            text = render(draft)
        except ScaffoldError as exc:
            print_problems(exc.problems)
            raise typer.Exit(2) from None
        folder = records if records is not None else open_archive(None).records_dir
        target = folder / f"{record_id}.yaml"
        write_new(target, text)
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
