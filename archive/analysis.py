"""Analysing one finished test: trust checks, conversion per arm, revenue, verdicts and a recommendation.

``analyze(record, orders)`` returns an :class:`Analysis`, plain dataclasses whose field names are the keys of
``archive analyze --format json`` (documented in ``site/reference/analysis-json.md``). Nothing here prints.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np

from .orders import Orders
from .record import Arm, Record
from .stats import bayes
from .stats.multiple import holm
from .stats.power import visitors_per_arm
from .stats.proportions import compare_rates, equivalence_test
from .stats.revenue import (
    BootstrapInterval,
    ExtremeOrders,
    MeanComparison,
    MeanSummary,
    bootstrap_interval,
    bootstrap_means,
    extreme_order_check,
    per_visitor_values,
    welch,
)
from .stats.srm import sample_ratio_test
from .verdict import Evidence, VerdictRules, downgrade, verdict

CheckStatus = Literal["ok", "warning", "failed"]
MIN_EVENTS = 10  # common practice: at least 10 conversions and 10 non-conversions per arm for the normal approximation


@dataclass(frozen=True)
class Settings:
    """Everything the analysis can be told; every default is stated in the report."""

    prior: tuple[float, float] = (1.0, 1.0)  # Beta prior of each arm's conversion rate (uniform)
    prior_label: str = "uniform Beta(1, 1) on each arm's conversion rate"
    confidence: float = 0.95
    srm_alpha: float = 0.001  # common practice: alarm on sample ratio mismatch at p < 0.001
    margin: float | None = None  # equivalence margin on relative lift; None: the plan's minimum_lift, else default
    cap_percentile: float = 99.0
    top_fraction: float = 0.01
    bootstrap_replicates: int = 1000
    seed: int = 0
    rules: VerdictRules = field(default_factory=VerdictRules)


@dataclass
class TrustCheck:
    name: str
    status: CheckStatus
    detail: str
    p_value: float | None = None


@dataclass
class ArmResult:
    name: str
    control: bool
    visitors: int
    conversions: int
    rate: float
    rate_low: float  # credible interval of the rate under the prior
    rate_high: float
    prob_best: float
    expected_loss: float  # conversion rate given up on average by choosing this arm
    orders: int | None
    revenue: float | None
    revenue_per_visitor: float | None
    average_order_value: float | None


@dataclass
class RevenueResult:
    method: Literal["orders-file", "sum-of-squares", "point-estimates-only", "missing"]
    rpv_control: float | None
    rpv_arm: float | None
    difference: float | None
    difference_low: float | None = None
    difference_high: float | None = None
    lift: float | None = None
    lift_low: float | None = None
    lift_high: float | None = None
    p_value: float | None = None
    bootstrap: BootstrapInterval | None = None
    capped_rpv_control: float | None = None
    capped_rpv_arm: float | None = None
    capped_difference: float | None = None
    capped_difference_low: float | None = None
    capped_difference_high: float | None = None
    extreme_orders: ExtremeOrders | None = None
    note: str = ""


@dataclass
class Comparison:
    arm: str
    lift: float | None
    lift_low: float | None
    lift_high: float | None
    difference: float
    difference_low: float
    difference_high: float
    p_value: float
    p_holm: float
    zero_cell_correction: bool
    prob_beat_control: float
    credible_lift_low: float
    credible_lift_high: float
    equivalence_margin: float
    equivalence_p: float
    equivalent: bool
    revenue: RevenueResult
    verdict: str
    reason: str
    downgraded_by: list[str] = field(default_factory=list)


@dataclass
class Recommendation:
    action: str  # ship, keep-control or iterate
    arm: str | None
    keep_arms: list[str]
    visitors_per_arm_needed: int | None
    explanation: str
    recorded_outcome: str | None
    recorded_arm: str | None
    agrees_with_record: bool | None
    disagreement: str | None


@dataclass
class Analysis:
    id: str
    title: str
    status: str
    control: str
    assumptions: list[str]
    checks: list[TrustCheck]
    arms: list[ArmResult]
    comparisons: list[Comparison]
    recommendation: Recommendation
    settings: dict[str, Any]

    def to_dict(self) -> dict[str, Any]:
        return json_safe(dataclasses.asdict(self))

    @property
    def trusted(self) -> bool:
        return all(c.status != "failed" for c in self.checks)


def json_safe(value: Any) -> Any:
    """JSON-safe: non-finite floats become None, tuples lists."""
    if isinstance(value, dict):
        return {k: json_safe(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [json_safe(v) for v in value]
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, np.floating):
        return json_safe(float(value))
    if isinstance(value, np.bool_):
        return bool(value)
    return value


# --- entry point ----------------------------------------------------------------------------------------


class CannotAnalyze(ValueError):
    """The record holds too little to analyse (one arm, an arm without visitors, no results)."""


def analyze(record: Record, orders: Orders | None = None, settings: Settings | None = None) -> Analysis:
    s = settings or Settings()
    arms = _usable_arms(record)
    control = record.control_arm()
    treatments = [a for a in arms if not a.control]
    checks = _trust_checks(record, arms, s)
    failed = [c.name for c in checks if c.status == "failed"]

    posteriors = [bayes.BetaPosterior.from_counts(_i(a.conversions), _i(a.visitors), s.prior) for a in arms]
    p_best = bayes.prob_best(posteriors)
    losses = bayes.expected_loss(posteriors)
    arm_results = [
        _arm_result(a, post, float(pb), float(loss), s)
        for a, post, pb, loss in zip(arms, posteriors, p_best, losses, strict=True)
    ]

    rates = [
        compare_rates(_i(t.conversions), _i(t.visitors), _i(control.conversions), _i(control.visitors), s.confidence)
        for t in treatments
    ]
    holm_p = list(holm([r.p_value for r in rates]))
    margin = s.margin or (record.plan.minimum_lift if record.plan and record.plan.minimum_lift else None)
    margin = margin if margin and margin < 1 else s.rules.default_margin
    revenue = _revenue(control, treatments, orders, s)
    post_by_name = {a.name: p for a, p in zip(arms, posteriors, strict=True)}
    comparisons = []
    for t, r, p_h in zip(treatments, rates, holm_p, strict=True):
        post_t, post_c = post_by_name[t.name], post_by_name[control.name]
        beat = bayes.prob_greater(post_t, post_c)
        c_low, c_high = bayes.lift_interval(post_t, post_c, s.confidence)
        eq = equivalence_test(
            _i(t.conversions), _i(t.visitors), _i(control.conversions), _i(control.visitors), margin, s.rules.alpha
        )
        rev = revenue[t.name]
        evidence = Evidence(r.lift, float(p_h), beat, eq.equivalent, rev.difference_low, rev.difference_high)
        name, reason = verdict(evidence, s.rules)
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
            )
        )
    recommendation = _recommend(record, control, comparisons, arm_results, s)
    return Analysis(
        id=record.id,
        title=record.title,
        status=record.status,
        control=control.name,
        assumptions=_assumptions(s, margin, orders is not None),
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
            }
        ),
    )


def _i(value: int | None) -> int:
    assert value is not None  # guaranteed by _usable_arms
    return value


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


# --- trust checks ---------------------------------------------------------------------------------------


def _trust_checks(record: Record, arms: list[Arm], s: Settings) -> list[TrustCheck]:
    checks = []
    visitors = [_i(a.visitors) for a in arms]
    plan = record.plan
    if plan is not None and plan.split is not None:
        weights, basis = [plan.split.get(a.name, 0.0) for a in arms], "the planned split"
    else:
        weights, basis = [1.0] * len(arms), "an equal split (no split was planned)"
    srm = sample_ratio_test(visitors, weights)
    shares = ", ".join(f"{a.name} {o:.2%}" for a, o in zip(arms, srm.observed_shares, strict=True))
    if srm.p_value < s.srm_alpha:
        checks.append(
            TrustCheck(
                "sample ratio",
                "failed",
                f"traffic split {shares} does not fit {basis} (chi-square {srm.chi_square:.2f}, df {srm.df}, "
                f"p {srm.p_value:.2g} < {s.srm_alpha:g}): assignment or tracking is broken, "
                "so the comparison may be biased",
                srm.p_value,
            )
        )
    else:
        status: CheckStatus = "ok" if plan is not None and plan.split is not None else "warning"
        checks.append(
            TrustCheck("sample ratio", status, f"split {shares} fits {basis} (p {srm.p_value:.2g})", srm.p_value)
        )

    if plan is None or plan.visitors_per_arm is None:
        checks.append(
            TrustCheck(
                "planned sample",
                "warning",
                "no planned sample size: the fixed-horizon reading assumes the test was not stopped on seeing the data",
            )
        )
    else:
        short = [a.name for a in arms if _i(a.visitors) < plan.visitors_per_arm]
        least = min(visitors)
        if short or record.status == "stopped-early":
            checks.append(
                TrustCheck(
                    "planned sample",
                    "failed",
                    f"analysed early: {least:,} visitors in the smallest arm of {plan.visitors_per_arm:,} planned "
                    f"({least / plan.visitors_per_arm:.0%}); stopping before the plan inflates false positives",
                )
            )
        else:
            checks.append(
                TrustCheck(
                    "planned sample",
                    "ok",
                    f"planned {plan.visitors_per_arm:,} per arm reached (smallest arm {least:,})",
                )
            )
    if record.started and record.ended:
        days = (record.ended - record.started).days + 1
        if days % 7:
            checks.append(
                TrustCheck(
                    "whole weeks",
                    "warning",
                    f"ran {days} days ({days / 7:.1f} weeks): weekday patterns are not balanced "
                    "(common practice: whole weeks)",
                )
            )
        else:
            checks.append(TrustCheck("whole weeks", "ok", f"ran {days} days ({days // 7} whole weeks)"))
    thin = [a.name for a in arms if min(_i(a.conversions), _i(a.visitors) - _i(a.conversions)) < MIN_EVENTS]
    if thin:
        checks.append(
            TrustCheck(
                "enough conversions",
                "warning",
                f"fewer than {MIN_EVENTS} conversions or non-conversions in {', '.join(thin)}: "
                "z-test and normal intervals are rough; read the Bayesian figures",
            )
        )
    else:
        checks.append(
            TrustCheck(
                "enough conversions", "ok", f"at least {MIN_EVENTS} conversions and non-conversions in every arm"
            )
        )
    return checks


# --- arms -----------------------------------------------------------------------------------------------


def _arm_result(a: Arm, post: bayes.BetaPosterior, p_best: float, loss: float, s: Settings) -> ArmResult:
    low, high = post.interval(s.confidence)
    visitors = _i(a.visitors)
    return ArmResult(
        name=a.name,
        control=a.control,
        visitors=visitors,
        conversions=_i(a.conversions),
        rate=_i(a.conversions) / visitors,
        rate_low=low,
        rate_high=high,
        prob_best=p_best,
        expected_loss=loss,
        orders=a.orders,
        revenue=a.revenue,
        revenue_per_visitor=None if a.revenue is None else a.revenue / visitors,
        average_order_value=None if a.revenue is None or not a.orders else a.revenue / a.orders,
    )


# --- revenue --------------------------------------------------------------------------------------------


def _revenue(control: Arm, treatments: list[Arm], orders: Orders | None, s: Settings) -> dict[str, RevenueResult]:
    out: dict[str, RevenueResult] = {}
    if orders is not None:
        return _revenue_from_orders(control, treatments, orders, s)
    for t in treatments:
        if t.revenue is None or control.revenue is None:
            out[t.name] = RevenueResult(
                "missing", None, None, None, note="revenue not recorded for this arm or the control"
            )
            continue
        rpv_t, rpv_c = t.revenue / _i(t.visitors), control.revenue / _i(control.visitors)
        if (
            t.revenue_sum_of_squares is not None
            and control.revenue_sum_of_squares is not None
            and min(_i(t.visitors), _i(control.visitors)) > 1
        ):
            w = welch(
                MeanSummary(_i(t.visitors), t.revenue, t.revenue_sum_of_squares),
                MeanSummary(_i(control.visitors), control.revenue, control.revenue_sum_of_squares),
                s.confidence,
            )
            out[t.name] = _welch_result(
                "sum-of-squares",
                rpv_c,
                rpv_t,
                w,
                note="Welch interval of the RPV difference; delta-method interval of its relative lift",
            )
        else:
            out[t.name] = RevenueResult(
                "point-estimates-only",
                rpv_c,
                rpv_t,
                rpv_t - rpv_c,
                lift=rpv_t / rpv_c - 1 if rpv_c else None,
                note="point estimates only: without sums of squares or an orders file the noise of revenue is unknown",
            )
    return out


def _welch_result(method: str, rpv_c: float, rpv_t: float, w: MeanComparison, **extra: Any) -> RevenueResult:
    return RevenueResult(
        method,  # type: ignore[arg-type]
        rpv_c,
        rpv_t,
        w.difference,
        w.difference_low,
        w.difference_high,
        w.lift,
        w.lift_low,
        w.lift_high,
        w.p_value,
        **extra,
    )


def _revenue_from_orders(control: Arm, treatments: list[Arm], orders: Orders, s: Settings) -> dict[str, RevenueResult]:
    rng = np.random.default_rng(s.seed)
    by_visitor = orders.id_column == "visitor_id"
    values = {
        name: per_visitor_values(np.asarray(v, float), np.asarray(orders.ids[name]) if by_visitor else None)
        for name, v in orders.values.items()
    }
    raw = {name: np.asarray(v, float) for name, v in orders.values.items()}
    everything = (
        np.concatenate([v for v in raw.values() if len(v)]) if any(len(v) for v in raw.values()) else np.zeros(1)
    )
    cap = float(np.percentile(everything, s.cap_percentile))
    arms = [control, *treatments]
    boot = {a.name: bootstrap_means(values[a.name], _i(a.visitors), s.bootstrap_replicates, rng) for a in arms}
    note = "per-visitor revenue from the orders file" + ("" if by_visitor else " (each order counted as its own buyer)")
    out = {}
    c_vals, n_c = values[control.name], _i(control.visitors)
    for t in treatments:
        t_vals, n_t = values[t.name], _i(t.visitors)
        w = welch(MeanSummary.of(t_vals, n_t), MeanSummary.of(c_vals, n_c), s.confidence)
        capped_w = welch(
            MeanSummary.of(np.minimum(t_vals, cap), n_t), MeanSummary.of(np.minimum(c_vals, cap), n_c), s.confidence
        )
        extreme = extreme_order_check(raw[t.name], n_t, raw[control.name], n_c, cap, s.top_fraction)
        out[t.name] = _welch_result(
            "orders-file",
            float(c_vals.sum() / n_c),
            float(t_vals.sum() / n_t),
            w,
            bootstrap=bootstrap_interval(boot[t.name], boot[control.name], s.confidence, s.seed),
            capped_rpv_control=float(np.minimum(c_vals, cap).sum() / n_c),
            capped_rpv_arm=float(np.minimum(t_vals, cap).sum() / n_t),
            capped_difference=capped_w.difference,
            capped_difference_low=capped_w.difference_low,
            capped_difference_high=capped_w.difference_high,
            extreme_orders=extreme,
            note=f"{note}; orders capped at {cap:.2f} (the {s.cap_percentile:g}th percentile of all orders)",
        )
    return out


# --- recommendation -------------------------------------------------------------------------------------


def _recommend(
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


def _assumptions(s: Settings, margin: float, has_orders: bool) -> list[str]:
    items = [
        "Visitors are independent and each saw one arm for the whole test (randomised by visitor).",
        "Fixed horizon: the test was analysed once, at its planned end; repeated peeking makes p-values too small.",
        f"Prior: {s.prior_label}. Posterior probabilities are about true conversion rates under this prior.",
        f"Intervals are {s.confidence:.0%}; p-values are two-sided and Holm-adjusted across the test's comparisons.",
        f"Flat means the {1 - 2 * s.rules.alpha:.0%} interval of the relative lift lies within +/-{margin:.1%} (TOST).",
        "Revenue per visitor is read after conversion; the decision rests on conversion first.",
    ]
    if has_orders:
        items.append(
            "Order-level revenue: bootstrap resamples buyers (Poisson weights); visitors without orders add zeros."
        )
    return items
