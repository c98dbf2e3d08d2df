"""Memos for priors, plans and the calibration replay (rendered by :mod:`archive.render`)."""

from __future__ import annotations

import math

from archive.planning.calibration import Calibration
from archive.planning.plan import TestPlan
from archive.planning.priors import BaselinePrior, InformedLift, LiftPrior
from archive.render.formats import interval, pct
from archive.render.model import Memo, Section, Table


def prior_memo(prior: LiftPrior, baseline: BaselinePrior | None, lift: float | None) -> Memo:
    low, high = prior.interval()
    lead = [
        f"From {prior.source}: expect a true lift around {pct(prior.lift, 1, True)}; the true lifts of 95% of such "
        f"tests lie between {pct(low, 1, True)} and {pct(high, 1, True)}; the chance it helps at all is "
        f"{prior.prob_above(0.0):.0%}.",
    ]
    if prior.comparisons:
        lead.append(
            f"{prior.weight_on_theme:.0%} of that expectation comes directly from the average of the theme's own "
            "tests; the rest from the archive-wide average (which includes them) and the hyperprior."
        )
    lead.append(f"Technically: {prior.label()}.")
    if prior.warning:
        lead.append(f"Warning: {prior.warning}.")
    bullets = [
        f"P(true lift > 0) = {prior.prob_above(0.0):.3f}",
        f"expected lift {pct(prior.lift, 2, True)}; 95% of true lifts of such tests between {pct(low, 1, True)} and "
        f"{pct(high, 1, True)} (a normal summary of the model's predictive mixture)",
        f"true lifts of tests within a theme spread by sd {math.sqrt(prior.tau2):.4f} on the log scale (square root "
        f"of the posterior mean of tau²); theme averages differ by sd {prior.omega:.4f} (posterior mean of omega)",
    ]
    if lift is not None:
        bullets.append(f"P(true lift > {pct(lift, 1, True)}) = {prior.prob_above(lift):.3f}")
    if baseline is not None:
        b_low, b_high = baseline.interval()
        bullets.append(
            f"baseline conversion on {baseline.page_area}: Beta({baseline.alpha:.1f}, {baseline.beta:.1f}) fitted to "
            f"{baseline.controls} control arms, mean {pct(baseline.mean, 2)}, 95% [{pct(b_low, 2)}, {pct(b_high, 2)}]"
        )
    assumptions = [
        "Three-level normal model of the trusted comparisons on the log scale: tests within their theme, themes "
        "within the archive (Gelman et al., BDA3 ch. 5); each comparison counted once (in this theme when it "
        "carries it, else in its first); the comparisons of a multi-arm test enter as independent, with the "
        "shared control split evenly across them.",
        prior.hyperprior,
        "The lift prior is by theme; the page area sets only the baseline conversion rate.",
    ]
    return Memo(
        "Prior for a new test",
        lead,
        [Section("What history says", bullets=bullets), Section("Assumptions", bullets=assumptions)],
    )


def plan_memo(p: TestPlan) -> Memo:
    lead = [
        f"{p.visitors_per_arm:,} visitors per treatment arm and {p.visitors_control:,} in control "
        f"({p.visitors_total:,} in all) to detect +{p.minimum_lift:.1%} on a {pct(p.baseline, 2)} baseline with power "
        f"{p.power:.0%} at two-sided alpha {p.alpha:g} ({p.correction}: {p.alpha_per_comparison:.4g} per comparison)."
    ]
    if p.weeks is not None:
        lead.append(f"At {p.daily_visitors:,.0f} visitors a day: {p.weeks} whole weeks ({p.days} days).")
    bullets = []
    if p.assurance is not None:
        bullets += [
            f"assurance (P of a significant win that is real, averaged over the prior): {p.assurance:.3f}, "
            f"beside its ceiling P(true lift > 0) = {p.assurance_ceiling:.3f}",
            f"P(any significant win, false ones included): {p.any_significant_win:.3f}",
        ]
    if p.power_at_expected_lift is not None:
        bullets.append(f"power at the lift history expects: {p.power_at_expected_lift:.2f}")
    if p.exaggeration_at_expected_lift is not None:
        bullets.append(
            f"a winner's observed lift will overstate the truth about {p.exaggeration_at_expected_lift:.2f}x "
            "at that power (Gelman & Carlin 2014)"
        )
    if p.false_positive_risk is not None and p.theme_success_rate is not None:
        bullets.append(
            f"the theme's implied true success rate {pct(p.theme_success_rate)} makes a winner a false positive "
            f"with probability {pct(p.false_positive_risk)} (Kohavi, Deng & Vermeer 2022, with the ship rule's "
            f"false-win rate {pct(p.false_win_rate, 2)} per comparison)"
        )
    bullets += [f"Warning: {w}." for w in p.warnings]
    sections = [Section("The odds", bullets=bullets)] if bullets else []
    sections.append(Section("Assumptions", bullets=list(p.assumptions)))
    return Memo("Plan for a new test", lead, sections)


def informed_section(items: list[InformedLift], prior: LiftPrior) -> Section:
    rows = [
        [
            i.arm,
            pct(i.observed_lift, 1, True),
            f"{pct(i.shrunk_lift, 1, True)} {interval(i.low, i.high)}",
            f"{i.prob_positive:.3f}",
            "" if i.prob_above_minimum is None else f"{i.prob_above_minimum:.3f}",
            f"{i.weight_on_data:.0%}",
        ]
        for i in items
    ]
    table = Table(
        ["arm", "observed lift", "with history prior (95%)", "P(lift > 0)", "P(lift > plan minimum)", "weight on data"],
        rows,
    )
    return Section(
        "With the history prior",
        paragraphs=[
            f"{prior.label()}; combined with each comparison's normal likelihood of the log lift.",
            prior.hyperprior,
        ]
        + ([f"Warning: {prior.warning}."] if prior.warning else []),
        tables=[table],
    )


def calibration_memo(c: Calibration) -> Memo:
    rows = []
    scores = [("history prior", c.history), (f"flat prior (sd {c.flat_prior_sd:g})", c.flat)]
    if c.running is not None:
        scores.append(("running win rate", c.running))
    for name, s in scores:
        rows.append(
            [
                name,
                str(s.forecasts),
                pct(s.coverage),
                "n/a" if s.mean_width is None else f"{s.mean_width:.3f}",
                "n/a" if s.brier is None else f"{s.brier:.4f}",
                pct(s.mean_forecast),
                pct(s.win_rate),
            ]
        )
    table = Table(
        [
            "forecast",
            "comparisons",
            "95% interval coverage",
            "mean width (log)",
            "Brier of P(win)",
            "mean P(win)",
            "observed wins",
        ],
        rows,
    )
    lead = [f"{c.history.forecasts} comparisons replayed in date order; {c.skipped} had too little history."]
    if c.history.brier is not None and c.flat.brier is not None:
        better = c.history.brier < c.flat.brier
        lead.append(
            "History forecasts better than a flat prior (lower Brier score)."
            if better
            else "History does not forecast better than a flat prior here."
        )
    if c.history.brier is not None and c.running is not None and c.running.brier is not None:
        lead.append(
            "History also beats the running win rate."
            if c.history.brier < c.running.brier
            else "History does not beat the running win rate: it adds nothing beyond how often tests win."
        )
    filled = [b for b in c.reliability if b.forecasts and b.observed_low is not None and b.observed_high is not None]
    if filled:
        inside = sum(b.observed_low <= (b.mean_forecast or 0.0) <= b.observed_high for b in filled)  # type: ignore[operator]
        lead.append(
            f"Reliability: in {inside} of {len(filled)} forecast bins the mean forecast lies inside the interval of "
            "the observed share of wins."
        )
    bins = Table(
        ["P(win) forecast", "comparisons", "mean forecast", "observed wins (Jeffreys 95%)"],
        [
            [
                f"{pct(b.low, 0)}-{pct(b.high, 0)}",
                str(b.forecasts),
                pct(b.mean_forecast),
                "n/a" if b.observed is None else f"{pct(b.observed)} {interval(b.observed_low, b.observed_high)}",
            ]
            for b in c.reliability
        ],
    )
    return Memo(
        "Calibration of history priors",
        lead,
        [
            Section("Scores", tables=[table], bullets=c.notes),
            Section("Reliability of the history prior's P(win)", tables=[bins]),
        ],
    )
