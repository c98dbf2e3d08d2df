"""The pool command: what kinds of changes tend to win across the archive."""

from __future__ import annotations

import json
import sys
from enum import StrEnum
from pathlib import Path
from typing import Annotated

import typer

from archive.cli.analyze import MemoFormat
from archive.cli.common import RecordsOption, err, out, user_errors


class Method(StrEnum):
    REML = "REML"
    PM = "PM"
    DL = "DL"


def pool(
    by: Annotated[
        str, typer.Option(help="theme, page_area, theme,page_area, tag, year, or segment:DIMENSION.")
    ] = "theme",
    method: Annotated[
        Method, typer.Option(help="tau² estimator (REML default; DL is shown as a comparison).")
    ] = Method.REML,
    hksj: Annotated[bool, typer.Option(help="Hartung-Knapp-Sidik-Jonkman interval (t, k-1 df).")] = True,
    include_untrusted: Annotated[bool, typer.Option(help="Keep tests that failed a trust check.")] = False,
    fmt: Annotated[MemoFormat, typer.Option("--format", "-f", help="table, json or markdown.")] = MemoFormat.table,
    plots: Annotated[
        Path | None, typer.Option(help="Write a forest plot per group and a funnel plot here (SVG).")
    ] = None,
    records: RecordsOption = Path("records"),
) -> None:
    """Pool every comparison by group: pooled lift, spread, prediction interval, win rates, realistic lifts."""
    from archive.pooling.effects import load_archive_effects
    from archive.pooling.groups import pool as run_pool
    from archive.render.markdown import render_markdown
    from archive.render.pooling import build_pool_memo
    from archive.render.terminal import render_terminal

    with user_errors():
        grouping, segment = (by, None)
        if by.startswith("segment:"):
            grouping, segment = "segment", by.split(":", 1)[1]
        _, effects = load_archive_effects(records, segment=segment)
        if not effects:
            raise ValueError("no finished test with results to pool")
        result = run_pool(effects, grouping, method=method.value, hksj=hksj, include_untrusted=include_untrusted)
        if segment:
            result.by = by
        written = []
        if plots is not None:
            from archive.render.plots import funnel_plot, group_forest_plot

            for group in result.groups:
                safe = "".join(c if c.isalnum() or c in "-_" else "-" for c in group.key)
                written.append(group_forest_plot(group, plots / f"forest-{safe}.svg"))
            written.append(funnel_plot(result, plots / "funnel.svg"))
    if fmt is MemoFormat.json:
        sys.stdout.write(json.dumps(result.to_dict(), indent=2, ensure_ascii=False) + "\n")
    elif fmt is MemoFormat.markdown:
        sys.stdout.write(render_markdown(build_pool_memo(result)))
    else:
        render_terminal(build_pool_memo(result), out)
    if written:
        err.print(f"{len(written)} plots written to {plots}", markup=False)
