"""Commands that turn history into the next test: prior, plan, calibrate."""

from __future__ import annotations

import json
import sys
from dataclasses import asdict
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
    show_progress,
    user_errors,
)
from archive.cli.values import share_option
from archive.render.markdown import render_markdown
from archive.render.terminal import render_terminal


def prior(
    theme: Annotated[str, typer.Option(help="Theme of the new test.")],
    page_area: Annotated[str | None, typer.Option(help="Page area of the new test.")] = None,
    lift: Annotated[float | None, typer.Option(help="Also give P(true lift > this), e.g. 0.05.")] = None,
    fmt: Annotated[str, typer.Option("--format", "-f", help="table, json, markdown or yaml.")] = "table",
    records: RecordsOption = None,
    db: DbOption = None,
    no_sync: NoSyncOption = False,
) -> None:
    """The prior for the true lift of a new test of a theme (and page area), from the archive."""
    from archive.cli.catalog import known_value
    from archive.planning.priors import prior_yaml
    from archive.render.planning import prior_memo

    with user_errors():
        if fmt not in ("table", "json", "markdown", "yaml"):
            raise ValueError("--format is table, json, markdown or yaml")
        archive = open_archive(records, db, no_sync)
        ready(archive)
        known_value("theme", "theme", theme, archive.values("theme"))
        if page_area:
            known_value("page_area", "page area", page_area, archive.values("page_area"))
        found = archive.prior(theme, page_area)
        result, baseline = found.lift, found.baseline
    if fmt == "json":
        data = {
            **asdict(result),
            "lift": result.lift,
            "interval": result.interval(),
            "prob_positive": result.prob_above(0),
        }
        if lift is not None:
            data["prob_above_lift"] = result.prob_above(lift)
        data["baseline"] = None if baseline is None else {**asdict(baseline), "mean": baseline.mean}
        sys.stdout.write(json.dumps(data, indent=2) + "\n")
    elif fmt == "yaml":
        sys.stdout.write(prior_yaml(result, baseline))
    elif fmt == "markdown":
        sys.stdout.write(render_markdown(prior_memo(result, baseline, lift)))
    else:
        render_terminal(prior_memo(result, baseline, lift), out)


def plan(
    minimum_lift: Annotated[
        float,
        typer.Option(parser=share_option, metavar="SHARE", help="Smallest relative lift that matters: 5% or 0.05."),
    ],
    baseline: Annotated[float | None, typer.Option(help="Control conversion rate (default: the page area's).")] = None,
    page_area: Annotated[str | None, typer.Option(help="Page area (for the baseline and the prior).")] = None,
    theme: Annotated[str | None, typer.Option(help="Theme: plan with the history prior of this theme.")] = None,
    alpha: Annotated[float, typer.Option(help="Two-sided significance level.")] = 0.05,
    power: Annotated[float, typer.Option(help="Power at the minimum lift.")] = 0.8,
    arms: Annotated[int, typer.Option(help="Number of arms, control included.")] = 2,
    split: Annotated[str | None, typer.Option(help="Traffic weights, control first, e.g. 50,25,25.")] = None,
    daily_visitors: Annotated[float | None, typer.Option(help="Visitors entering the test per day.")] = None,
    rho: Annotated[float, typer.Option(help="Correlation with a pre-period covariate (variance x 1 - rho²).")] = 0.0,
    correction: Annotated[str, typer.Option(help="bonferroni or dunnett, for several treatments.")] = "bonferroni",
    write: Annotated[str | None, typer.Option(help="Save the plan as a new planned record with this id.")] = None,
    title: Annotated[str | None, typer.Option(help="Title of the record written by --write.")] = None,
    fmt: Annotated[MemoFormat, typer.Option("--format", "-f", help="table, json, markdown or csv.")] = MemoFormat.table,
    records: RecordsOption = None,
    db: DbOption = None,
    no_sync: NoSyncOption = False,
) -> None:
    """Visitors per arm, whole weeks, and (with --theme) the assurance and risks history implies."""
    from archive.render.planning import plan_memo

    with user_errors():
        weights = [float(w) for w in split.split(",")] if split else None
        needs_history = bool(theme) or baseline is None or write is not None
        archive = open_archive(records, db, no_sync) if needs_history else None
        if archive is not None:
            ready(archive)
        if archive is None:
            from archive.planning.plan import plan_test

            assert baseline is not None
            result = plan_test(baseline, minimum_lift, alpha, power, arms, weights, daily_visitors, rho, correction)  # type: ignore[arg-type]
        else:
            result = archive.plan(
                baseline,
                minimum_lift,
                page_area=page_area,
                theme=theme,
                alpha=alpha,
                power=power,
                arms=arms,
                split=weights,
                daily_visitors=daily_visitors,
                rho=rho,
                correction=correction,
            )
        if write:
            assert archive is not None
            history = archive.prior(theme, page_area).lift if theme else None
            _write_plan(archive.records_dir, write, title, page_area, theme, result, weights, history)
    if fmt is MemoFormat.json:
        sys.stdout.write(json.dumps(asdict(result), indent=2) + "\n")
    elif fmt is MemoFormat.csv:
        row = {k: v for k, v in asdict(result).items() if not isinstance(v, dict | list)}
        emit_rows([row], list(row), Format.csv)
    elif fmt is MemoFormat.markdown:
        sys.stdout.write(render_markdown(plan_memo(result)))
    else:
        render_terminal(plan_memo(result), out)
    if write:
        err.print(f"wrote {write}.yaml in the records folder (status planned); fill in the hypothesis and arms.")


def _write_plan(records, record_id, title, page_area, theme, result, weights, history) -> None:  # type: ignore[no-untyped-def]
    from archive.records.files import write_new
    from archive.records.template import Draft, arms_from_names, render_plan

    if not page_area or not theme or not title:
        raise ValueError("--write needs --title, --page-area and --theme")
    names = ["control"] + [f"variant-{i}" for i in range(1, result.arms)]
    draft = Draft(id=record_id, title=title, page_area=page_area, themes=[theme], arms=arms_from_names(names))
    text = render_plan(draft, result, weights or [1.0] * result.arms, history)
    write_new(records / f"{record_id}.yaml", text)


def calibrate(
    fmt: Annotated[MemoFormat, typer.Option("--format", "-f", help="table, json, markdown or csv.")] = MemoFormat.table,
    records: RecordsOption = None,
    db: DbOption = None,
    no_sync: NoSyncOption = False,
) -> None:
    """Replay the archive in date order: were history-based forecasts better than a flat prior?"""
    from archive.render.planning import calibration_memo

    with user_errors():
        archive = open_archive(records, db, no_sync)
        ready(archive)
        if show_progress():
            from rich.progress import Progress

            with Progress(console=err, transient=True) as bar:
                task = bar.add_task("replaying the archive", total=None)
                result = archive.calibrate(progress=lambda done, total: bar.update(task, completed=done, total=total))
        else:
            result = archive.calibrate()
    if fmt is MemoFormat.json:
        sys.stdout.write(json.dumps(result.to_dict(), indent=2) + "\n")
    elif fmt is MemoFormat.csv:  # the reliability table: forecast bins against what happened
        bins = [asdict(b) for b in result.reliability]
        emit_rows(
            bins, ["low", "high", "forecasts", "mean_forecast", "observed", "observed_low", "observed_high"], Format.csv
        )
    elif fmt is MemoFormat.markdown:
        sys.stdout.write(render_markdown(calibration_memo(result)))
    else:
        render_terminal(calibration_memo(result), out)
