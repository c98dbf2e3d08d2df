"""Loading the archive into the database, incrementally.

Every file is hashed; only files whose bytes (or whose orders file's bytes) changed since the last run are parsed
and validated again. Unchanged records take part in the archive-wide checks through what the index already knows
of them. Records whose file was deleted leave the index. An archive with errors is refused as a whole, after all
its errors have been collected, and the index is left as it was. The records folder is only read.
"""

from __future__ import annotations

import hashlib
from collections import defaultdict
from collections.abc import Callable, Hashable, Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from sqlalchemy import Engine, delete, select, text

from archive.records.load import LoadedRecord, Summary, archive_problems, gc_paused, load_record, record_files
from archive.records.model import Record, RecordCore
from archive.records.orders import orders_path
from archive.records.problems import ArchiveInvalid, Problem, errors
from archive.records.yamlsource import YamlProblem, read_yaml
from archive.store.engine import prepare
from archive.store.tables import ARM, CHILD_TABLES, RECORD, SEGMENT, TAG, THEME

_CHUNK = 500


@dataclass
class IndexReport:
    added: list[str] = field(default_factory=list)
    updated: list[str] = field(default_factory=list)
    removed: list[str] = field(default_factory=list)
    unchanged: int = 0
    warnings: list[Problem] = field(default_factory=list)
    rebuilt: bool = False

    @property
    def total(self) -> int:
        return len(self.added) + len(self.updated) + self.unchanged


@dataclass(frozen=True)
class _Known:
    id: str
    content_hash: str
    orders_file: str | None


def _hash(record_path: Path, raw: bytes, orders_file: str | None) -> str:
    digest = hashlib.sha256(raw).hexdigest()
    if orders_file:
        target = orders_path(record_path, orders_file)
        if target is not None and target.is_file():
            digest += ":" + hashlib.sha256(target.read_bytes()).hexdigest()
        else:
            digest += ":missing"
    return digest


@gc_paused()
def index_archive(records_dir: Path, engine: Engine, progress: Callable[[int], None] | None = None) -> IndexReport:
    """Bring the index in line with the records folder. Raises :class:`ArchiveInvalid` on any error."""
    report = IndexReport(rebuilt=not prepare(engine))
    known = _known_records(engine)
    files = record_files(records_dir)
    changed: list[tuple[Path, bytes]] = []
    unchanged_paths: set[str] = set()
    for path in files:
        raw = path.read_bytes()
        before = known.get(path.name)
        if before is not None and _hash(path, raw, before.orders_file) == before.content_hash:
            unchanged_paths.add(path.name)
        else:
            changed.append((path, raw))
        if progress is not None:
            progress(0)
    problems: list[Problem] = []
    loaded: list[LoadedRecord] = []
    failed: list[str] = []
    for path, raw in changed:
        record, found = load_record(path, raw)
        problems.extend(found)
        if record is not None:
            loaded.append(record)
        else:
            failed.append(path.stem)
        if progress is not None:
            progress(1)
    summaries = [lr.summary for lr in loaded]
    summaries += _known_summaries(engine, records_dir, unchanged_paths)
    problems += archive_problems(summaries, _LineFinder(records_dir, loaded), failed)
    if errors(problems):
        raise ArchiveInvalid(problems)
    report.warnings = sorted(p for p in problems if p.severity == "warning")

    present = {p.name for p in files}
    gone = [k for name, k in known.items() if name not in present]
    replaced = [known[path.name] for path, _ in changed if path.name in known]
    with engine.begin() as conn:
        _delete(conn, [k.id for k in gone + replaced])
        _insert(conn, loaded, {path.name: raw for path, raw in changed}, records_dir)
    old_ids = {k.id for k in replaced}
    for lr in loaded:
        (report.updated if lr.record.id in old_ids else report.added).append(lr.record.id)
    report.removed = sorted(k.id for k in gone if k.id not in {lr.record.id for lr in loaded})
    report.unchanged = len(unchanged_paths)
    report.added.sort()
    report.updated.sort()
    return report


def _known_records(engine: Engine) -> dict[str, _Known]:
    with engine.connect() as conn:
        rows = conn.execute(select(RECORD.c.path, RECORD.c.id, RECORD.c.content_hash, RECORD.c.orders_file))
        return {path: _Known(id_, digest, orders) for path, id_, digest, orders in rows}


def _known_summaries(engine: Engine, records_dir: Path, paths: set[str]) -> list[Summary]:
    if not paths:
        return []
    themes: dict[str, list[str]] = defaultdict(list)
    tags: dict[str, list[str]] = defaultdict(list)
    with engine.connect() as conn:
        for record_id, theme in conn.execute(select(THEME.c.record_id, THEME.c.theme)):
            themes[record_id].append(theme)
        for record_id, tag in conn.execute(select(TAG.c.record_id, TAG.c.tag)):
            tags[record_id].append(tag)
        rows = conn.execute(select(RECORD.c.path, RECORD.c.id, RECORD.c.iterates_on, RECORD.c.page_area))
        out = []
        for path, id_, iterates_on, page_area in rows:
            if path in paths:
                full = str(records_dir / path)
                out.append(Summary(full, id_, iterates_on, tuple(themes[id_]), tuple(tags[id_]), page_area))
    return out


class _LineFinder:
    """Lines of fields for archive-wide problems; unchanged files are parsed only when a problem needs them."""

    def __init__(self, records_dir: Path, loaded: Iterable[LoadedRecord]):
        self.records_dir = records_dir
        self.docs = {lr.path: lr.doc for lr in loaded}

    def __call__(self, path: str, loc: Sequence[Hashable]) -> int:
        doc = self.docs.get(path)
        if doc is None:
            try:
                doc = self.docs[path] = read_yaml(Path(path))
            except YamlProblem:
                return 0
        return doc.line_of(loc)


def _delete(conn: Any, ids: list[str]) -> None:
    sqlite = conn.dialect.name == "sqlite"
    for start in range(0, len(ids), _CHUNK):
        chunk = ids[start : start + _CHUNK]
        for table in CHILD_TABLES:
            conn.execute(delete(table).where(table.c.record_id.in_(chunk)))
        conn.execute(delete(RECORD).where(RECORD.c.id.in_(chunk)))
        if sqlite:
            params = {f"p{i}": v for i, v in enumerate(chunk)}
            marks = ", ".join(f":p{i}" for i in range(len(chunk)))
            conn.execute(text(f"DELETE FROM record_search WHERE record_id IN ({marks})"), params)


def _insert(conn: Any, loaded: list[LoadedRecord], raw_by_name: dict[str, bytes], records_dir: Path) -> None:
    records, arms, themes, tags, segments, search = [], [], [], [], [], []
    for lr in loaded:
        r = lr.record
        name = Path(lr.path).name
        records.append(_record_row(r, name, _hash(records_dir / name, raw_by_name[name], r.orders_file)))
        for position, arm in enumerate(r.arms):
            arms.append({**arm.model_dump(), "record_id": r.id, "position": position})
        themes += [{"record_id": r.id, "theme": t} for t in dict.fromkeys(r.themes)]
        tags += [{"record_id": r.id, "tag": t} for t in dict.fromkeys(r.tags)]
        for dim, by_value in r.segments.items():
            for value, by_arm in by_value.items():
                for arm_name, c in by_arm.items():
                    segments.append(
                        {
                            "record_id": r.id,
                            "dimension": dim,
                            "value": value,
                            "arm": arm_name,
                            "visitors": c.visitors,
                            "conversions": c.conversions,
                            "revenue": c.revenue,
                        }
                    )
        search.append(
            {
                "record_id": r.id,
                "title": r.title,
                "hypothesis": r.hypothesis_text(),
                "learnings_text": "\n".join(r.learnings),
            }
        )
    for table, rows in (
        (RECORD, records),
        (ARM, arms),
        (THEME, themes),
        (TAG, tags),
        (SEGMENT, segments),
    ):
        if rows:
            conn.execute(table.insert(), rows)
    if search and conn.dialect.name == "sqlite":
        conn.execute(
            text(
                "INSERT INTO record_search (record_id, title, hypothesis, learnings_text) "
                "VALUES (:record_id, :title, :hypothesis, :learnings_text)"
            ),
            search,
        )


def _record_row(r: Record, path: str, content_hash: str) -> dict[str, Any]:
    core = {name: getattr(r, name) for name in RecordCore.model_fields}
    return {
        **core,
        "hypothesis": r.hypothesis_text(),
        "path": path,
        "content_hash": content_hash,
        "orders_file": r.orders_file,
        "outcome": r.decision.outcome if r.decision else None,
        "decision_arm": r.decision.arm if r.decision else None,
        "arm_count": len(r.arms),
        "themes_text": " ".join(r.themes),
        "learnings_text": "\n".join(r.learnings),
        "body": r.model_dump_json(),
    }
