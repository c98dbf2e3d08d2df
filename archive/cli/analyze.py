"""The analyze command: one test, from its numbers to a verdict per arm."""

from __future__ import annotations

import json
import sys
from dataclasses import asdict
from enum import StrEnum
from pathlib import Path
from typing import Annotated

import typer

from archive.cli.common import RecordsOption, err, out, print_problems, user_errors
from archive.cli.values import share_option


class Adjust(StrEnum):
    bh = "bh"
    holm = "holm"


class MemoFormat(StrEnum):
    table = "table"
    json = "json"
    markdown = "markdown"


def analyze(
    record_id: Annotated[str | None, typer.Argument(metavar="ID", help="Id of a test in the records folder.")] = None,
    file: Annotated[
        Path | None, typer.Option("--file", help="Analyse this record file instead (not yet filed).")
    ] = None,
    fmt: Annotated[MemoFormat, typer.Option("--format", "-f", help="table, json or markdown.")] = MemoFormat.table,
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
    srm_alpha: Annotated[float, typer.Option(help="Sample ratio mismatch alarm threshold.")] = 0.001,
    replicates: Annotated[int, typer.Option(help="Bootstrap replicates for order-level revenue.")] = 1000,
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
    records: RecordsOption = Path("records"),
) -> None:
    """Analyse one test: trust checks, lift and probabilities per arm, revenue, verdicts, a recommendation."""
    from archive.analysis import Settings
    from archive.analysis import analyze as run_analysis
    from archive.analysis.segments import analyze_segments
    from archive.records.load import load_record
    from archive.records.problems import errors
    from archive.render.analysis import build_memo
    from archive.render.markdown import render_markdown
    from archive.render.terminal import render_terminal

    with user_errors():
        path = _record_path(record_id, file, records)
        loaded, problems = load_record(path, expect_stem=file is None)
        if loaded is None or errors(problems):
            print_problems(problems)
            err.print(f"{path} has errors; fix them (see `archive check`) before analysing.", markup=False)
            raise typer.Exit(1)
        settings = Settings(margin=margin, srm_alpha=srm_alpha, bootstrap_replicates=replicates)
        result = run_analysis(loaded.record, loaded.orders, settings)
        segments = analyze_segments(loaded.record, by, adjust.value, settings) if by else None
        history = _history(loaded.record, records, prior) if prior != "uniform" else None
        written = []
        if plot is not None:
            from archive.render.plots import posterior_lift_plot

            written.append(posterior_lift_plot(loaded.record, result, plot, settings.prior))
        if forest is not None and segments is not None:
            from archive.render.plots import segment_forest_plot

            for c in result.comparisons:
                target = forest.with_name(f"{forest.stem}-{c.arm}{forest.suffix or '.svg'}")
                written.append(segment_forest_plot(segments, c.arm, target))
    if fmt is MemoFormat.json:
        data = result.to_dict()
        data["segments"] = segments.to_dict() if segments is not None else None
        data["history_prior"] = (
            None
            if history is None
            else {
                "prior": {**asdict(history[0]), "label": history[0].label()},
                "comparisons": [asdict(i) for i in history[1]],
            }
        )
        sys.stdout.write(json.dumps(data, indent=2, ensure_ascii=False) + "\n")
    else:
        memo = build_memo(result, segments)
        if history is not None:
            from archive.render.planning import informed_section

            memo.sections.insert(2, informed_section(history[1], history[0]))
        if fmt is MemoFormat.markdown:
            sys.stdout.write(render_markdown(memo))
        else:
            render_terminal(memo, out)
    for path in written:
        err.print(f"plot written to {path}", markup=False)


def _history(record, records: Path, prior: str):  # type: ignore[no-untyped-def]
    """The history prior for this test and each comparison's lift under it."""
    from archive.planning.priors import informed_lift, prior_for_record
    from archive.pooling.effects import load_archive_effects
    from archive.stats.proportions import log_risk_ratio

    if prior != "history":
        raise ValueError("--prior is uniform or history")
    _, effects = load_archive_effects(records)
    chosen = prior_for_record(effects, record)
    control = record.control_arm()
    minimum = record.plan.minimum_lift if record.plan else None
    items = []
    for arm in record.arms:
        if arm.control:
            continue
        log_rr, var, _ = log_risk_ratio(arm.conversions, arm.visitors, control.conversions, control.visitors)
        items.append(informed_lift(arm.name, log_rr, var**0.5, chosen, minimum))
    return chosen, items


def _record_path(record_id: str | None, file: Path | None, records: Path) -> Path:
    if (record_id is None) == (file is None):
        raise ValueError("give either a test ID or --file PATH")
    if file is not None:
        if not file.is_file():
            raise FileNotFoundError(f"{file} not found")
        return file
    for suffix in (".yaml", ".yml"):
        candidate = records / f"{record_id}{suffix}"
        if candidate.is_file():
            return candidate
    raise FileNotFoundError(f"no record {record_id!r} in {records}; list them with `archive list`")
