"""What the site needs of each test, computed once per record version and cached by the record's content hash.

An entry holds the record, its effects for pooling, and the rendered pieces of its page that depend on nothing
but the record itself (the analysis memo in Markdown and the per-test charts). A rebuild after one record changed
recomputes only that record's entry.
"""

from __future__ import annotations

import hashlib
import pickle
from collections.abc import Hashable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from archive.analysis import Analysis, CannotAnalyze, Settings, analyze
from archive.analysis.segments import analyze_segments
from archive.pooling.effects import Effect, record_effects_from
from archive.records.load import LoadedRecord, Summary, archive_problems, load_record, record_files
from archive.records.model import record_from_json
from archive.records.orders import orders_path
from archive.records.problems import ArchiveInvalid, Problem, errors
from archive.records.yamlsource import YamlDocument, YamlProblem, read_yaml
from archive.render.analysis import build_memo
from archive.render.markdown import markdown_sections
from archive.site import svg
from archive.site.names import segment_chart_name
from archive.stats import bayes

CACHE_VERSION = "1"


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


def digest_of(path: Path, raw: bytes, orders_file: str | None) -> str:
    """Content hash of a record and its orders file (the cache key of its entry)."""
    h = hashlib.sha256(CACHE_VERSION.encode())
    h.update(raw)
    if orders_file:
        target = orders_path(path, orders_file)
        h.update(target.read_bytes() if target is not None and target.is_file() else b"missing")
    return h.hexdigest()


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


def build_entry(loaded: LoadedRecord, digest: str, settings: Settings) -> TestEntry:
    record = loaded.record
    try:
        analysis = analyze(record, loaded.orders, settings)
    except CannotAnalyze:
        return TestEntry(record.id, digest, record.model_dump_json(), [], {}, True, None, None, None, "")
    dims = list(record.segments)
    segments = analyze_segments(record, dims, "bh", settings) if dims else None
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
        record_json=record.model_dump_json(),
        effects=record_effects_from(record, analysis),
        verdicts={c.arm: c.verdict for c in analysis.comparisons},
        trusted=analysis.trusted,
        action=rec.action,
        agrees=rec.agrees_with_record,
        disagreement=rec.disagreement,
        memo_markdown="\n".join(markdown_sections(memo.sections[:-1], level=3)),
        charts=charts,
    )


def _read_cache(path: Path) -> TestEntry | None:
    if not path.exists():
        return None
    try:
        cached = pickle.loads(path.read_bytes())
    except Exception:  # a stale or foreign cache file is simply rebuilt
        return None
    return cached if isinstance(cached, TestEntry) else None


def load_entries(
    records_dir: Path, cache_dir: Path, settings: Settings | None = None
) -> tuple[list[TestEntry], list[Problem], int]:
    """Entries for every record, reusing cached ones whose files did not change (those are not parsed again).
    Returns the entries, the problems found (changed files and archive-wide checks) and how many were fresh.
    Raises :class:`ArchiveInvalid` when the archive has errors."""
    s = settings or Settings(bootstrap_replicates=400)
    cache_dir.mkdir(parents=True, exist_ok=True)
    entries: list[TestEntry] = []
    problems: list[Problem] = []
    summaries: list[Summary] = []
    docs: dict[str, YamlDocument] = {}
    failed: list[str] = []
    fresh = 0
    for path in record_files(records_dir):
        raw = path.read_bytes()
        cache_file = cache_dir / f"{path.stem}.pickle"
        cached = _read_cache(cache_file)
        record = record_from_json(cached.record_json) if cached is not None else None
        if cached is not None and record is not None and cached.digest == digest_of(path, raw, record.orders_file):
            entries.append(cached)
            summaries.append(Summary.of(str(path), record))
            continue
        loaded, found = load_record(path, raw)
        problems += found
        if loaded is None or errors(found):
            failed.append(path.stem)
            continue
        docs[loaded.path] = loaded.doc
        summaries.append(loaded.summary)
        entry = build_entry(loaded, digest_of(path, raw, loaded.record.orders_file), s)
        cache_file.write_bytes(pickle.dumps(entry))
        entries.append(entry)
        fresh += 1

    def line_of(where: str, loc: Sequence[Hashable]) -> int:
        if where not in docs:
            try:
                docs[where] = read_yaml(Path(where))
            except YamlProblem:
                return 0
        return docs[where].line_of(loc)

    problems += archive_problems(summaries, line_of, failed)
    if errors(problems):
        raise ArchiveInvalid(problems)
    live = {f"{e.id}.pickle" for e in entries}
    for stale in cache_dir.glob("*.pickle"):
        if stale.name not in live:
            stale.unlink()
    return entries, sorted(problems), fresh
