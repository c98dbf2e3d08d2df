"""Analysing one finished test: trust checks, conversion per arm, revenue, verdicts and a recommendation.

``analyze(record, orders)`` returns an :class:`Analysis`, plain dataclasses whose field names are the keys of
``archive analyze --format json`` (documented in ``site/reference/analysis-json.md``). Nothing here prints.
"""

from __future__ import annotations

import dataclasses

from archive.analysis.recommend import recommend
from archive.analysis.results import (
    Analysis,
    ArmResult,
    CannotAnalyze,
    Comparison,
    RevenueResult,
    Settings,
    json_safe,
    known,
)
from archive.analysis.revenue import revenue_results
from archive.analysis.trust import trust_checks
from archive.analysis.verdict import Evidence, downgrade, null_ship_rates, revenue_guardrail, rule_sentence, verdict
from archive.records.model import Arm, Record
from archive.records.orders import Orders
from archive.stats import bayes
from archive.stats.multiple import holm
from archive.stats.proportions import compare_rates, equivalence_test


def analyze(record: Record, orders: Orders | None = None, settings: Settings | None = None) -> Analysis:
    s = settings or Settings()
    arms = _usable_arms(record)
    control = record.control_arm()
    treatments = [a for a in arms if not a.control]
    checks = trust_checks(record, arms, s)
    failed = [c.name for c in checks if c.status == "failed"]

    posteriors = [bayes.BetaPosterior.from_counts(known(a.conversions), known(a.visitors), s.prior) for a in arms]
    p_best = bayes.prob_best(posteriors)
    losses = bayes.expected_loss(posteriors)
    arm_results = [
        _arm_result(a, post, float(pb), float(loss), s)
        for a, post, pb, loss in zip(arms, posteriors, p_best, losses, strict=True)
    ]

    rates = [
        compare_rates(
            known(t.conversions), known(t.visitors), known(control.conversions), known(control.visitors), s.confidence
        )
        for t in treatments
    ]
    holm_p = list(holm([r.p_value for r in rates]))
    margin = s.margin or (record.plan.minimum_lift if record.plan and record.plan.minimum_lift else None)
    margin = margin if margin and margin < 1 else s.rules.default_margin
    alpha = record.plan.alpha if record.plan is not None else s.rules.alpha
    family_rate, _ = null_ship_rates(len(treatments), alpha, s.rules)
    unplanned = record.plan is None or record.plan.visitors_per_arm is None
    too_early = unplanned and min(known(a.conversions) for a in arms) < s.rules.min_conversions_without_plan
    revenue = revenue_results(control, treatments, orders, s)
    post_by_name = {a.name: p for a, p in zip(arms, posteriors, strict=True)}
    comparisons = []
    for t, r, p_h in zip(treatments, rates, holm_p, strict=True):
        post_t, post_c = post_by_name[t.name], post_by_name[control.name]
        beat = bayes.prob_greater(post_t, post_c)
        c_low, c_high = bayes.lift_interval(post_t, post_c, s.confidence)
        eq = equivalence_test(
            known(t.conversions),
            known(t.visitors),
            known(control.conversions),
            known(control.visitors),
            margin,
            alpha,
        )
        rev = revenue[t.name]
        guard, guard_words = _guardrail(rev, s.rules.revenue_margin)
        evidence = Evidence(
            r.lift,
            float(p_h),
            beat,
            eq.equivalent,
            rev.difference_low,
            rev.difference_high,
            alpha=alpha,
            margin=margin,
            guardrail=guard,
            revenue_check=guard_words,
            null_ship_rate=family_rate if s.rules.ship_on_probability else None,
        )
        name, reason = verdict(evidence, s.rules)
        if name == "winner" and too_early:
            name = "leaning-better"
            reason += (
                f"; no ship yet: no planned sample size and fewer than {s.rules.min_conversions_without_plan} "
                "conversions in an arm (common practice)"
            )
        if failed:
            name, reason = downgrade(name), f"{reason}; downgraded: {', '.join(failed)} failed"
        comparisons.append(
            Comparison(
                arm=t.name,
                lift=r.lift,
                lift_low=r.lift_low,
                lift_high=r.lift_high,
                difference=r.difference,
                difference_low=r.difference_low,
                difference_high=r.difference_high,
                p_value=r.p_value,
                p_holm=float(p_h),
                zero_cell_correction=r.zero_cell_correction,
                prob_beat_control=beat,
                credible_lift_low=c_low,
                credible_lift_high=c_high,
                equivalence_margin=margin,
                equivalence_p=eq.p_value,
                equivalent=eq.equivalent,
                revenue=rev,
                verdict=name,
                reason=reason,
                downgraded_by=list(failed),
                alpha=alpha,
                significant=bool(p_h < alpha),
                revenue_guardrail=guard,
                revenue_margin=s.rules.revenue_margin,
                revenue_check=guard_words,
            )
        )
    recommendation = recommend(record, control, comparisons, arm_results, s)
    return Analysis(
        id=record.id,
        title=record.title,
        status=record.status,
        control=control.name,
        assumptions=_assumptions(s, margin, alpha, orders is not None, family_rate, len(treatments)),
        checks=checks,
        arms=arm_results,
        comparisons=comparisons,
        recommendation=recommendation,
        settings=json_safe(
            {
                "prior": list(s.prior),
                "prior_label": s.prior_label,
                "confidence": s.confidence,
                "srm_alpha": s.srm_alpha,
                "equivalence_margin": margin,
                "cap_percentile": s.cap_percentile,
                "bootstrap_replicates": s.bootstrap_replicates,
                "seed": s.seed,
                "rules": dataclasses.asdict(s.rules),
                "alpha": alpha,
                "currency": s.currency,
            }
        ),
        rule=rule_sentence(s.rules, alpha, margin, len(treatments)),
        null_ship_rate=family_rate,
    )


def _guardrail(rev: RevenueResult, margin: float) -> tuple[str, str]:
    """The revenue guardrail of one comparison: the bootstrap interval of the RPV lift with an orders file, else
    the Welch/delta interval from sums of squares."""
    lift_low = rev.lift_low
    if rev.bootstrap is not None and rev.bootstrap.lift_low is not None:
        lift_low = rev.bootstrap.lift_low
    known_variance = rev.method in ("orders-file", "sum-of-squares")
    return revenue_guardrail(rev.lift, lift_low, rev.difference_high, known_variance, margin)


def _usable_arms(record: Record) -> list[Arm]:
    if len(record.arms) < 2:
        raise CannotAnalyze(f"{record.id}: a test needs a control and at least one other arm to compare")
    if sum(a.control for a in record.arms) != 1:
        raise CannotAnalyze(f"{record.id}: exactly one arm must be the control (run `archive check`)")
    for arm in record.arms:
        if arm.visitors is None or arm.conversions is None:
            raise CannotAnalyze(f"{record.id}: arm {arm.name!r} has no results yet (visitors and conversions)")
        if arm.visitors == 0:
            raise CannotAnalyze(f"{record.id}: arm {arm.name!r} has no visitors; nothing can be said about it")
    return list(record.arms)


def _arm_result(a: Arm, post: bayes.BetaPosterior, p_best: float, loss: float, s: Settings) -> ArmResult:
    low, high = post.interval(s.confidence)
    visitors = known(a.visitors)
    return ArmResult(
        name=a.name,
        control=a.control,
        visitors=visitors,
        conversions=known(a.conversions),
        rate=known(a.conversions) / visitors,
        rate_low=low,
        rate_high=high,
        prob_best=p_best,
        expected_loss=loss,
        orders=a.orders,
        revenue=a.revenue,
        revenue_per_visitor=None if a.revenue is None else a.revenue / visitors,
        average_order_value=None if a.revenue is None or not a.orders else a.revenue / a.orders,
    )


def _assumptions(
    s: Settings, margin: float, alpha: float, has_orders: bool, family_rate: float, treatments: int
) -> list[str]:
    items = [
        "Visitors are independent and each saw one arm for the whole test (randomised by visitor).",
        "Fixed horizon: the test was analysed once, at its planned end; repeated peeking makes p-values too small. "
        "Without a pre-registered sample size this cannot be verified from the record.",
        f"Prior: {s.prior_label}. Posterior probabilities are about true conversion rates under this prior; "
        "they inform the leaning verdicts"
        + (" and, by the opt-in probability rule, a win." if s.rules.ship_on_probability else ", never a ship."),
        f"Intervals are {s.confidence:.0%}; p-values are two-sided and Holm-adjusted across the test's {treatments} "
        f"comparison(s); significance at alpha {alpha:g} (the plan's, else the default).",
        f"Error rate: with no true difference an arm of this test is shipped in about {family_rate:.1%} of tests "
        "(normal approximation, equally sized arms; at most alpha/2 without the probability rule).",
        f"Flat means the {1 - 2 * alpha:.0%} interval of the relative lift lies within +/-{margin:.1%} (TOST); "
        "a significant lift inside that margin is not a win.",
        f"Revenue per visitor is a guardrail: a ship needs the lower end of its 95% interval above "
        f"-{s.rules.revenue_margin:.0%} (non-inferiority); without revenue variance a ship is marked "
        "'revenue unchecked'.",
        f"Without a planned sample size no arm ships with fewer than {s.rules.min_conversions_without_plan} "
        "conversions in any arm (common practice).",
    ]
    if has_orders:
        items.append(
            "Order-level revenue: bootstrap resamples buyers (Poisson weights); visitors without orders add zeros."
        )
    return items
