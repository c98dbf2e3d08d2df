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
            f"ship {chosen.arm}: it beats control (P {chosen.prob_beat_control:.3f}, Holm p {chosen.p_holm:.3g}) "
            f"and has the highest P(best){others}"
        )
    elif open_arms:
        action, arm, keep = "iterate", None, open_arms
        plan = record.plan
        lift = plan.minimum_lift if plan and plan.minimum_lift else s.rules.default_margin
        alpha = (plan.alpha if plan else 0.05) / len(open_arms)  # Bonferroni over the reduced comparisons
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
        explanation = f"run another round with {', '.join(open_arms)} against control{drop}{size}"
    else:
        action, arm, keep = "keep-control", None, []
        explanation = "keep control: no arm beats it" + (" and the others are flat or worse" if comparisons else "")
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
