"""The memo of a pooled archive."""

from __future__ import annotations

from archive.pooling.groups import PoolResult
from archive.render.formats import interval, interval_plain_rate, pct, pvalue
from archive.render.model import Memo, Section, Table


def build_pool_memo(p: PoolResult) -> Memo:
    """What tends to win: the ranked groups, then win rates, realistic lifts and checks of the archive."""
    prog = p.programme
    lead = [
        f"{prog.comparisons} comparisons pooled by {p.by}; {p.method}. {p.ranking}.",
        f"Observed win rate {pct(prog.win_rate.rate)} {interval_plain_rate(prog.win_rate)}"
        + (
            f"; implied true success rate {pct(prog.true_success_rate)} and false positive risk of a winner "
            f"{pct(prog.false_positive_risk)} (Kohavi & Chen 2024, with the ship rule's false-win rate "
            f"{pct(prog.false_win_rate, 2)} per comparison at alpha {prog.alpha:g}, assumed power "
            f"{prog.assumed_power:.0%})."
            if prog.false_positive_risk is not None
            else "."
        ),
    ]
    if prog.shipped and prog.shipped_mean_observed_lift is not None:
        over = f" ({prog.overstatement:.2f}x)" if prog.overstatement else ""
        lead.append(
            f"{prog.shipped} shipped comparisons: mean observed lift {pct(prog.shipped_mean_observed_lift, 1, True)}, "
            f"shrunk toward their groups {pct(prog.shipped_mean_shrunk_lift, 1, True)}{over}; Lee & Shen (2018) "
            f"bias of their summed log-lifts {prog.lee_shen_bias:.3f} of {prog.summed_shipped_log_lift:.3f}."
        )
    rows = [
        [
            g.key,
            f"{g.comparisons} ({g.tests} tests)",
            f"{pct(g.lift, 1, True)} {interval(g.lift_low, g.lift_high)}",
            interval(g.prediction_low, g.prediction_high),
            f"{g.tau2:.5f}" + (f" [{g.tau2_low:.5f}, {g.tau2_high:.5f}]" if g.tau2_high is not None else ""),
            f"{g.i_squared:.0%}",
            f"{g.wins.count}/{g.wins.total} {interval_plain_rate(g.wins)}; hierarchical {pct(g.wins.shrunk)} "
            f"[{pct(g.wins.shrunk_low, 0)}, {pct(g.wins.shrunk_high, 0)}]",
            f"{g.shipped.count}/{g.shipped.total}",
            f"{pct(g.dl_lift, 1, True)} {interval(g.dl_low, g.dl_high)}",
            g.warning or "",
        ]
        for g in p.groups
    ]
    headers = [
        p.by.replace("_", " "),
        "comparisons",
        "pooled lift (95% CI)",
        "next test (95% PI)",
        "tau² [Q-profile CI]",
        "I²",
        "winners (Jeffreys 95%)",
        "shipped",
        "DL comparison",
        "note",
    ]
    ranked = Section("What tends to win", tables=[Table(headers, rows)])
    checks = []
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
        checks.append(f"Shared controls split evenly: {', '.join(p.split_controls)}.")
    sections = [ranked, Section("Across the archive", bullets=checks)]
    sections.append(
        Section("Conventions and assumptions", bullets=[p.interval, p.prediction_convention, *p.assumptions])
    )
    return Memo(f"Pooled archive by {p.by}", lead, sections)
