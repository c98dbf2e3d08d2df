"""The recommendation for a test (ship, keep-control or iterate) from its verdicts, with a retest size."""

from __future__ import annotations

import math

from archive.analysis.results import ArmResult, Comparison, Recommendation, Settings
from archive.records.model import Arm, Record
from archive.stats.power import visitors_per_arm


def recommend(
    record: Record, control: Arm, comparisons: list[Comparison], arms: list[ArmResult], s: Settings
) -> Recommendation:
    best = {a.name: a.prob_best for a in arms}
    winners = sorted((c for c in comparisons if c.verdict == "winner"), key=lambda c: -best[c.arm])
    open_arms = [c.arm for c in comparisons if c.verdict in ("leaning-better", "inconclusive", "trade-off")]
    needed = None
    if winners:
        chosen = winners[0]
        others = f"; {', '.join(c.arm for c in winners[1:])} also beat control" if len(winners) > 1 else ""
        action, arm, keep = "ship", chosen.arm, [chosen.arm]
        explanation = (
            f"ship {chosen.arm}: it beats control (Holm p {chosen.p_holm:.3g} at alpha {chosen.alpha:g}, "
            f"P(beats control) {chosen.prob_beat_control:.3f}) and has the highest P(best){others}; "
            f"{chosen.revenue_check}"
        )
    elif open_arms:
        action, arm, keep = "iterate", None, open_arms
        plan = record.plan
        lift = plan.minimum_lift if plan and plan.minimum_lift else s.rules.default_margin
        alpha = (plan.alpha if plan else s.rules.alpha) / len(open_arms)  # Bonferroni over the reduced comparisons
        power = plan.power if plan else 0.8
        base = next(a.rate for a in arms if a.control)
        if 0 < base < 1 and 0 < base * (1 + lift) < 1:
            needed = math.ceil(visitors_per_arm(base, base * (1 + lift), alpha=alpha, power=power))
        size = (
            f"; a retest needs about {needed:,} visitors per arm to detect +{lift:.0%} at power {power:.0%} "
            f"(baseline {base:.2%}, Bonferroni alpha {alpha:.3g})"
            if needed
            else ""
        )
        dropped = [c.arm for c in comparisons if c.arm not in open_arms]
        drop = f", dropping {', '.join(dropped)}" if dropped else ""
        explanation = f"run another round with {', '.join(open_arms)} against control{drop}{size}; " + _revenue(
            [c for c in comparisons if c.arm in open_arms]
        )
    else:
        action, arm, keep = "keep-control", None, []
        explanation = (
            "keep control: no arm beats it"
            + (" and the others are flat or worse" if comparisons else "")
            + ("; " + _revenue(comparisons) if comparisons else "")
        )
    recorded = record.decision
    agrees = disagreement = None
    if recorded is not None:
        agrees = recorded.outcome == action and (action != "ship" or recorded.arm == arm)
        if not agrees:
            said = recorded.outcome + (f" {recorded.arm}" if recorded.arm else "")
            computed = action + (f" {arm}" if arm else "")
            disagreement = (
                f"the record says {said}; the figures point to {computed}. Worth a look in the review, not an error."
            )
    return Recommendation(
        action,
        arm,
        keep,
        needed,
        explanation,
        recorded.outcome if recorded else None,
        recorded.arm if recorded else None,
        agrees,
        disagreement,
    )  # type: ignore[arg-type]


def _revenue(comparisons: list[Comparison]) -> str:
    """Revenue per visitor of the arms in a few words (the recommendation always says what revenue did)."""
    parts = []
    for c in comparisons:
        r = c.revenue
        if r.lift is None:
            parts.append(f"{c.arm} not recorded")
        elif r.lift_low is not None and r.lift_high is not None:
            parts.append(f"{c.arm} {r.lift:+.1%} [{r.lift_low:+.1%}, {r.lift_high:+.1%}]")
        else:
            parts.append(f"{c.arm} {r.lift:+.1%} (noise unknown)")
    return "revenue per visitor: " + ", ".join(parts)
