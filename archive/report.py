"""The analysis as a memo: one neutral model of headings, paragraphs and tables, rendered as Markdown or in the
terminal. Numbers are rounded here and only here."""

from __future__ import annotations

import html
import re
from dataclasses import dataclass, field

from .analysis import Analysis
from .pooling import PoolResult
from .segments import SegmentAnalysis

STATUS_MARK = {"ok": "ok", "warning": "check", "failed": "FAILED"}


@dataclass
class Table:
    headers: list[str]
    rows: list[list[str]]


@dataclass
class Section:
    heading: str
    paragraphs: list[str] = field(default_factory=list)
    tables: list[Table] = field(default_factory=list)
    bullets: list[str] = field(default_factory=list)


@dataclass
class Memo:
    title: str
    lead: list[str]
    sections: list[Section]


def pct(value: float | None, digits: int = 1, signed: bool = False) -> str:
    if value is None:
        return "n/a"
    return f"{value * 100:+.{digits}f}%" if signed else f"{value * 100:.{digits}f}%"


def interval(low: float | None, high: float | None, digits: int = 1) -> str:
    if low is None or high is None:
        return "n/a"
    return f"[{pct(low, digits, True)}, {pct(high, digits, True)}]"


def money(value: float | None, signed: bool = False) -> str:
    if value is None:
        return "n/a"
    return f"{value:+,.3f}" if signed else f"{value:,.3f}"


def pvalue(p: float | None) -> str:
    if p is None:
        return "n/a"
    return "<0.0001" if p < 1e-4 else f"{p:.4f}"


def prob(p: float) -> str:
    return f"{p:.3f}"


def build_memo(a: Analysis, segments: SegmentAnalysis | None = None) -> Memo:
    rec = a.recommendation
    lead = [f"Recommendation: {rec.explanation}."]
    if rec.recorded_outcome is not None:
        recorded = rec.recorded_outcome + (f" {rec.recorded_arm}" if rec.recorded_arm else "")
        lead.append(
            f"Recorded decision: {recorded} (agrees with the figures)."
            if rec.agrees_with_record
            else f"Recorded decision: {recorded}. Note: {rec.disagreement}"
        )
    else:
        lead.append("No decision recorded yet.")
    if not a.trusted:
        failed = ", ".join(c.name for c in a.checks if c.status == "failed")
        lead.append(f"Trust check failed ({failed}): every verdict below is downgraded one step.")
    checks = Section(
        "Trust checks",
        tables=[Table(["check", "status", "detail"], [[c.name, STATUS_MARK[c.status], c.detail] for c in a.checks])],
    )
    by_arm = {c.arm: c for c in a.comparisons}
    rows = []
    for arm in a.arms:
        c = by_arm.get(arm.name)
        rows.append(
            [
                arm.name + (" (control)" if arm.control else ""),
                f"{arm.visitors:,}",
                f"{arm.conversions:,}",
                f"{pct(arm.rate, 2)} {interval_plain(arm.rate_low, arm.rate_high)}",
                "" if c is None else f"{pct(c.lift, 1, True)} {interval(c.lift_low, c.lift_high)}",
                "" if c is None else pvalue(c.p_value),
                "" if c is None else pvalue(c.p_holm),
                "" if c is None else prob(c.prob_beat_control),
                prob(arm.prob_best),
                f"{arm.expected_loss * 100:.3f} pp",
                "" if c is None else c.verdict,
            ]
        )
    conversion = Section(
        "Conversion (primary metric)",
        tables=[
            Table(
                [
                    "arm",
                    "visitors",
                    "conversions",
                    "rate (95% credible)",
                    "lift vs control (95% CI)",
                    "p",
                    "Holm p",
                    "P(beats control)",
                    "P(best)",
                    "expected loss (rate points)",
                    "verdict",
                ],
                rows,
            )
        ],
        bullets=[f"{c.arm}: {c.verdict}: {c.reason}." for c in a.comparisons]
        + [
            f"{c.arm}: credible interval of the lift {interval(c.credible_lift_low, c.credible_lift_high)}; "
            f"equivalence within +/-{pct(c.equivalence_margin)}: p {pvalue(c.equivalence_p)}"
            + (" (zero cell: 0.5 added to each cell)" if c.zero_cell_correction else "")
            for c in a.comparisons
        ],
    )
    sections = [checks, conversion, _revenue_section(a)]
    if segments is not None:
        sections += segment_sections(segments)
    sections.append(Section("Assumptions", bullets=list(a.assumptions)))
    return Memo(f"{a.title} ({a.id})", lead, sections)


def interval_plain(low: float, high: float) -> str:
    return f"[{pct(low, 2)}, {pct(high, 2)}]"


def _revenue_section(a: Analysis) -> Section:
    control = next(x for x in a.arms if x.control)
    rows = [
        [
            f"{control.name} (control)",
            money(control.revenue_per_visitor),
            money(control.average_order_value),
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
                money(arm.revenue_per_visitor),
                money(arm.average_order_value),
                diff,
                f"{pct(r.lift, 1, True)} {interval(r.lift_low, r.lift_high)}" if r.lift is not None else "n/a",
                r.method,
            ]
        )
        bullets.append(f"{c.arm}: {r.note}.")
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
    return Section("Revenue (secondary metrics)", tables=[table], bullets=bullets)


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


def build_pool_memo(p: PoolResult) -> Memo:
    """What tends to win: the ranked groups, then win rates, realistic lifts and checks of the archive."""
    prog = p.programme
    lead = [
        f"{prog.comparisons} comparisons pooled by {p.by}; {p.method}. {p.ranking}.",
        f"Observed win rate {pct(prog.win_rate.rate)} {interval_plain_rate(prog.win_rate)}"
        + (
            f"; implied true success rate {pct(prog.true_success_rate)} and false positive risk of a winner "
            f"{pct(prog.false_positive_risk)} (Kohavi & Chen 2024, alpha {prog.alpha:g}, assumed power "
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
            f"{g.wins.count}/{g.wins.total} {interval_plain_rate(g.wins)}; shrunk {pct(g.wins.shrunk)}",
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
    if p.between_groups is not None:
        b = p.between_groups
        checks.append(f"Do the groups differ? Q between {b.q:.2f}, df {b.df}, p {pvalue(b.p_value)}.")
    if p.meta_regression is not None:
        m = p.meta_regression
        checks.append(
            f"Meta-regression on {m.moderator}: slope {m.slope:+.4f} log-lift per year (SE {m.se:.4f}), "
            f"p {pvalue(m.p_value)}, permutation p {pvalue(m.permutation_p_value)} ({m.permutations} permutations)."
        )
    if p.egger is not None:
        e = p.egger
        checks.append(f"Egger's test for small-study effects: intercept {e.intercept:.2f}, p {pvalue(e.p_value)}.")
        if e.warning:
            checks.append(f"Warning: {e.warning}.")
    if p.excluded:
        checks.append(f"Left out after a failed trust check: {', '.join(p.excluded)}.")
    if p.split_controls:
        checks.append(f"Shared controls split evenly: {', '.join(p.split_controls)}.")
    sections = [ranked, Section("Across the archive", bullets=checks)]
    sections.append(
        Section("Conventions and assumptions", bullets=[p.interval, p.prediction_convention, *p.assumptions])
    )
    return Memo(f"Pooled archive by {p.by}", lead, sections)


def interval_plain_rate(r) -> str:  # type: ignore[no-untyped-def]
    if r.low is None:
        return ""
    return f"[{pct(r.low, 0)}, {pct(r.high, 0)}]"


# --- Markdown -------------------------------------------------------------------------------------------

_MD_SPECIAL = re.compile(r"([\\`*_\[\]|~])")
_MD_LINE_START = re.compile(r"^(?:([#+\-=])(?=\s|$)|(>)|(\d+)([.)])(?=\s|$))")


def md_text(text: str) -> str:
    """Text from a record made safe for Markdown and HTML: one line, HTML escaped, Markdown syntax escaped (so
    no raw HTML, link, emphasis or table cell break survives)."""
    one_line = " ".join(text.split())
    escaped = _MD_SPECIAL.sub(r"\\\1", html.escape(one_line, quote=False))
    return _MD_LINE_START.sub(lambda m: "\\" + (m[1] or m[2]) if m[1] or m[2] else m[3] + "\\" + m[4], escaped)


def markdown_sections(sections: list[Section], level: int = 2) -> list[str]:
    """Sections as Markdown lines; every cell and sentence escaped with :func:`md_text`."""
    out: list[str] = []
    for section in sections:
        out += [f"{'#' * level} {md_text(section.heading)}", ""]
        out += [md_text(p) + "\n" for p in section.paragraphs]
        for table in section.tables:
            out.append("| " + " | ".join(md_text(h) for h in table.headers) + " |")
            out.append("|" + "---|" * len(table.headers))
            out += ["| " + " | ".join(md_text(c) for c in row) + " |" for row in table.rows]
            out.append("")
        out += [f"- {md_text(b)}" for b in section.bullets]
        if section.bullets:
            out.append("")
    return out


def render_markdown(memo: Memo) -> str:
    out = [f"# {md_text(memo.title)}", ""]
    out += [md_text(p) + "\n" for p in memo.lead]
    out += markdown_sections(memo.sections)
    return "\n".join(out).rstrip() + "\n"


# --- terminal -------------------------------------------------------------------------------------------


def render_terminal(memo: Memo, console) -> None:  # type: ignore[no-untyped-def]
    from rich.table import Table as RichTable

    console.print(f"[bold]{_rich_escape(memo.title)}[/bold]")
    for line in memo.lead:
        console.print(line, markup=False)
    for section in memo.sections:
        console.print(f"\n[bold underline]{section.heading}[/bold underline]")
        for p in section.paragraphs:
            console.print(p, markup=False)
        for table in section.tables:
            rich_table = RichTable(header_style="bold", show_lines=False)
            for header in table.headers:
                rich_table.add_column(header, overflow="fold")
            for row in table.rows:
                rich_table.add_row(*(_styled(c) for c in row))
            console.print(rich_table)
        for b in section.bullets:
            console.print(f"  - {b}", markup=False)


def _rich_escape(text: str) -> str:
    from rich.markup import escape

    return escape(text)


_STYLES = {"winner": "green", "loser": "red", "FAILED": "bold red", "check": "yellow", "trade-off": "magenta"}


def _styled(cell: str):  # type: ignore[no-untyped-def]
    from rich.text import Text

    return Text(cell, style=_STYLES.get(cell, ""))
