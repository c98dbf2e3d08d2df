"""What every command shares: the records and database options, output formats, and mapping errors to exits."""

from __future__ import annotations

import contextlib
import os
from collections.abc import Iterator, Sequence
from enum import StrEnum
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any

import typer
from rich.console import Console

from archive.records.files import FileExists
from archive.records.problems import ArchiveInvalid, Problem

if TYPE_CHECKING:
    from archive.api import Archive

RECORDS_ENV = "ARCHIVE_RECORDS"

RecordsOption = Annotated[
    Path | None,
    typer.Option(
        "--records",
        "-r",
        envvar=RECORDS_ENV,
        help="Folder of YAML records (default: records/ of the first folder upwards that has one).",
        file_okay=False,
        show_default=False,
    ),
]
DbOption = Annotated[
    str | None,
    typer.Option(
        "--db", envvar="ARCHIVE_DB", help="SQLAlchemy URL of the store (default: SQLite in <archive>/.archive/)."
    ),
]
NoSyncOption = Annotated[
    bool,
    typer.Option("--no-sync", help="Read the store as it is, without first reading changed records."),
]


def open_archive(records: Path | None, db: str | None = None, no_sync: bool = False) -> Archive:
    """The archive the command runs on (found upwards from here, or named by --records)."""
    from archive.api import Archive

    return Archive.open(records=records, db=db, sync=not no_sync)


def ready(archive: Archive) -> None:
    """Sync the store before reading it (unless --no-sync), saying in one line what changed."""
    if not archive.sync_first:
        return
    report = archive.sync(on_wait=lambda: err.print("another sync is running; waiting for it to finish"))
    if report.changed:
        err.print(report.line(), markup=False)


class Format(StrEnum):
    table = "table"
    json = "json"
    csv = "csv"


FormatOption = Annotated[Format, typer.Option("--format", "-f", help="table for people, json or csv for programs.")]
JsonFlag = Annotated[bool, typer.Option("--json", help="Same as --format json.")]
CsvFlag = Annotated[bool, typer.Option("--csv", help="Same as --format csv.")]


def chosen_format(fmt: Format, as_json: bool = False, as_csv: bool = False) -> Format:
    if as_json and as_csv:
        raise typer.BadParameter("give --json or --csv, not both")
    return Format.json if as_json else Format.csv if as_csv else fmt


out = Console(highlight=False, soft_wrap=True)
if not out.is_terminal:  # piped or captured: wide tables rather than folded cells
    out = Console(highlight=False, soft_wrap=True, width=200)
err = Console(stderr=True, highlight=False, soft_wrap=True)


def print_problems(problems: Sequence[Problem]) -> None:
    for problem in sorted(problems):
        style = "yellow" if problem.severity == "warning" else "red"
        out.print(str(problem), style=style, markup=False)


@contextlib.contextmanager
def user_errors() -> Iterator[None]:
    """Turn the library's exceptions into a message and an exit code, in one place for every command."""
    try:
        yield
    except ArchiveInvalid as exc:
        print_problems(exc.problems)
        err.print(f"{exc}. Nothing was changed.", markup=False)
        raise typer.Exit(1) from None
    except (FileExists, FileNotFoundError, LookupError) as exc:
        err.print(f"error: {exc.args[0] if exc.args else exc}", markup=False)
        raise typer.Exit(1) from None
    except ValueError as exc:
        from archive.analysis import CannotAnalyze

        err.print(f"error: {exc}", markup=False)
        raise typer.Exit(1 if isinstance(exc, CannotAnalyze) else 2) from None
    except Exception as exc:
        from sqlalchemy.exc import SQLAlchemyError

        if isinstance(exc, SQLAlchemyError):
            err.print(f"error: {database_message(exc)}", markup=False)
            raise typer.Exit(2) from None
        raise


def database_message(exc: Exception) -> str:
    """A database error as one sentence with what to do (never the SQL, never a password)."""
    from sqlalchemy.exc import OperationalError

    cause = getattr(exc, "orig", None) or exc
    first = str(cause).strip().splitlines()[0] if str(cause).strip() else type(cause).__name__
    where = ""
    if isinstance(exc, OperationalError):
        return (
            f"the store{where} could not be used ({type(cause).__name__}: {first}); check --db / ARCHIVE_DB and "
            "that the database is reachable, then run `archive index`"
        )
    return f"the store{where} is not as expected ({type(cause).__name__}: {first}); run `archive index` to rebuild it"


def emit_rows(rows: list[dict[str, Any]], columns: Sequence[str], fmt: Format, title: str = "") -> None:
    """Rows as a table fitted to the terminal (tab-separated when piped), JSON or CSV: see archive.render.tables."""
    from archive.render.tables import emit_rows as emit

    emit(rows, columns, fmt, title, console=out)


def show_progress() -> bool:
    return err.is_terminal and not os.environ.get("CI")
