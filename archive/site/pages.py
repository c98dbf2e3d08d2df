"""The pages of the site as Markdown text, from test entries and the pooled archive.

Everything taken from a record goes through :func:`archive.render.formats.md_text` (HTML and Markdown escaped, one
line) and links from records are kept only for http(s). Pages link to each other with relative ``.md`` paths,
which MkDocs resolves and checks. Output is deterministic: sorted iteration, fixed number formats, no dates
other than the records' own.
"""

from __future__ import annotations

import datetime as dt
import re
from collections import defaultdict
from dataclasses import dataclass

from archive.planning.hyperprior import DEFAULT_HYPERPRIOR, Hyperprior
from archive.planning.priors import lift_prior
from archive.pooling.groups import GroupResult, PoolResult
from archive.records.model import Record, record_from_json
from archive.render.formats import interval, md_text, pct
from archive.site import layout, svg
from archive.site.entries import TestEntry
from archive.site.names import slug


@dataclass
class SiteData:
    entries: list[TestEntry]
    records: dict[str, Record]
    by_theme: PoolResult | None
    by_area: PoolResult | None
    follow_ups: dict[str, list[str]]
    shrunk: dict[tuple[str, str], float]  # (record, arm) -> lift shrunk toward its first theme
    hyperprior: Hyperprior = DEFAULT_HYPERPRIOR  # of the history prior shown on theme pages


def site_data(
    entries: list[TestEntry],
    by_theme: PoolResult | None,
    by_area: PoolResult | None,
    hyperprior: Hyperprior = DEFAULT_HYPERPRIOR,
) -> SiteData:
    records = {e.id: record_from_json(e.record_json) for e in entries}
    follow: dict[str, list[str]] = defaultdict(list)
    for r in records.values():
        if r.iterates_on:
            follow[r.iterates_on].append(r.id)
    shrunk: dict[tuple[str, str], float] = {}
    if by_theme is not None:
        first_theme = {rid: r.themes[0] for rid, r in records.items()}
        for g in by_theme.groups:
            for m in g.members:
                if first_theme.get(m.record_id) == g.key:
                    shrunk[(m.record_id, m.arm)] = m.shrunk_lift
    follow_ups = {k: sorted(v) for k, v in follow.items()}
    return SiteData(entries, records, by_theme, by_area, follow_ups, shrunk, hyperprior)


def test_link(record: Record, prefix: str = "../tests/") -> str:
    return f"[{md_text(record.title)}]({prefix}{record.id}.md)"


def _label_links(values: list[str], folder: str, prefix: str = "../") -> str:
    return ", ".join(f"[{md_text(v)}]({prefix}{folder}/{slug(v)}.md)" for v in values)


_URL = re.compile(r"https?://[\w\-.~:/?#@!$&*+,;=%]+", re.IGNORECASE)


def _safe_url(url: str) -> str | None:
    """The link if it is plain http(s) made of URL characters only (no quote, bracket, brace, space or pipe that
    Markdown or HTML could read), otherwise None: such links are dropped."""
    return url.strip() if _URL.fullmatch(url.strip()) else None


# --- one page per test ----------------------------------------------------------------------------------


#: every page with statistics ends with a link to the one-line explanations of its terms
GLOSSARY_LINE = (
    "*What the terms mean (Holm p, TOST, tau², I², prediction interval, ...): "
    "[glossary]({prefix}reference/glossary.md).*"
)


def test_page(entry: TestEntry, data: SiteData) -> str:
    r = data.records[entry.id]
    out = [f"# {md_text(r.title)}", "", *layout.answer_block(entry, r)]
    facts = [
        layout.label(r.status),
        f"{r.started or '?'} to {r.ended or '?'}",
        f"page area {_label_links([r.page_area], 'areas')}",
        f"themes {_label_links(r.themes, 'themes')}",
    ]
    if r.owner:
        facts.append(f"owner {md_text(r.owner)}")
    out += [" · ".join(facts), ""]
    if r.tags:
        out += ["Tags: " + _label_links(r.tags, "tags"), ""]
    out += ["## Hypothesis", "", md_text(r.hypothesis_text()), ""]
    out += _plan_section(r)
    if not layout.shows_verdict(r):
        out += ["## Results", "", f"Not analysed while the test is {md_text(r.status)}: {layout.progress(r)}", ""]
    elif entry.memo_markdown:
        out += ["## Results", "", f"![Posterior of the lift]({entry.id}-lift.svg)", "", entry.memo_markdown, ""]
        segment_charts = sorted(name for name in entry.charts if "-segments-" in name)
        if segment_charts:
            out += ["### Segment forest plots", ""]
            out += [f"![{md_text(name)}]({name})" for name in segment_charts]
            out.append("")
        out += _realistic_section(entry, data)
    else:
        out += ["## Results", "", "No results yet.", ""]
    if r.learnings:
        out += ["## Learnings", "", *[f"- {md_text(item)}" for item in r.learnings], ""]
    related = []
    if r.iterates_on and r.iterates_on in data.records:
        related.append(f"- iterates on {test_link(data.records[r.iterates_on], '')}")
    for child in data.follow_ups.get(r.id, []):
        related.append(f"- followed by {test_link(data.records[child], '')}")
    if related:
        out += ["## Related tests", "", *related, ""]
    links = [(link.label, _safe_url(link.url)) for link in r.links]
    kept = [f"- [{md_text(label)}]({url})" for label, url in links if url]
    if kept:
        out += ["## Links", "", *kept, ""]
    out += [GLOSSARY_LINE.format(prefix="../"), ""]
    return "\n".join(out).rstrip() + "\n"


def _plan_section(r: Record) -> list[str]:
    if r.plan is None:
        return ["## Plan", "", "No plan was recorded.", ""]
    p = r.plan
    rows = [
        ("baseline rate", pct(p.baseline_rate, 2) if p.baseline_rate else "not set"),
        ("smallest lift that matters", pct(p.minimum_lift, 1, True) if p.minimum_lift else "not set"),
        ("alpha / power", f"{p.alpha:g} / {p.power:.0%}"),
        ("visitors per arm", f"{p.visitors_per_arm:,}" if p.visitors_per_arm else "not set"),
        ("days", str(p.days) if p.days else "not set"),
        ("split", ", ".join(f"{md_text(k)} {v:g}" for k, v in p.split.items()) if p.split else "equal"),
        ("pre-registered segments", ", ".join(md_text(x) for x in p.segments) or "none"),
    ]
    if p.prior is not None:
        rows.append(("history prior", md_text(f"{p.prior.source}: mean log lift {p.prior.mean_log_lift:+.4f}")))
    return ["## Plan", "", "| item | planned |", "|---|---|", *[f"| {a} | {b} |" for a, b in rows], ""]


def _realistic_section(entry: TestEntry, data: SiteData) -> list[str]:
    rows = []
    for e in entry.effects:
        shrunk = data.shrunk.get((e.record_id, e.arm))
        rows.append(
            f"| {md_text(e.arm)} | {pct(e.lift, 1, True)} | {pct(shrunk, 1, True) if shrunk is not None else 'n/a'} |"
        )
    if not rows:
        return []
    return [
        "### Realistic lift",
        "",
        "The observed lift beside the lift shrunk toward the other tests of its first theme (empirical Bayes): "
        "what to expect if the change is rolled out.",
        "",
        "| arm | observed | shrunk toward the theme |",
        "|---|---|---|",
        *rows,
        "",
    ]


# --- groups ---------------------------------------------------------------------------------------------


def group_page(kind: str, group: GroupResult, data: SiteData, pooled: PoolResult) -> str:
    noun = "theme" if kind == "themes" else "page area"
    out = [f"# {md_text(group.key)}", "", f"Every archived test of this {noun}, pooled.", ""]
    if group.warning:
        out += [f"**Warning:** {md_text(group.warning)}.", ""]
    pi = interval(group.prediction_low, group.prediction_high)
    rows = [
        ("comparisons (tests)", f"{group.comparisons} ({group.tests})"),
        ("pooled lift (95% CI)", f"{pct(group.lift, 1, True)} {interval(group.lift_low, group.lift_high)}"),
        ("next test of this kind (95% prediction interval)", pi),
        (
            "tau² between tests [Q-profile]",
            f"{group.tau2:.5f}"
            + (f" [{group.tau2_low:.5f}, {group.tau2_high:.5f}]" if group.tau2_high is not None else ""),
        ),
        (
            "I², Q (p)",
            f"{group.i_squared:.0%}, {group.q:.2f} ({'n/a' if group.q_p_value is None else f'{group.q_p_value:.3g}'})",
        ),
        (
            "winners (Jeffreys 95%), shrunk",
            f"{group.wins.count}/{group.wins.total} "
            f"[{pct(group.wins.low, 0)}, {pct(group.wins.high, 0)}], {pct(group.wins.shrunk)}",
        ),
        ("shipped", f"{group.shipped.count}/{group.shipped.total}"),
        ("DerSimonian-Laird comparison", f"{pct(group.dl_lift, 1, True)} {interval(group.dl_low, group.dl_high)}"),
    ]
    if kind == "themes":
        effects = [e for entry in data.entries for e in entry.effects]
        try:
            prior = lift_prior(effects, group.key, hyper=data.hyperprior)
            low, high = prior.interval()
            rows.append(
                (
                    "prior for a new test",
                    f"{pct(prior.lift, 1, True)} [{pct(low, 1, True)}, {pct(high, 1, True)}], "
                    f"P(lift > 0) {prior.prob_above(0):.2f} (three-level model; {md_text(prior.hyperprior)})",
                )
            )
        except ValueError:
            pass
    out += ["| figure | value |", "|---|---|", *[f"| {a} | {b} |" for a, b in rows], ""]
    chart_rows, links, notes = group_chart(group, data)
    out += layout.inline_chart(svg.forest_chart(chart_rows, group.key, links, notes))
    out += [
        f"Each row links to its test. [The chart as an SVG file]({slug(group.key)}-forest.svg).",
        "",
        f"Method: {md_text(pooled.method)}. {md_text(pooled.prediction_convention)}.",
        "",
    ]
    out += [
        "## Tests",
        "",
        "| test | arm | observed lift (95% CI) | shrunk | verdict | shipped |",
        "|---|---|---|---|---|---|",
    ]
    for m in group.members:
        record = data.records[m.record_id]
        out.append(
            f"| {test_link(record)} | {md_text(m.arm)} | {pct(m.lift, 1, True)} {interval(m.low, m.high)} | "
            f"{pct(m.shrunk_lift, 1, True)} | {layout.label(m.verdict)} | {'yes' if m.shipped else ''} |"
        )
    out += ["", "## Learnings", ""]
    seen = []
    for rid in dict.fromkeys(m.record_id for m in group.members):
        record = data.records[rid]
        for item in record.learnings:
            seen.append(f"- {md_text(item)} ({test_link(record)})")
    out += seen or ["No learnings recorded."]
    out += ["", GLOSSARY_LINE.format(prefix="../")]
    return "\n".join(out).rstrip() + "\n"


def group_chart_rows(group: GroupResult, data: SiteData) -> list[tuple[str, float, float, float, bool]]:
    return group_chart(group, data)[0]


def group_chart(
    group: GroupResult, data: SiteData
) -> tuple[list[tuple[str, float, float, float, bool]], list[str | None], list[tuple[str, str] | None]]:
    """The forest plot of a group: rows labelled by test title and arm, each linked to its test page (from the
    group's page), and the verdict written beside each row in its tone's colour."""
    from archive.render.palette import TONE_COLOURS, tone

    rows: list[tuple[str, float, float, float, bool]] = []
    links: list[str | None] = []
    notes: list[tuple[str, str] | None] = []
    for m in group.members:
        record = data.records[m.record_id]
        rows.append((f"{record.title} · {m.arm}", m.lift, m.low, m.high, False))
        links.append(f"../tests/{record.id}.html")
        notes.append((m.verdict, TONE_COLOURS[tone(m.verdict)][0]))
    rows.append(("pooled (95% CI)", group.lift, group.lift_low, group.lift_high, True))
    links.append(None)
    notes.append(None)
    if group.prediction_low is not None and group.prediction_high is not None:
        rows.append(("next test (95% PI)", group.lift, group.prediction_low, group.prediction_high, False))
        links.append(None)
        notes.append(None)
    return rows, links, notes


def label_pages(data: SiteData) -> dict[str, list[tuple[str, str]]]:
    """Every theme and page area a record uses, as (label, page name) per folder: each gets a page, pooled or not."""
    themes = {t for r in data.records.values() for t in r.themes}
    areas = {r.page_area for r in data.records.values()}
    return {
        "themes": sorted((t, slug(t)) for t in themes),
        "areas": sorted((a, slug(a)) for a in areas),
    }


def unpooled_group_page(kind: str, key: str, data: SiteData) -> str:
    """The page of a theme or page area with no comparison to pool: a new label, or tests that are unfinished or
    failed a trust check. Lists its tests; nothing is ranked or pooled."""
    noun = "theme" if kind == "themes" else "page area"
    members = [
        r for r in _sorted_records(data) if (key in r.themes if kind == "themes" else r.page_area == key)
    ]
    by_id = {e.id: e for e in data.entries}
    out = [
        f"# {md_text(key)}",
        "",
        f"No comparison of this {noun} can be pooled yet: its tests are unfinished or failed a trust check. "
        "It is listed apart from the ranked groups.",
        "",
        "| test | started | status | verdicts |",
        "|---|---|---|---|",
    ]
    for r in members:
        out.append(
            f"| {test_link(r)} | {r.started or ''} | {layout.label(r.status)} | "
            f"{layout.verdict_labels(by_id[r.id], r)} |"
        )
    return "\n".join(out).rstrip() + "\n"


def _ranked_row(g: GroupResult, folder: str) -> str:
    """The start of a row of a ranked-groups table: linked name, comparisons, pooled lift, prediction interval."""
    return (
        f"| [{md_text(g.key)}]({folder}{slug(g.key)}.md) | {g.comparisons} | {pct(g.lift, 1, True)} "
        f"{interval(g.lift_low, g.lift_high)} | {interval(g.prediction_low, g.prediction_high)} |"
    )


def too_few(kind: str, pooled: PoolResult | None, data: SiteData, folder: str, level: int = 2) -> list[str]:
    """The groups shown apart from the ranking: too few comparisons to rank, or none to pool at all."""
    small = [g for g in pooled.groups if g.warning] if pooled else []
    pooled_names = {slug(g.key) for g in pooled.groups} if pooled else set()
    empty = [(key, name) for key, name in label_pages(data)[kind] if name not in pooled_names]
    if not small and not empty:
        return []
    out = [
        f"{'#' * level} Too few tests to rank",
        "",
        f"Fewer than {_min_group()} comparisons: their pooled figures are fragile, so they are not ranked.",
        "",
        "| group | comparisons | pooled lift (95% CI) | winners |",
        "|---|---|---|---|",
    ]
    for g in sorted(small, key=lambda x: x.key):
        out.append(
            f"| [{md_text(g.key)}]({folder}{slug(g.key)}.md) | {g.comparisons} | {pct(g.lift, 1, True)} "
            f"{interval(g.lift_low, g.lift_high)} | {g.wins.count}/{g.wins.total} |"
        )
    for key, name in empty:
        out.append(f"| [{md_text(key)}]({folder}{name}.md) | 0 | none to pool yet | |")
    return [*out, ""]


def _min_group() -> int:
    from archive.pooling.groups import MIN_GROUP

    return MIN_GROUP


def group_index(kind: str, pooled: PoolResult | None, data: SiteData) -> str:
    noun = "Themes" if kind == "themes" else "Page areas"
    out = [f"# {noun}", ""]
    if pooled is None:
        return "\n".join([*out, "Nothing to pool yet.", "", *too_few(kind, pooled, data, "")]).rstrip() + "\n"
    out += [
        md_text(pooled.ranking) + ".",
        "",
        "| group | comparisons | pooled lift (95% CI) | next test (95% PI) | winners |",
        "|---|---|---|---|---|",
    ]
    ranked = [g for g in pooled.groups if not g.warning]
    out += [_ranked_row(g, "") + f" {g.wins.count}/{g.wins.total} |" for g in ranked]
    if not ranked:
        out = [*out[:-4], f"No {noun.lower()[:-1]} has enough comparisons to be ranked yet."]
    out += ["", *too_few(kind, pooled, data, "")]
    return "\n".join(out).rstrip() + "\n"


# --- archive-wide pages ---------------------------------------------------------------------------------


def _sorted_records(data: SiteData) -> list[Record]:
    return sorted(data.records.values(), key=lambda r: (r.started or dt.date.max, r.id), reverse=True)


def tests_index(data: SiteData) -> str:
    out = [
        "# Tests",
        "",
        "Every filed test, newest first. Click a column heading to sort; type to filter. Planned and running tests "
        "show their status instead of a verdict.",
        "",
        '<div class="table-filter" data-columns="status,page area,decision"></div>',
        "",
        "| test | started | page area | status | decision | verdicts |",
        "|---|---|---|---|---|---|",
    ]
    by_id = {e.id: e for e in data.entries}
    for r in _sorted_records(data):
        entry = by_id[r.id]
        verdicts = layout.verdict_labels(entry, r) if entry.verdicts or not layout.shows_verdict(r) else ""
        if layout.shows_verdict(r) and not entry.trusted:
            verdicts += " " + layout.label("failed", "trust check failed")
        decision = layout.label(r.decision.outcome) if r.decision else ""
        out.append(
            f"| {test_link(r, '')} | {r.started or ''} | {md_text(r.page_area)} | {layout.label(r.status)} | "
            f"{decision} | {verdicts} |"
        )
    return "\n".join(out).rstrip() + "\n"


def learnings_page(data: SiteData) -> str:
    out = [
        "# Learnings",
        "",
        "What the team learned, test by test, newest first, with the decision taken and the themes.",
        "",
    ]
    for r in _sorted_records(data):
        if not r.learnings:
            continue
        facts = [str(r.started) if r.started else "not started"]
        facts.append(f"decision {layout.label(r.decision.outcome)}" if r.decision else layout.label(r.status))
        facts.append("themes " + _label_links(r.themes, "themes", ""))
        out += [f"## {test_link(r, 'tests/')}", "", " · ".join(facts), ""]
        out += [f"- {md_text(item)}" for item in r.learnings]
        out.append("")
    return "\n".join(out).rstrip() + "\n"


def _by_tag(data: SiteData) -> dict[str, list[Record]]:
    by_tag: dict[str, list[Record]] = defaultdict(list)
    for r in data.records.values():
        for tag in r.tags:
            by_tag[tag].append(r)
    return by_tag


def tags_page(data: SiteData) -> str:
    out = ["# Tags", "", "Every tag, with the number of tests that carry it.", ""]
    by_tag = _by_tag(data)
    out += [f"- [{md_text(tag)}](tags/{slug(tag)}.md) ({len(by_tag[tag])})" for tag in sorted(by_tag)]
    return "\n".join(out).rstrip() + "\n"


def tag_pages(data: SiteData) -> dict[str, str]:
    """One page per tag (file name -> Markdown), listing its tests."""
    pages = {}
    for tag, records in _by_tag(data).items():
        out = [f"# Tag: {md_text(tag)}", "", "[All tags](../tags.md)", ""]
        out += [f"- {test_link(r)}" for r in sorted(records, key=lambda x: x.id)]
        pages[f"{slug(tag)}.md"] = "\n".join(out) + "\n"
    return pages


def home_page(data: SiteData, latest: int = 8) -> str:
    records = _sorted_records(data)
    finished = [r for r in records if r.status in ("finished", "stopped-early")]
    out = ["# The test archive at a glance", ""]
    pooled = data.by_theme
    if pooled is not None:
        prog = pooled.programme
        fpr = "n/a" if prog.false_positive_risk is None else pct(prog.false_positive_risk)
        out += [
            f"{len(finished)} finished tests, {prog.comparisons} comparisons with control. "
            f"Observed win rate {pct(prog.win_rate.rate)} [{pct(prog.win_rate.low, 0)}, {pct(prog.win_rate.high, 0)}]; "
            f"estimated false positive risk of a winner {fpr} (Kohavi & Chen 2024, alpha {prog.alpha:g}, "
            f"assumed power {prog.assumed_power:.0%}).",
            "",
        ]
    out += ["![Tests per quarter](assets/tests-per-quarter.svg)", ""]
    if pooled is not None:
        ranked = [g for g in pooled.groups if not g.warning]
        out += ["## What tends to win", ""]
        if ranked:
            out += [
                md_text(pooled.ranking) + ".",
                "",
                "| theme | comparisons | pooled lift (95% CI) | next test (95% PI) |",
                "|---|---|---|---|",
            ]
            out += [_ranked_row(g, "themes/") for g in ranked]
        else:
            out.append("No theme has enough comparisons to be ranked yet.")
        out.append("")
        out += too_few("themes", pooled, data, "themes/", level=3)
    out += ["## Latest learnings", ""]
    shown = 0
    for r in records:
        if r.learnings and shown < latest:
            out.append(f"- {md_text(r.learnings[0])} ({test_link(r, 'tests/')})")
            shown += 1
    out += ["", "## Decisions that disagree with the figures", ""]
    disagreeing = [e for e in data.entries if e.agrees is False]
    for e in sorted(disagreeing, key=lambda x: x.id):
        out.append(f"- {test_link(data.records[e.id], 'tests/')}: {md_text(e.disagreement or '')}")
    if not disagreeing:
        out.append("None.")
    out += ["", "Figures assume independent visitors and fixed-horizon tests; see each test's assumptions."]
    return "\n".join(out).rstrip() + "\n"


def quarter_counts(data: SiteData) -> list[tuple[str, int]]:
    """Tests started per quarter, from the first quarter to the last, quarters without a test included."""
    counts: dict[int, int] = defaultdict(int)
    for r in data.records.values():
        if r.started:
            counts[r.started.year * 4 + (r.started.month - 1) // 3] += 1
    if not counts:
        return []
    return [(f"{q // 4} Q{q % 4 + 1}", counts.get(q, 0)) for q in range(min(counts), max(counts) + 1)]
