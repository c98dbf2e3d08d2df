"""What the site needs of each test, built from the store (which holds each record's analysis).

An entry holds the record, its effects for pooling, and the rendered pieces of its page that depend on nothing
but the record itself (the analysis memo in Markdown and the per-test charts).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from sqlalchemy import Engine, select

from archive.analysis import Analysis, Settings
from archive.analysis.segments import SegmentAnalysis
from archive.pooling.effects import Effect
from archive.records.model import Record, record_from_json
from archive.render.analysis import build_memo
from archive.render.markdown import markdown_sections
from archive.site import layout, svg
from archive.site.names import segment_chart_name
from archive.stats import bayes
from archive.store.tables import ANALYSIS, RECORD, SITE_PAGE


@dataclass
class TestEntry:
    id: str
    digest: str
    record_json: str
    effects: list[Effect]
    verdicts: dict[str, str]
    trusted: bool
    action: str | None
    agrees: bool | None
    disagreement: str | None
    memo_markdown: str
    charts: dict[str, bytes] = field(default_factory=dict)  # file name -> SVG
    summary: str = ""  # the memo's first sentence: what to do
    failed_checks: list[str] = field(default_factory=list)  # names of the trust checks that failed


def _lift_chart(analysis: Analysis, title: str) -> bytes:
    control = next(a for a in analysis.arms if a.control)
    post_c = bayes.BetaPosterior.from_counts(control.conversions, control.visitors)
    curves = []
    lows = [c.credible_lift_low for c in analysis.comparisons]
    highs = [c.credible_lift_high for c in analysis.comparisons]
    span = max(highs) - min(lows)
    grid = np.linspace(max(-0.99, min(lows) - 0.5 * span), max(highs) + 0.5 * span, 90)
    for c in analysis.comparisons:
        arm = next(a for a in analysis.arms if a.name == c.arm)
        post = bayes.BetaPosterior.from_counts(arm.conversions, arm.visitors)
        density = bayes.lift_density(post, post_c, grid)
        curves.append(
            (
                f"{c.arm}: P(beats control) {c.prob_beat_control:.2f}",
                grid.tolist(),
                density.tolist(),
                c.credible_lift_low,
                c.credible_lift_high,
            )
        )
    return svg.density_chart(curves, title)


def _entry(
    record: Record,
    digest: str,
    record_json: str,
    analysis: Analysis,
    segments: SegmentAnalysis | None,
    effects: list[Effect],
) -> TestEntry:
    memo = build_memo(analysis, segments)
    charts = {f"{record.id}-lift.svg": _lift_chart(analysis, f"{record.title}: posterior of the lift")}
    if segments is not None:
        for c in analysis.comparisons:
            rows = []
            for d in segments.dimensions:
                for r in d.rows:
                    if r.arm == c.arm and r.lift is not None and r.lift_low is not None and r.lift_high is not None:
                        rows.append((f"{d.dimension}: {r.segment}", r.lift, r.lift_low, r.lift_high, False))
                for m in d.mix_checks:
                    if m.arm == c.arm and m.adjusted_lift is not None and m.adjusted_low is not None:
                        rows.append(
                            (f"{d.dimension}: all", m.adjusted_lift, m.adjusted_low, m.adjusted_high or 0.0, True)
                        )
            if rows:
                charts[segment_chart_name(record.id, c.arm)] = svg.forest_chart(rows, f"{c.arm} by segment")
    rec = analysis.recommendation
    return TestEntry(
        id=record.id,
        digest=digest,
        record_json=record_json,
        effects=effects,
        verdicts={c.arm: c.verdict for c in analysis.comparisons},
        trusted=analysis.trusted,
        action=rec.action,
        agrees=rec.agrees_with_record,
        disagreement=rec.disagreement,
        memo_markdown="\n".join(markdown_sections(memo.sections[:-1], level=3, cell=layout.memo_cell)),
        charts=charts,
        summary=memo.lead[0] if memo.lead else "",
        failed_checks=[c.name for c in analysis.checks if c.status == "failed"],
    )


#: bump when the rendered pieces of a test's page change: every page is rendered again at the next build
SITE_PAGE_VERSION = "1"


def entries_from_store(engine: Engine) -> list[TestEntry]:
    """An entry per stored record (in file-name order), built from what the store already knows: no record is
    parsed or analysed again, and a page whose record and analysis are unchanged since the last build is not
    rendered again (its pieces are kept in the store's ``site_page`` table, as JSON)."""
    import json

    from archive.analysis.jsonable import loads, loads_list
    from archive.store.query import all_analyses

    analyses = {a.record_id: a for a in all_analyses(engine)}
    with engine.connect() as conn:
        rows = conn.execute(
            select(
                RECORD.c.id,
                RECORD.c.content_hash,
                RECORD.c.body,
                ANALYSIS.c.effects_json,
                SITE_PAGE.c.key,
                SITE_PAGE.c.page_json,
            )
            .select_from(
                RECORD.outerjoin(ANALYSIS, ANALYSIS.c.record_id == RECORD.c.id).outerjoin(
                    SITE_PAGE, SITE_PAGE.c.record_id == RECORD.c.id
                )
            )
            .order_by(RECORD.c.path)
        ).all()
    entries = []
    fresh: list[dict[str, str]] = []
    for record_id, digest, body, effects_blob, page_key, page_json in rows:
        stored = analyses.get(record_id)
        if stored is None or stored.error is not None:
            entries.append(TestEntry(record_id, digest, body, [], {}, True, None, None, None, ""))
            continue
        effects = loads_list(Effect, effects_blob or "[]")
        key = f"{SITE_PAGE_VERSION}:{digest}:{stored.version}"
        if page_key == key:
            entries.append(_from_page(record_id, digest, body, effects, json.loads(page_json)))
            continue
        analysis = loads(Analysis, stored.result_json)
        segments = None if stored.segments_json == "null" else loads(SegmentAnalysis, stored.segments_json)
        entry = _entry(record_from_json(body), digest, body, analysis, segments, effects)
        entries.append(entry)
        fresh.append({"record_id": record_id, "key": key, "page_json": json.dumps(_page(entry), ensure_ascii=False)})
    if fresh:
        _keep_pages(engine, fresh)
    return entries


_PAGE_FIELDS = ("verdicts", "trusted", "action", "agrees", "disagreement", "memo_markdown", "summary", "failed_checks")


def _page(entry: TestEntry) -> dict[str, object]:
    out: dict[str, object] = {name: getattr(entry, name) for name in _PAGE_FIELDS}
    out["charts"] = {name: svg_bytes.decode("utf-8") for name, svg_bytes in entry.charts.items()}
    return out


def _from_page(record_id: str, digest: str, body: str, effects: list[Effect], page: dict[str, Any]) -> TestEntry:
    charts = {name: text.encode("utf-8") for name, text in page["charts"].items()}
    return TestEntry(record_id, digest, body, effects, charts=charts, **{name: page[name] for name in _PAGE_FIELDS})


def _keep_pages(engine: Engine, rows: list[dict[str, str]]) -> None:
    """Store freshly rendered pages (replacing older ones of the same records), in one write transaction."""
    from sqlalchemy import delete

    from archive.store.engine import write_transaction

    with write_transaction(engine) as conn:
        ids = [r["record_id"] for r in rows]
        for start in range(0, len(ids), 500):
            conn.execute(delete(SITE_PAGE).where(SITE_PAGE.c.record_id.in_(ids[start : start + 500])))
        for start in range(0, len(rows), 500):
            conn.execute(SITE_PAGE.insert(), rows[start : start + 500])


def entries_for_folder(records_dir: Path, settings: Settings | None = None) -> list[TestEntry]:
    """Entries of a records folder without a store on disk: synced into an in-memory store first (for building a
    site straight from a folder, as the tests do)."""
    from archive.store.engine import make_engine
    from archive.store.sync import index_archive

    engine = make_engine("sqlite://")
    index_archive(records_dir, engine, settings=settings)
    return entries_from_store(engine)
