"""The analyze command: one test, from its numbers to a verdict per arm."""

from __future__ import annotations

import json
import sys
from dataclasses import asdict
from enum import StrEnum
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any

import typer

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
from archive.cli.values import share_option
from archive.render.markdown import render_markdown
from archive.render.terminal import render_terminal

if TYPE_CHECKING:
    from archive.analysis import Settings
    from archive.api import TestAnalysis


class Adjust(StrEnum):
    bh = "bh"
    holm = "holm"


class MemoFormat(StrEnum):
    table = "table"
    json = "json"
    markdown = "markdown"
    csv = "csv"


def analyze(
    record_id: Annotated[str | None, typer.Argument(metavar="ID", help="Id of a filed test.")] = None,
    file: Annotated[
        Path | None, typer.Option("--file", help="Analyse this record file instead (not yet filed).")
    ] = None,
    fmt: Annotated[
        MemoFormat, typer.Option("--format", "-f", help="table, json, markdown or csv (one row per arm).")
    ] = MemoFormat.table,
    plot: Annotated[
        Path | None, typer.Option("--plot", help="Write the posterior lift plot here (.svg or .png).")
    ] = None,
    margin: Annotated[
        float | None,
        typer.Option(
            parser=share_option,
            metavar="SHARE",
            help="Equivalence margin on relative lift, 5% or 0.05 (default: the plan's minimum_lift).",
        ),
    ] = None,
    srm_alpha: Annotated[
        float | None, typer.Option(help="Sample ratio mismatch alarm threshold (default 0.001).")
    ] = None,
    replicates: Annotated[
        int | None, typer.Option(help="Bootstrap replicates for order-level revenue (default 1000).")
    ] = None,
    by: Annotated[
        list[str] | None, typer.Option("--by", help="Segment dimension to slice by (repeat for several).")
    ] = None,
    adjust: Annotated[Adjust, typer.Option(help="Multiple-comparison adjustment across segments.")] = Adjust.bh,
    prior: Annotated[
        str, typer.Option(help="uniform (Beta(1,1) per arm) or history: also show lifts under the archive's prior.")
    ] = "uniform",
    forest: Annotated[
        Path | None, typer.Option(help="With --by: write one forest plot per arm, named <stem>-<arm><suffix>.")
    ] = None,
    details: Annotated[
        bool, typer.Option("--details", help="Also show the statistics behind the answer (terminal).")
    ] = False,
    records: RecordsOption = None,
    db: DbOption = None,
    no_sync: NoSyncOption = False,
) -> None:
    """Analyse one test: trust checks, lift and probabilities per arm, revenue, verdicts, a recommendation."""
    import dataclasses

    from archive.api import Archive

    with user_errors():
        if (record_id is None) == (file is None):
            raise ValueError("give either a test ID or --file PATH")
        changes: dict[str, Any] = {
            k: v for k, v in (("margin", margin), ("srm_alpha", srm_alpha), ("bootstrap_replicates", replicates))
        }
        changes = {k: v for k, v in changes.items() if v is not None}
        if file is not None:
            if prior != "uniform":
                raise ValueError("--prior history needs a filed test (give its ID)")
            settings = dataclasses.replace(_archive_settings(records), **changes)
            result = Archive.analyze_file(file, settings, by, adjust.value)
        else:
            archive = open_archive(records, db, no_sync)
            ready(archive)
            from archive.cli.catalog import known_value

            known_value("id", "test", record_id or "", archive.ids())
            settings = dataclasses.replace(archive.settings, **changes)
            result = archive.analyze(record_id or "", settings, by, adjust.value, prior)
        written = _plots(result, plot, forest, settings)
    if fmt is MemoFormat.json:
        sys.stdout.write(json.dumps(_json(result), indent=2, ensure_ascii=False) + "\n")
    elif fmt is MemoFormat.csv:
        from archive.render.analysis import ARM_COLUMNS, arm_rows

        emit_rows(arm_rows(result.analysis), ARM_COLUMNS, Format.csv)
    else:
        memo = result.memo
        if result.history is not None:
            from archive.render.planning import informed_section

            memo.sections.insert(2, informed_section(result.history[1], result.history[0]))
        if fmt is MemoFormat.markdown:
            sys.stdout.write(render_markdown(memo))
        else:
            render_terminal(memo, out, details=details)
    for path in written:
        err.print(f"plot written to {path}", markup=False)


def _archive_settings(records: Path | None) -> Settings:
    """The settings of the archive around us, or the defaults outside any archive."""
    from archive.analysis import Settings
    from archive.api import NoArchive

    try:
        return open_archive(records).settings
    except NoArchive:
        return Settings()


def _json(result: TestAnalysis) -> dict[str, object]:
    data = result.analysis.to_dict()
    data["segments"] = result.segments.to_dict() if result.segments is not None else None
    history = result.history
    data["history_prior"] = (
        None
        if history is None
        else {
            "prior": {**asdict(history[0]), "label": history[0].label()},
            "comparisons": [asdict(i) for i in history[1]],
        }
    )
    return data


def _plots(result: TestAnalysis, plot: Path | None, forest: Path | None, settings) -> list[Path]:  # type: ignore[no-untyped-def]
    written = []
    if plot is not None:
        from archive.render.plots import posterior_lift_plot

        written.append(posterior_lift_plot(result.analysis, plot, settings.prior))
    if forest is not None and result.segments is not None:
        from archive.render.plots import segment_forest_plot

        for c in result.analysis.comparisons:
            target = forest.with_name(f"{forest.stem}-{c.arm}{forest.suffix or '.svg'}")
            written.append(segment_forest_plot(result.segments, c.arm, target))
    return written
