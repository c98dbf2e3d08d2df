"""The memo of a pooled archive."""

from __future__ import annotations

from archive.pooling.groups import MIN_GROUP, GroupResult, PoolResult
from archive.render.formats import interval, interval_plain_rate, pct, pvalue
from archive.render.model import Memo, Section, Table


def _lift(g: GroupResult) -> str:
    return f"{pct(g.lift, 1, True)} {interval(g.lift_low, g.lift_high)}"


def answer(p: PoolResult) -> list[str]:
    """What tends to win, in plain sentences: the kinds of change whose pooled lift is credibly above (or below)
    zero, what a new test of a kind can expect, and how far the shipped lifts overstate the truth."""
    kind = p.by.replace("_", " ")
    ranked = [g for g in p.groups if g.warning is None]
    wins = [g for g in ranked if g.lift_low > 0]
    losses = [g for g in ranked if g.lift_high < 0]
    if wins:
        named = "; ".join(f"{g.key} {_lift(g)} over {g.tests} tests" for g in wins[:3])
        first = f"What tends to win, by {kind}: {named}."
    else:
        first = f"No {kind} wins reliably: no pooled lift is credibly above zero."
    if losses:
        first += " Tends to lose: " + ", ".join(f"{g.key} {_lift(g)}" for g in losses[:3]) + "."
    lines = [first]
    spread = [g for g in wins if g.prediction_low is not None]
    if spread:
        g = spread[0]
        lines.append(
            f"A new {g.key} test should expect a true lift in {interval(g.prediction_low, g.prediction_high)} "
            "(tests of one kind differ; the interval of the pooled lift is about their average)."
        )
    prog = p.programme
    if prog.false_positive_risk is not None:
        sentence = f"About {pct(prog.false_positive_risk, 0)} of the winners are probably not real effects"
        if prog.shipped and prog.overstatement:
            sentence += (
                f", and shipped lifts overstate their realistic size about {prog.overstatement:.1f}x "
                f"({pct(prog.shipped_mean_observed_lift, 1, True)} observed, "
                f"{pct(prog.shipped_mean_shrunk_lift, 1, True)} to expect)"
            )
        lines.append(sentence + ".")
    return lines


def build_pool_memo(p: PoolResult) -> Memo:
    """What tends to win: the answer in plain sentences, the ranked groups, then the statistics behind them
    (sections marked as details)."""
    prog = p.programme
    rows_total = sum(g.comparisons for g in p.groups)
    counted = f"{prog.comparisons} comparisons pooled by {p.by.replace('_', ' ')}"
    if rows_total != prog.comparisons:
        counted += (
            f" (the rows add up to {rows_total}: a test with several {p.by.replace('_', ' ')}s counts in each of them)"
        )
    lead = [*answer(p), counted + "."]
    ranked_groups = [g for g in p.groups if g.warning is None]
    small_groups = [g for g in p.groups if g.warning is not None]
    headers = [
        p.by.replace("_", " "),
        "tests",
        "pooled lift (95% CI)",
        "next test likely in (95%)",
        "win rate",
        "shipped",
    ]

    def row(g: GroupResult) -> list[str]:
        return [
            g.key,
            str(g.tests),
            _lift(g),
            interval(g.prediction_low, g.prediction_high),
            f"{pct(g.wins.shrunk, 0)} [{pct(g.wins.shrunk_low, 0)}, {pct(g.wins.shrunk_high, 0)}]",
            f"{g.shipped.count}/{g.shipped.total}",
        ]

    ranked = Section(
        "What tends to win",
        paragraphs=[
            p.ranking[0].upper() + p.ranking[1:] + ". Win rate: the share of comparisons called winners, from the "
            "hierarchical model across groups (95% interval)."
        ],
        tables=[Table(headers, [row(g) for g in ranked_groups])],
    )
    sections = [ranked]
    if small_groups:
        sections.append(
            Section(
                "Too few tests to rank",
                paragraphs=[f"Fewer than {MIN_GROUP} comparisons each: the pooled figures are fragile."],
                tables=[Table(headers, [row(g) for g in small_groups])],
            )
        )
    spread_rows = [
        [
            g.key,
            str(g.comparisons),
            f"{g.tau2:.5f}" + (f" [{g.tau2_low:.5f}, {g.tau2_high:.5f}]" if g.tau2_high is not None else ""),
            f"{g.i_squared:.0%}",
            f"{g.wins.count}/{g.wins.total} {interval_plain_rate(g.wins)}",
            f"{pct(g.dl_lift, 1, True)} {interval(g.dl_low, g.dl_high)}",
        ]
        for g in p.groups
    ]
    sections.append(
        Section(
            "Spread between tests",
            paragraphs=[
                f"{p.method}. tau² is how much the true lifts of one kind differ (log scale; Q-profile 95% interval); "
                "I² the share of the observed spread that is real; winners are the raw count with a Jeffreys "
                "interval; DerSimonian-Laird shown for comparison."
            ],
            tables=[
                Table(
                    [p.by.replace("_", " "), "comparisons", "tau² [95%]", "I²", "winners (Jeffreys 95%)", "DL lift"],
                    spread_rows,
                )
            ],
            details=True,
        )
    )
    checks = [
        f"Observed win rate {pct(prog.win_rate.rate)} {interval_plain_rate(prog.win_rate)}"
        + (
            f"; implied true success rate {pct(prog.true_success_rate)} and false positive risk of a winner "
            f"{pct(prog.false_positive_risk)} (Kohavi & Chen 2024, with the ship rule's false-win rate "
            f"{pct(prog.false_win_rate, 2)} per comparison at alpha {prog.alpha:g}, assumed power "
            f"{prog.assumed_power:.0%})."
            if prog.false_positive_risk is not None
            else "."
        )
    ]
    if prog.shipped and prog.shipped_mean_observed_lift is not None and prog.lee_shen_bias is not None:
        checks.append(
            f"Lee & Shen (2018): the summed log-lifts of the {prog.shipped} shipped comparisons "
            f"({prog.summed_shipped_log_lift:.3f}) overstate their true sum by about {prog.lee_shen_bias:.3f}."
        )
    if p.win_rates:
        checks.append(p.win_rates)
    if p.between_groups is not None:
        b = p.between_groups
        checks.append(f"Do the groups differ? Q between {b.q:.2f}, df {b.df}, p {pvalue(b.p_value)}.")
    if p.meta_regression is not None:
        m = p.meta_regression
        checks.append(
            f"Meta-regression on {m.moderator}: slope {m.slope:+.4f} log-lift per year (SE {m.se:.4f}), "
            f"p {pvalue(m.p_value)}, "
            + (
                f"permutation p {pvalue(m.permutation_p_value)} ({m.permutations} permutations)."
                if m.permutations
                else f"no permutation p: with {m.k} comparisons the z-test is accurate."
            )
        )
    if p.egger is not None:
        e = p.egger
        checks.append(f"Egger's test for small-study effects: intercept {e.intercept:.2f}, p {pvalue(e.p_value)}.")
        if e.warning:
            checks.append(f"Warning: {e.warning}.")
    if p.excluded:
        checks.append(f"Left out after a failed trust check: {', '.join(p.excluded)}.")
    if p.double_zero:
        checks.append(f"Left out, no conversions in either arm: {', '.join(p.double_zero)}.")
    if p.split_controls:
        checks.append(f"Comparisons sharing a control, pooled with their covariance: {', '.join(p.split_controls)}.")
    sections.append(Section("Across the archive", bullets=checks, details=True))
    sections.append(
        Section("Conventions and assumptions", bullets=[p.interval, p.prediction_convention, *p.assumptions])
    )
    return Memo(f"Pooled archive by {p.by}", lead, sections)


GROUP_COLUMNS = (
    "group",
    "comparisons",
    "tests",
    "lift",
    "lift_low",
    "lift_high",
    "prediction_low",
    "prediction_high",
    "tau2",
    "i_squared",
    "winners",
    "win_rate",
    "win_rate_low",
    "win_rate_high",
    "shipped",
    "too_few",
)


def group_rows(p: PoolResult) -> list[dict[str, object]]:
    """One row per group with its unrounded figures (the CSV of ``archive pool``)."""
    return [
        {
            "group": g.key,
            "comparisons": g.comparisons,
            "tests": g.tests,
            "lift": g.lift,
            "lift_low": g.lift_low,
            "lift_high": g.lift_high,
            "prediction_low": g.prediction_low,
            "prediction_high": g.prediction_high,
            "tau2": g.tau2,
            "i_squared": g.i_squared,
            "winners": g.wins.count,
            "win_rate": g.wins.shrunk,
            "win_rate_low": g.wins.shrunk_low,
            "win_rate_high": g.wins.shrunk_high,
            "shipped": g.shipped.count,
            "too_few": g.warning is not None,
        }
        for g in p.groups
    ]
