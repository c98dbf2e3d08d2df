"""The rules that turn an arm's figures into a verdict, kept in one place.

Defaults are common practice, not derived from a source: call an arm a winner when the posterior probability
that it beats control is at least 0.95 *or* its Holm-adjusted two-sided p-value is below 0.05; both figures are
always shown beside the verdict so a reader can apply a stricter rule.

Verdicts, from the strongest claim down:

* ``winner`` / ``loser``: conversion better / worse than control beyond noise.
* ``trade-off``: conversion and revenue per visitor move in opposite directions, each beyond noise.
* ``flat``: an equivalence test shows the lift lies within the margin that matters (a claim, not a shrug).
* ``leaning-better`` / ``leaning-worse``: the posterior leans one way (>= 0.80 by default), not convincingly.
* ``inconclusive``: none of the above.

A failed trust check (sample ratio mismatch, a sample short of its plan) moves every verdict one step down:
winner -> leaning-better, loser -> leaning-worse, anything else -> inconclusive.
"""

from __future__ import annotations

from dataclasses import dataclass

VERDICTS = ("winner", "leaning-better", "flat", "inconclusive", "trade-off", "leaning-worse", "loser")

_DOWNGRADE = {"winner": "leaning-better", "loser": "leaning-worse"}


@dataclass(frozen=True)
class VerdictRules:
    win_probability: float = 0.95  # common practice (90-95% is usual)
    alpha: float = 0.05  # two-sided, Holm-adjusted across the test's comparisons; common practice
    leaning_probability: float = 0.80  # common practice
    default_margin: float = 0.05  # equivalence margin when the plan names no smallest lift that matters

    def __post_init__(self) -> None:
        if not 0.5 < self.leaning_probability <= self.win_probability < 1:
            raise ValueError("need 0.5 < leaning_probability <= win_probability < 1")
        if not 0 < self.alpha < 1 or not 0 < self.default_margin < 1:
            raise ValueError("alpha and default_margin lie strictly between 0 and 1")


@dataclass(frozen=True)
class Evidence:
    """What the verdict of one arm against control looks at."""

    lift: float | None
    p_holm: float
    prob_beat: float
    equivalent: bool
    revenue_low: float | None = None  # interval of the RPV difference, when its variance is known
    revenue_high: float | None = None


def verdict(e: Evidence, rules: VerdictRules) -> tuple[str, str]:
    """The verdict and a one-line reason."""
    better = (e.p_holm < rules.alpha and (e.lift or 0) > 0) or e.prob_beat >= rules.win_probability
    worse = (e.p_holm < rules.alpha and (e.lift or 0) < 0) or e.prob_beat <= 1 - rules.win_probability
    if e.revenue_low is not None and e.revenue_high is not None:
        if better and e.revenue_high < 0:
            return "trade-off", "converts more visitors but earns less per visitor (both beyond noise)"
        if worse and e.revenue_low > 0:
            return "trade-off", "converts fewer visitors but earns more per visitor (both beyond noise)"
    if better:
        return "winner", f"P(beats control) {e.prob_beat:.3f}, Holm p {e.p_holm:.3g}"
    if worse:
        return "loser", f"P(beats control) {e.prob_beat:.3f}, Holm p {e.p_holm:.3g}"
    if e.equivalent:
        return "flat", "the lift lies within the equivalence margin"
    if e.prob_beat >= rules.leaning_probability:
        return "leaning-better", f"P(beats control) {e.prob_beat:.3f}: better more likely than not, not convincing"
    if e.prob_beat <= 1 - rules.leaning_probability:
        return "leaning-worse", f"P(beats control) {e.prob_beat:.3f}: worse more likely than not, not convincing"
    return "inconclusive", "neither a difference nor equivalence is shown"


def downgrade(name: str) -> str:
    return _DOWNGRADE.get(name, "inconclusive")
