"""The pool command: what kinds of changes tend to win across the archive."""

from __future__ import annotations

import json
import sys
from enum import StrEnum
from pathlib import Path
from typing import Annotated

import typer

from archive.cli.analyze import MemoFormat
from archive.cli.common import (
    DbOption,
    Format,
    NoSyncOption,
    RecordsOption,
    emit_rows,
    err,
    open_archive,
    out,
    ready,
    user_errors,
)
from archive.render.markdown import render_markdown
from archive.render.terminal import render_terminal


class Method(StrEnum):
    REML = "REML"
    PM = "PM"
    DL = "DL"


def pool(
    by: Annotated[
        str, typer.Option(help="theme, page-area, theme,page-area, tag, year, or segment:DIMENSION.")
    ] = "theme",
    method: Annotated[
        Method, typer.Option(help="tau² estimator (REML default; DL is shown as a comparison).")
    ] = Method.REML,
    hksj: Annotated[bool, typer.Option(help="Hartung-Knapp-Sidik-Jonkman interval (t, k-1 df).")] = True,
    include_untrusted: Annotated[bool, typer.Option(help="Keep tests that failed a trust check.")] = False,
    fmt: Annotated[
        MemoFormat, typer.Option("--format", "-f", help="table, json, markdown or csv (one row per group).")
    ] = MemoFormat.table,
    plots: Annotated[
        Path | None, typer.Option(help="Write a forest plot per group and a funnel plot here (SVG).")
    ] = None,
    details: Annotated[
        bool, typer.Option("--details", help="Also show the statistics behind the answer (terminal).")
    ] = False,
    records: RecordsOption = None,
    db: DbOption = None,
    no_sync: NoSyncOption = False,
) -> None:
    """Pool every comparison by group: pooled lift, spread, prediction interval, win rates, realistic lifts."""
    from archive.render.pooling import build_pool_memo

    with user_errors():
        archive = open_archive(records, db, no_sync)
        ready(archive)
        result = archive.pool(by.replace("page-area", "page_area"), method.value, hksj, include_untrusted)
        written = []
        if plots is not None:
            from archive.records.model import canonical_label
            from archive.render.plots import funnel_plot, group_forest_plot

            for group in result.groups:
                written.append(group_forest_plot(group, plots / f"forest-{canonical_label(group.key) or 'group'}.svg"))
            written.append(funnel_plot(result, plots / "funnel.svg"))
    if fmt is MemoFormat.json:
        sys.stdout.write(json.dumps(result.to_dict(), indent=2, ensure_ascii=False) + "\n")
    elif fmt is MemoFormat.csv:
        from archive.render.pooling import GROUP_COLUMNS, group_rows

        emit_rows(group_rows(result), GROUP_COLUMNS, Format.csv)
    elif fmt is MemoFormat.markdown:
        sys.stdout.write(render_markdown(build_pool_memo(result)))
    else:
        render_terminal(build_pool_memo(result), out, details=details)
    if written:
        err.print(f"{len(written)} plots written to {plots}", markup=False)
