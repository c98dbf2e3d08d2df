"""What every command shares: the records and database options, output formats, and mapping errors to exits."""

from __future__ import annotations

import contextlib
import os
from collections.abc import Iterator, Sequence
from enum import StrEnum
from pathlib import Path
from typing import Annotated, Any

import typer
from rich.console import Console

from archive.records.files import FileExists
from archive.records.problems import ArchiveInvalid, Problem

RECORDS_ENV = "ARCHIVE_RECORDS"

RecordsOption = Annotated[
    Path,
    typer.Option(
        "--records",
        "-r",
        envvar=RECORDS_ENV,
        help="Folder of YAML records.",
        file_okay=False,
    ),
]
DbOption = Annotated[
    str | None,
    typer.Option("--db", envvar="ARCHIVE_DB", help="SQLAlchemy URL of the index (default: SQLite in .archive/)."),
]


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
        err.print(f"error: {exc}", markup=False)
        raise typer.Exit(2) from None
    except Exception as exc:
        from sqlalchemy.exc import SQLAlchemyError

        if isinstance(exc, SQLAlchemyError):
            err.print(f"error: the index database could not be used: {exc}", markup=False)
            err.print("check --db / ARCHIVE_DB, or delete the .archive folder and run `archive index`.")
            raise typer.Exit(2) from None
        raise


def emit_rows(rows: list[dict[str, Any]], columns: Sequence[str], fmt: Format, title: str = "") -> None:
    """Rows as a table fitted to the terminal (tab-separated when piped), JSON or CSV: see archive.render.tables."""
    from archive.render.tables import emit_rows as emit

    emit(rows, columns, fmt, title, console=out)


def show_progress() -> bool:
    return err.is_terminal and not os.environ.get("CI")
