"""The rules that turn an arm's figures into a verdict, kept in one place, with the error rate they imply.

**The ship rule.** One family of comparisons per test (every treatment against control). A treatment is a
``winner`` only if

1. its lift in conversion is positive and significant at the plan's two-sided alpha (``VerdictRules.alpha``
   without a plan) after Holm's step-down adjustment over the test's comparisons;
2. it is practically meaningful: the equivalence test (TOST at the same alpha) does not place the lift inside the
   margin that matters (the plan's minimum lift, else ``default_margin``);
3. revenue per visitor is not credibly worse: the lower end of the 95% interval of the RPV lift (bootstrap with an
   orders file, else the Welch/delta interval from sums of squares) lies above ``-revenue_margin``. Without any
   revenue variance the arm may still win, marked "revenue unchecked", unless its RPV point estimate already
   fell by more than the margin;
4. every trust check passed (sample ratio, planned sample reached, test finished; see ``analysis.trust``);
5. without a planned sample size, every arm has at least ``min_conversions_without_plan`` conversions.

Under no true difference the rule ships an arm in at most alpha/2 of tests whatever the number of arms (Holm
controls the family-wise error; only the positive side ships). :func:`null_ship_rates` gives the figure for a
test's number of comparisons; a seeded simulation in the tests measures it through ``analyze``.

The posterior P(beats control) is information: it sets ``leaning-better`` / ``leaning-worse`` (>= 0.80 by
default) and never a ship on its own. A team that wants the probability rule (P(beats control) >=
``win_probability`` also wins) must set ``ship_on_probability``; its family-wise null ship rate, which grows with
the number of arms, is then shown beside every verdict.

Verdicts, from the strongest claim down:

* ``winner`` / ``loser``: conversion better / worse than control by the rule above.
* ``trade-off``: conversion and revenue per visitor move in opposite directions, each beyond noise.
* ``flat``: the equivalence test shows the lift lies within the margin that matters (a claim, not a shrug).
* ``leaning-better`` / ``leaning-worse``: the posterior leans one way, or a significant arm misses the revenue
  guardrail.
* ``inconclusive``: none of the above.

A failed trust check moves every verdict one step down: winner -> leaning-better, loser -> leaning-worse,
anything else -> inconclusive.
"""

from __future__ import annotations

import dataclasses
import functools
import math
from dataclasses import dataclass

import numpy as np
from scipy import special

from archive.analysis.settings import VerdictRules

VERDICTS = ("winner", "leaning-better", "flat", "inconclusive", "trade-off", "leaning-worse", "loser")
GUARDRAILS = ("non-inferior", "unchecked", "not-shown", "worse")

_DOWNGRADE = {"winner": "leaning-better", "loser": "leaning-worse"}


@dataclass(frozen=True)
class Evidence:
    """What the verdict of one arm against control looks at."""

    lift: float | None
    p_holm: float
    prob_beat: float
    equivalent: bool
    revenue_low: float | None = None  # interval of the RPV difference, when its variance is known
    revenue_high: float | None = None
    alpha: float = 0.05
    margin: float = 0.05
    guardrail: str = "unchecked"  # one of GUARDRAILS
    revenue_check: str = ""  # the guardrail in words
    null_ship_rate: float | None = None  # of the probability rule, when it is switched on


def _sig(p: float) -> str:
    return f"{p:.3g}"


def verdict(e: Evidence, rules: VerdictRules) -> tuple[str, str]:
    """The verdict and a one-line reason."""
    lift = e.lift or 0.0
    significant = e.p_holm < e.alpha
    by_test_better = significant and lift > 0 and not e.equivalent
    by_test_worse = significant and lift < 0 and not e.equivalent
    by_prob_better = rules.ship_on_probability and e.prob_beat >= rules.win_probability and not e.equivalent
    by_prob_worse = rules.ship_on_probability and e.prob_beat <= 1 - rules.win_probability and not e.equivalent
    better, worse = by_test_better or by_prob_better, by_test_worse or by_prob_worse
    figures = f"Holm p {_sig(e.p_holm)} at alpha {e.alpha:g}, P(beats control) {e.prob_beat:.3f}"
    if by_prob_better and not by_test_better or by_prob_worse and not by_test_worse:
        rate = "" if e.null_ship_rate is None else f", family-wise null ship rate {e.null_ship_rate:.1%}"
        figures += f" (probability rule, opt-in{rate})"
    if e.revenue_low is not None and e.revenue_high is not None:
        if better and e.revenue_high < 0:
            return "trade-off", "converts more visitors but earns less per visitor (both beyond noise)"
        if worse and e.revenue_low > 0:
            return "trade-off", "converts fewer visitors but earns more per visitor (both beyond noise)"
    size = _size_remark(lift, e.margin)
    if better:
        if e.guardrail in ("not-shown", "worse"):
            return "leaning-better", f"converts better ({figures}) but {e.revenue_check}"
        return "winner", f"{figures}{size}"
    if worse:
        return "loser", f"{figures}{size}"
    if e.equivalent:
        if significant:
            return "flat", (
                f"significant ({figures}) but the lift {lift:+.2%} lies within +/-{e.margin:.1%}: too small to matter"
            )
        return "flat", f"the lift lies within the equivalence margin +/-{e.margin:.1%}"
    shown = f"not shown (Holm p {_sig(e.p_holm)})"
    if e.prob_beat >= rules.leaning_probability:
        return "leaning-better", f"P(beats control) {e.prob_beat:.3f}: better more likely than not, {shown}"
    if e.prob_beat <= 1 - rules.leaning_probability:
        return "leaning-worse", f"P(beats control) {e.prob_beat:.3f}: worse more likely than not, {shown}"
    return "inconclusive", "neither a difference nor equivalence is shown"


def _size_remark(lift: float, margin: float) -> str:
    if abs(lift) < margin:
        return (
            f"; practical size: the observed lift {lift:+.2%} is smaller than the {margin:.1%} that matters, "
            "so the true lift may be too small to be worth it"
        )
    return f"; practical size: the observed lift {lift:+.2%} reaches the {margin:.1%} that matters"


def downgrade(name: str) -> str:
    return _DOWNGRADE.get(name, "inconclusive")


def revenue_guardrail(
    lift: float | None, lift_low: float | None, difference_high: float | None, known_variance: bool, margin: float
) -> tuple[str, str]:
    """(status, words) of the revenue guardrail: ``non-inferior`` when the lower end of the RPV lift's interval lies
    above -margin, ``worse`` when the RPV difference is below 0 beyond noise, ``not-shown`` otherwise; without a
    variance ``unchecked``, or ``not-shown`` when the point estimate already fell by more than the margin."""
    if lift is None:
        return "unchecked", "revenue unchecked (revenue per visitor not recorded for this arm or the control)"
    if not known_variance or lift_low is None:
        if lift < -margin:
            return "not-shown", (
                f"revenue per visitor fell {lift:+.1%}, beyond the -{margin:.0%} guardrail, and its noise is unknown "
                "(no sums of squares or orders file)"
            )
        return "unchecked", (
            f"revenue unchecked (revenue per visitor {lift:+.1%}; no sums of squares or orders file give its noise)"
        )
    if difference_high is not None and difference_high < 0:
        return "worse", f"revenue per visitor is worse ({lift:+.1%}, interval from {lift_low:+.1%}) beyond noise"
    if lift_low > -margin:
        return "non-inferior", (
            f"revenue per visitor {lift:+.1%} (interval from {lift_low:+.1%}) is not worse than the -{margin:.0%} "
            "guardrail"
        )
    return "not-shown", (
        f"revenue per visitor {lift:+.1%} (interval from {lift_low:+.1%}) may be worse than the -{margin:.0%} guardrail"
    )


_NULL_DRAWS = 200_000
_NULL_SEED = 20_240_601


def holm_rejections(p: np.ndarray, alpha: float) -> np.ndarray:
    """Rows of p-values -> which are rejected by Holm's step-down procedure at family-wise level alpha."""
    m = p.shape[1]
    order = np.argsort(p, axis=1, kind="stable")
    ranked = np.take_along_axis(p, order, axis=1)
    passed = np.logical_and.accumulate(ranked < alpha / (m - np.arange(m)), axis=1)
    out = np.empty_like(passed)
    np.put_along_axis(out, order, passed, axis=1)
    return out


@functools.lru_cache(maxsize=256)
def null_ship_rates(treatments: int, alpha: float, rules: VerdictRules) -> tuple[float, float]:
    """(family-wise, per comparison) rate at which the rule calls a winner when no arm differs from control.

    Large-sample model: the z-statistics of ``treatments`` equal arms against one shared control are normal with
    correlation 1/2; P(beats control) >= w is read as z >= Phi^-1(w) (the normal approximation of the posterior
    under a flat prior). Measured on 200,000 seeded draws, so the figures are exact to about +/-0.0007. The
    practical-size and revenue conditions can only lower the rate; this is its upper bound."""
    if treatments < 1:
        raise ValueError("at least one treatment")
    rng = np.random.default_rng(_NULL_SEED + treatments)
    shared = rng.standard_normal((_NULL_DRAWS, 1))
    z = math.sqrt(0.5) * shared + math.sqrt(0.5) * rng.standard_normal((_NULL_DRAWS, treatments))
    p = 2 * special.ndtr(-np.abs(z))
    wins = holm_rejections(p, alpha) & (z > 0)
    if rules.ship_on_probability:
        wins |= z >= float(special.ndtri(rules.win_probability))
    return float(wins.any(axis=1).mean()), float(wins.mean())


def rule_sentence(rules: VerdictRules, alpha: float, margin: float, treatments: int) -> str:
    """The ship rule in one sentence, with its error rate for this test's number of comparisons."""
    family, _ = null_ship_rates(treatments, alpha, dataclasses.replace(rules, ship_on_probability=False))
    sentence = (
        f"Ship rule: an arm wins only if its conversion lift is positive and significant at two-sided alpha "
        f"{alpha:g} after Holm's adjustment over the test's {treatments} comparison(s), the lift is not shown to lie "
        f"within +/-{margin:.1%}, revenue per visitor is not credibly worse than -{rules.revenue_margin:.0%} "
        f"(or is marked unchecked) and every trust check passed; with no true difference it ships in about "
        f"{family:.1%} of such tests (at most alpha/2 with equally sized arms)"
    )
    if rules.ship_on_probability:
        with_probability, _ = null_ship_rates(treatments, alpha, rules)
        sentence += (
            f"; opt-in probability rule: P(beats control) >= {rules.win_probability:g} also wins, which raises "
            f"that rate to {with_probability:.1%} for {treatments} comparison(s)"
        )
    return sentence + "."
