"""The memo of one analysed test (and its segments)."""

from __future__ import annotations

from archive.analysis.results import Analysis, Comparison
from archive.analysis.segments import SegmentAnalysis
from archive.render.formats import STATUS_MARK, interval, interval_plain, money, pct, prob, pvalue
from archive.render.model import Memo, Section, Table


def answer(a: Analysis) -> str:
    """The answer in one or two plain sentences: what to do, the lift it rests on, revenue, the trust checks."""
    rec = a.recommendation
    by_arm = {c.arm: c for c in a.comparisons}
    currency = str(a.settings.get("currency") or "")

    def lift(c: Comparison) -> str:
        shown = pct(c.lift, 1, True)
        return f"{shown} conversion {interval(c.lift_low, c.lift_high)}" if c.lift_low is not None else shown

    if rec.action == "ship" and rec.arm in by_arm:
        c = by_arm[rec.arm]
        head = f"Ship {rec.arm}: {lift(c)}, {_revenue_words(c, currency)}."
    elif rec.action == "iterate":
        arms = ", ".join(rec.keep_arms)
        size = f" with about {rec.visitors_per_arm_needed:,} visitors per arm" if rec.visitors_per_arm_needed else ""
        head = f"Not decided yet: test {arms} again against control{size}."
        best = max(a.comparisons, key=lambda c: c.lift or -1.0, default=None)
        if best is not None:
            head += f" Best so far {best.arm}: {lift(best)}, {_revenue_words(best, currency)}."
    else:
        best = max(a.comparisons, key=lambda c: c.lift or -1.0, default=None)
        head = "Keep control: no arm beats it."
        if best is not None:
            head = f"Keep control: no arm beats it (best {best.arm}: {lift(best)}, {_revenue_words(best, currency)})."
    failed = [c.name for c in a.checks if c.status == "failed"]
    warned = [c.name for c in a.checks if c.status == "warning"]
    if failed:
        trust = f"Trust check failed: {', '.join(failed)}; read every figure with care."
    elif warned:
        trust = f"Trust checks passed, with a warning on {', '.join(warned)}."
    else:
        trust = "Trust checks passed."
    return f"{head} {trust}"


def _revenue_words(c: Comparison, currency: str) -> str:
    r = c.revenue
    if r.lift is None:
        return "revenue per visitor not recorded"
    change = pct(r.lift, 1, True)
    if r.lift_low is None:
        return f"revenue per visitor {change} (unchecked: its spread is unknown)"
    if c.revenue_guardrail == "non-inferior" or (r.lift_low is not None and r.lift_low > -c.revenue_margin):
        return f"revenue per visitor not worse ({change} {interval(r.lift_low, r.lift_high)})"
    return f"revenue per visitor {change} {interval(r.lift_low, r.lift_high)}"


def _arm_label(name: str, control: bool) -> str:
    return f"{name} (control)" if control and name != "control" else name


def build_memo(a: Analysis, segments: SegmentAnalysis | None = None) -> Memo:
    """The memo of one test: the answer first, then the main table, then the statistics behind it (sections
    marked as details), the segments asked for and the assumptions."""
    rec = a.recommendation
    currency = str(a.settings.get("currency") or "")
    lead = [answer(a)] + ([a.rule] if a.rule else [])
    if rec.recorded_outcome is not None:
        recorded = rec.recorded_outcome + (f" {rec.recorded_arm}" if rec.recorded_arm else "")
        lead.append(
            f"Recorded decision: {recorded} (agrees with the figures)."
            if rec.agrees_with_record
            else f"Recorded decision: {recorded}. Note: {rec.disagreement}"
        )
    else:
        lead.append("No decision recorded yet.")
    by_arm = {c.arm: c for c in a.comparisons}
    main_rows = []
    for arm in a.arms:
        c = by_arm.get(arm.name)
        lift = ""
        if c is not None:
            lift = pct(c.lift, 1, True)
            lift += f" {interval(c.lift_low, c.lift_high)}" if c.lift_low is not None else " (no interval)"
        main_rows.append(
            [
                _arm_label(arm.name, arm.control),
                f"{arm.visitors:,}",
                pct(arm.rate, 2),
                lift,
                "control" if c is None else c.verdict,
                money(arm.revenue_per_visitor, currency=currency),
            ]
        )
    results = Section(
        "Results",
        paragraphs=[f"Recommendation: {rec.explanation}."],
        tables=[
            Table(
                ["arm", "visitors", "conversion", "lift vs control (95% CI)", "verdict", "revenue/visitor"], main_rows
            )
        ],
    )
    checks = Section(
        "Trust checks",
        tables=[Table(["check", "status", "detail"], [[c.name, STATUS_MARK[c.status], c.detail] for c in a.checks])],
        details=True,
    )
    rows = []
    for arm in a.arms:
        c = by_arm.get(arm.name)
        rows.append(
            [
                _arm_label(arm.name, arm.control),
                f"{arm.conversions:,}",
                f"{pct(arm.rate, 2)} {interval_plain(arm.rate_low, arm.rate_high)}",
                "" if c is None else pvalue(c.p_value),
                "" if c is None else pvalue(c.p_holm),
                "" if c is None else prob(c.prob_beat_control),
                prob(arm.prob_best),
                f"{arm.expected_loss * 100:.3f} pp",
            ]
        )
    conversion = Section(
        "Conversion details",
        paragraphs=[
            "Holm p: the p-value adjusted for comparing several arms with one control. P(beats control), P(best) "
            "and expected loss are Bayesian figures under the stated prior; they inform, they never ship an arm. "
            "Equivalence (TOST) tests whether the lift lies within the margin that matters."
        ],
        tables=[
            Table(
                [
                    "arm",
                    "conversions",
                    "rate (95% credible)",
                    "p",
                    "Holm p",
                    "P(beats control)",
                    "P(best)",
                    "expected loss (rate points)",
                ],
                rows,
            )
        ],
        bullets=[f"{c.arm}: {c.verdict}: {c.reason}." for c in a.comparisons]
        + [
            f"{c.arm}: credible interval of the lift {interval(c.credible_lift_low, c.credible_lift_high)}"
            + (
                ""
                if c.verdict == "winner"
                else f"; equivalence within +/-{pct(c.equivalence_margin)}: p {pvalue(c.equivalence_p)}"
            )
            + (" (zero cell: 0.5 added to each cell)" if c.zero_cell_correction else "")
            for c in a.comparisons
        ],
        details=True,
    )
    sections = [results, checks, conversion, _revenue_section(a)]
    if segments is not None:
        sections += segment_sections(segments)
    sections.append(Section("Assumptions", bullets=list(a.assumptions)))
    return Memo(f"{a.title} ({a.id})", lead, sections)


def _revenue_section(a: Analysis) -> Section:
    control = next(x for x in a.arms if x.control)
    currency = str(a.settings.get("currency") or "")
    rows = [
        [
            _arm_label(control.name, True),
            money(control.revenue_per_visitor, currency=currency),
            money(control.average_order_value, currency=currency),
            "",
            "",
            "",
        ]
    ]
    bullets = []
    for c in a.comparisons:
        arm = next(x for x in a.arms if x.name == c.arm)
        r = c.revenue
        diff = money(r.difference, True)
        if r.difference_low is not None:
            diff += f" [{money(r.difference_low, True)}, {money(r.difference_high, True)}]"
        rows.append(
            [
                c.arm,
                money(arm.revenue_per_visitor, currency=currency),
                money(arm.average_order_value, currency=currency),
                diff,
                f"{pct(r.lift, 1, True)} {interval(r.lift_low, r.lift_high)}" if r.lift is not None else "n/a",
                r.method,
            ]
        )
        bullets.append(f"{c.arm}: {r.note}.")
        bullets.append(f"{c.arm}: guardrail {c.revenue_guardrail}: {c.revenue_check}.")
        if r.bootstrap is not None:
            b = r.bootstrap
            bullets.append(
                f"{c.arm}: bootstrap ({b.replicates} replicates) RPV difference "
                f"[{money(b.difference_low, True)}, {money(b.difference_high, True)}], "
                f"lift {interval(b.lift_low, b.lift_high)}."
            )
        if r.extreme_orders is not None:
            e = r.extreme_orders
            share = "n/a" if e.top_share_of_difference is None else pct(e.top_share_of_difference, 0)
            survives = "keeps its sign" if e.sign_survives else "changes sign"
            bullets.append(
                f"{c.arm}: orders above {e.cap:,.2f} make {share} of the RPV difference; capped difference "
                f"{money(r.capped_difference, True)} [{money(r.capped_difference_low, True)}, "
                f"{money(r.capped_difference_high, True)}]; without each arm's top 1% of orders the difference "
                f"{survives} ({money(e.difference_without_top, True)})."
            )
    table = Table(
        ["arm", "revenue/visitor", "avg order value", "RPV difference (95% CI)", "RPV lift (95% CI)", "method"], rows
    )
    return Section("Revenue details", tables=[table], bullets=bullets, details=True)


def segment_sections(seg: SegmentAnalysis) -> list[Section]:
    sections = []
    for d in seg.dimensions:
        rows = [
            [
                r.segment + (" (small)" if r.small else ""),
                r.arm,
                f"{r.visitors:,} / {r.control_visitors:,}",
                f"{pct(r.share_of_arm)} / {pct(r.share_of_control)}",
                f"{pct(r.rate, 2)} / {pct(r.control_rate, 2)}",
                f"{pct(r.lift, 1, True)} {interval(r.lift_low, r.lift_high)}",
                pvalue(r.p_value),
                pvalue(r.p_adjusted),
                pvalue(r.srm_p_value),
            ]
            for r in d.rows
        ]
        headers = [
            "segment",
            "arm",
            "visitors (arm / control)",
            "share of traffic",
            "rate (arm / control)",
            "lift (95% CI)",
            "p",
            f"{seg.adjustment} p",
            "split p",
        ]
        bullets = [f"{t.arm}: {t.statement}." for t in d.effect_tests]
        for m in d.mix_checks:
            if m.adjusted_lift is not None:
                bullets.append(
                    f"{m.arm}: pooled lift {pct(m.pooled_lift, 1, True)}; mix-adjusted (Mantel-Haenszel) "
                    f"{pct(m.adjusted_lift, 1, True)} {interval(m.adjusted_low, m.adjusted_high)}."
                )
            if m.warning:
                bullets.append(f"Warning: {m.warning}.")
        sections.append(
            Section(
                f"Segments by {d.dimension} ({d.label})",
                paragraphs=[] if d.preregistered else ["Exploratory cut: not named in the plan before the test."],
                tables=[Table(headers, rows)],
                bullets=bullets,
            )
        )
    if seg.dimensions:
        sections[-1].bullets += seg.notes
    return sections


ARM_COLUMNS = (
    "arm",
    "control",
    "visitors",
    "conversions",
    "rate",
    "lift",
    "lift_low",
    "lift_high",
    "p_value",
    "p_holm",
    "prob_beat_control",
    "prob_best",
    "expected_loss",
    "verdict",
    "revenue_per_visitor",
    "rpv_lift",
    "rpv_lift_low",
    "rpv_lift_high",
    "currency",
)


def arm_rows(a: Analysis) -> list[dict[str, object]]:
    """One row per arm with its unrounded figures (the CSV of ``archive analyze``)."""
    by_arm = {c.arm: c for c in a.comparisons}
    rows = []
    for arm in a.arms:
        c = by_arm.get(arm.name)
        r = c.revenue if c is not None else None
        rows.append(
            {
                "arm": arm.name,
                "control": arm.control,
                "visitors": arm.visitors,
                "conversions": arm.conversions,
                "rate": arm.rate,
                "lift": None if c is None else c.lift,
                "lift_low": None if c is None else c.lift_low,
                "lift_high": None if c is None else c.lift_high,
                "p_value": None if c is None else c.p_value,
                "p_holm": None if c is None else c.p_holm,
                "prob_beat_control": None if c is None else c.prob_beat_control,
                "prob_best": arm.prob_best,
                "expected_loss": arm.expected_loss,
                "verdict": "control" if c is None else c.verdict,
                "revenue_per_visitor": arm.revenue_per_visitor,
                "rpv_lift": None if r is None else r.lift,
                "rpv_lift_low": None if r is None else r.lift_low,
                "rpv_lift_high": None if r is None else r.lift_high,
                "currency": a.settings.get("currency"),
            }
        )
    return rows
