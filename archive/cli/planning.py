"""Commands that turn history into the next test: prior, plan, calibrate."""

from __future__ import annotations

import json
import sys
from dataclasses import asdict
from pathlib import Path
from typing import Annotated

import typer

from archive.cli.analyze import MemoFormat
from archive.cli.common import RecordsOption, err, out, user_errors
from archive.cli.values import share_option


def prior(
    theme: Annotated[str, typer.Option(help="Theme of the new test.")],
    page_area: Annotated[str | None, typer.Option(help="Page area of the new test.")] = None,
    lift: Annotated[float | None, typer.Option(help="Also give P(true lift > this), e.g. 0.05.")] = None,
    fmt: Annotated[str, typer.Option("--format", "-f", help="table, json, markdown or yaml.")] = "table",
    records: RecordsOption = Path("records"),
) -> None:
    """The prior for the true lift of a new test of a theme (and page area), from the archive."""
    from archive.planning.priors import baseline_prior, lift_prior, prior_yaml
    from archive.pooling.effects import load_archive_effects
    from archive.render.markdown import render_markdown
    from archive.render.planning import prior_memo
    from archive.render.terminal import render_terminal

    with user_errors():
        loaded, effects = load_archive_effects(records)
        result = lift_prior(effects, theme, page_area)
        baseline = baseline_prior([lr.record for lr in loaded], page_area) if page_area else None
        if fmt not in ("table", "json", "markdown", "yaml"):
            raise ValueError("--format is table, json, markdown or yaml")
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
    fmt: Annotated[MemoFormat, typer.Option("--format", "-f", help="table, json or markdown.")] = MemoFormat.table,
    records: RecordsOption = Path("records"),
) -> None:
    """Visitors per arm, whole weeks, and (with --theme) the assurance and risks history implies."""
    from archive.planning.plan import plan_test
    from archive.planning.priors import baseline_prior, lift_prior
    from archive.pooling.effects import load_archive_effects
    from archive.pooling.groups import pool
    from archive.render.markdown import render_markdown
    from archive.render.planning import plan_memo
    from archive.render.terminal import render_terminal

    with user_errors():
        loaded, effects = (None, None)
        if theme or baseline is None:
            loaded, effects = load_archive_effects(records)
        if baseline is None:
            if page_area is None or loaded is None:
                raise ValueError("give --baseline, or --page-area to take it from the archive")
            fitted = baseline_prior([lr.record for lr in loaded], page_area)
            if fitted is None:
                raise ValueError(f"no history of control arms on page area {page_area!r}: give --baseline")
            baseline = fitted.mean
        weights = [float(w) for w in split.split(",")] if split else None
        history = win_rate = None
        if theme and effects is not None:
            history = lift_prior(effects, theme, page_area)
            groups = {g.key: g for g in pool(effects, "theme", permutations=0).groups}
            if theme in groups:
                win_rate = groups[theme].wins.shrunk
        result = plan_test(
            baseline,
            minimum_lift,
            alpha,
            power,
            arms,
            weights,
            daily_visitors,
            rho,
            correction,  # type: ignore[arg-type]
            history,
            win_rate,
        )
        if write:
            _write_plan(records, write, title, page_area, theme, result, weights, history)
    if fmt is MemoFormat.json:
        sys.stdout.write(json.dumps(asdict(result), indent=2) + "\n")
    elif fmt is MemoFormat.markdown:
        sys.stdout.write(render_markdown(plan_memo(result)))
    else:
        render_terminal(plan_memo(result), out)
    if write:
        err.print(f"wrote {records / (write + '.yaml')} (status planned); fill in the hypothesis and arms.")


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
    fmt: Annotated[MemoFormat, typer.Option("--format", "-f", help="table, json or markdown.")] = MemoFormat.table,
    records: RecordsOption = Path("records"),
) -> None:
    """Replay the archive in date order: were history-based forecasts better than a flat prior?"""
    from archive.planning.calibration import calibrate as run
    from archive.pooling.effects import load_archive_effects
    from archive.render.markdown import render_markdown
    from archive.render.planning import calibration_memo
    from archive.render.terminal import render_terminal

    with user_errors():
        _, effects = load_archive_effects(records)
        result = run(effects)
    if fmt is MemoFormat.json:
        sys.stdout.write(json.dumps(result.to_dict(), indent=2) + "\n")
    elif fmt is MemoFormat.markdown:
        sys.stdout.write(render_markdown(calibration_memo(result)))
    else:
        render_terminal(calibration_memo(result), out)
