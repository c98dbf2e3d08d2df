"""Bringing the store in line with the records folder: only what changed is read, checked and analysed again.

A file whose size, modification time and inode (and those of its orders file) are as at the last sync is not
read at all; the others are hashed, and only those whose bytes changed (or whose stored analysis is of another
analysis version) are parsed, validated and analysed (:mod:`archive.store.derived`), in worker processes when
there are many. Archive-wide checks run on the stored summaries of the unchanged records. An archive with errors
is refused as a whole, after all its errors have been collected, and the store is left as it was.

The whole sync is one transaction holding the store's write lock (:func:`archive.store.engine.write_transaction`):
syncs started together run one after the other, readers see the previous state until the sync commits, and a
sync killed at any moment leaves the previous state, which the next sync brings up to date. The records folder is
only read.
"""

from __future__ import annotations

import functools
import json
import multiprocessing
import os
from collections import defaultdict
from collections.abc import Callable, Iterable
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from sqlalchemy import Connection, Engine, delete, select, text, update

from archive.analysis.settings import Settings
from archive.records.checks import Summary, archive_problems
from archive.records.load import (
    LineFinder,
    content_hash,
    file_stamp,
    gc_paused,
    load_record,
    record_files,
)
from archive.records.model import Record, RecordCore, record_from_json
from archive.records.problems import ArchiveInvalid, Problem, errors
from archive.store.derived import Derived, analysis_version, derive
from archive.store.engine import prepare, require_current, write_transaction
from archive.store.tables import ANALYSIS, ARM, CHILD_TABLES, RECORD, SEGMENT, TAG, THEME

_CHUNK = 500
PARALLEL_FROM = 48  # analyse in worker processes when at least this many records must be (re)analysed


@dataclass
class SyncReport:
    added: list[str] = field(default_factory=list)
    updated: list[str] = field(default_factory=list)
    reanalysed: list[str] = field(default_factory=list)  # unchanged files analysed again (new analysis version)
    removed: list[str] = field(default_factory=list)
    unchanged: int = 0
    warnings: list[Problem] = field(default_factory=list)
    rebuilt: bool = False  # a store of an older schema was dropped and rebuilt
    waited: bool = False  # another sync held the store first

    @property
    def total(self) -> int:
        return len(self.added) + len(self.updated) + len(self.reanalysed) + self.unchanged

    @property
    def changed(self) -> bool:
        return bool(self.added or self.updated or self.reanalysed or self.removed)

    def line(self) -> str:
        """One line saying what the sync did, e.g. '2 records re-analysed (1 added, 1 updated)'."""
        if not self.changed:
            return f"store in sync ({self.unchanged} records)"
        n = len(self.added) + len(self.updated) + len(self.reanalysed)
        parts = [f"{len(v)} {k}" for k, v in (("added", self.added), ("updated", self.updated)) if v]
        if self.reanalysed:
            parts.append(f"{len(self.reanalysed)} for new settings")
        if self.removed:
            parts.append(f"{len(self.removed)} removed")
        return f"{n} record(s) re-analysed ({', '.join(parts)}); {self.unchanged} unchanged"


@dataclass
class _Known:
    id: str
    content_hash: str
    stamp: str
    orders_file: str | None
    version: str | None


@dataclass
class _Processed:
    """One file read, checked and (when it has no errors) analysed: only plain data, so workers can return it."""

    name: str
    digest: str
    stamp: str
    problems: list[Problem]
    record_json: str | None = None
    derived: Derived | None = None


def process_file(path: str, raw: bytes, settings: Settings | None) -> _Processed:
    """Parse, validate and (with ``settings``) analyse one record file."""
    file = Path(path)
    loaded, problems = load_record(file, raw)
    if loaded is None or errors(problems):
        return _Processed(file.name, "", "", problems)
    record = loaded.record
    derived = derive(record, loaded.orders, settings) if settings is not None else None
    return _Processed(
        file.name,
        content_hash(file, raw, record.orders_file),
        file_stamp(file, record.orders_file),
        problems,
        record.model_dump_json(),
        derived,
    )


def _process_task(task: tuple[str, bytes], settings: Settings | None) -> _Processed:
    return process_file(task[0], task[1], settings)


@dataclass
class _Plan:
    """What a scan of the folder found: files to process, unchanged files, files gone."""

    files: list[Path]
    to_process: list[tuple[Path, bytes]]
    unchanged: set[str]
    restamp: dict[str, str]  # unchanged bytes, new stamp
    reanalyse: set[str]  # unchanged bytes, other analysis version


def _scan(records_dir: Path, known: dict[str, _Known], version: str | None, full: bool) -> _Plan:
    files = record_files(records_dir)
    plan = _Plan(files, [], set(), {}, set())
    for path in files:
        before = known.get(path.name)
        orders_file = before.orders_file if before else None
        stamp = file_stamp(path, orders_file)
        current = before is not None and (version is None or before.version == version)
        if before is not None and current and not full and stamp == before.stamp:
            plan.unchanged.add(path.name)
            continue
        raw = path.read_bytes()
        if before is not None and content_hash(path, raw, orders_file) == before.content_hash:
            if current:
                plan.unchanged.add(path.name)
                if stamp != before.stamp:
                    plan.restamp[path.name] = stamp
                continue
            plan.reanalyse.add(path.name)
        plan.to_process.append((path, raw))
    return plan


def _process_all(
    tasks: list[tuple[Path, bytes]],
    settings: Settings | None,
    progress: Callable[[int], None] | None,
    workers: int | None,
) -> list[_Processed]:
    count = workers if workers is not None else (os.cpu_count() or 1)
    jobs = [(str(path), raw) for path, raw in tasks]
    one = functools.partial(_process_task, settings=settings)
    if count <= 1 or len(jobs) < PARALLEL_FROM or settings is None:
        results = []
        for job in jobs:
            results.append(one(job))
            if progress is not None:
                progress(1)
        return results
    context = multiprocessing.get_context("fork")
    results = []
    with ProcessPoolExecutor(max_workers=count, mp_context=context) as pool:
        for result in pool.map(one, jobs, chunksize=16):
            results.append(result)
            if progress is not None:
                progress(1)
    return results


@gc_paused()
def sync(
    records_dir: Path,
    engine: Engine,
    settings: Settings | None = None,
    *,
    create: bool = False,
    full: bool = False,
    progress: Callable[[int], None] | None = None,
    on_wait: Callable[[], None] | None = None,
    workers: int | None = None,
) -> SyncReport:
    """Bring the store in line with the records folder. Raises :class:`ArchiveInvalid` on any error (the store
    is then left as it was). ``create`` makes (or rebuilds) the tables; without it a missing or outdated store is
    refused. ``full`` re-hashes every file instead of trusting unchanged stamps."""
    s = settings or Settings()
    version = analysis_version(s)
    report = SyncReport()
    if not create:
        require_current(engine, str(engine.url))

    def waiting() -> None:
        report.waited = True
        if on_wait is not None:
            on_wait()

    if not create and not full:
        with engine.connect() as conn:  # most syncs find nothing to do: no write lock for them
            known = _known_records(conn)
        plan = _scan(records_dir, known, version, full)
        if not plan.to_process and not plan.restamp and len(plan.files) == len(known):
            report.unchanged = len(plan.unchanged)
            return report
    with write_transaction(engine, waiting) as conn:
        if create:
            report.rebuilt = not prepare(conn)
        known = _known_records(conn)
        plan = _scan(records_dir, known, version, full)
        present = {p.name for p in plan.files}
        gone = [k for name, k in known.items() if name not in present]
        if not plan.to_process and not gone:
            if plan.restamp:
                _restamp(conn, known, plan.restamp)
            report.unchanged = len(plan.unchanged)
            return report
        processed = _process_all(plan.to_process, s, progress, workers)
        good = [item for item in processed if item.record_json is not None]
        records, problems = _problems(conn, records_dir, processed, plan.unchanged)
        if errors(problems):
            raise ArchiveInvalid(problems)
        report.warnings = sorted(p for p in problems if p.severity == "warning")

        replaced = [known[item.name] for item in good if item.name in known]
        _delete(conn, [k.id for k in gone + replaced])
        _insert(conn, good, records)
        _restamp(conn, known, plan.restamp)
    old_ids = {k.id for k in replaced}
    for item in good:
        record_id = records[item.name].id
        if item.name in plan.reanalyse:
            report.reanalysed.append(record_id)
        else:
            (report.updated if record_id in old_ids else report.added).append(record_id)
    new_ids = {r.id for r in records.values()}
    report.removed = sorted(k.id for k in gone if k.id not in new_ids)
    report.unchanged = len(plan.unchanged)
    for names in (report.added, report.updated, report.reanalysed):
        names.sort()
    return report


def index_archive(
    records_dir: Path,
    engine: Engine,
    progress: Callable[[int], None] | None = None,
    settings: Settings | None = None,
    full: bool = False,
) -> SyncReport:
    """Sync, creating the store's tables if needed (or rebuilding a store of another schema version)."""
    return sync(records_dir, engine, settings, create=True, full=full, progress=progress)


@dataclass
class CheckResult:
    files: int
    problems: list[Problem]


@gc_paused()
def check_against_store(records_dir: Path, engine: Engine) -> CheckResult:
    """Check the archive, reading only the files changed since the last sync (unchanged records contribute their
    stored warnings and summaries). Writes nothing."""
    with engine.connect() as conn:
        known = _known_records(conn)
        plan = _scan(records_dir, known, None, False)
        processed = _process_all(plan.to_process, None, None, 1)
        present = {p.name for p in plan.files}
        if processed or any(name not in present for name in known):
            _, problems = _problems(conn, records_dir, processed, plan.unchanged)
        else:  # nothing changed since the last sync, which passed the archive-wide checks
            problems = []
        problems += _stored_warnings(conn, records_dir, plan.unchanged)
    return CheckResult(len(plan.files), sorted(problems))


def _problems(
    conn: Connection, records_dir: Path, processed: list[_Processed], unchanged: set[str]
) -> tuple[dict[str, Record], list[Problem]]:
    """The records read afresh (by file name) and every problem: their own, and the archive-wide checks over them
    and the stored summaries of the unchanged files."""
    records = {item.name: record_from_json(item.record_json) for item in processed if item.record_json}
    failed = [Path(item.name).stem for item in processed if item.record_json is None]
    summaries = [Summary.of(str(records_dir / name), r) for name, r in records.items()]
    summaries += _known_summaries(conn, records_dir, unchanged)
    problems = [p for item in processed for p in item.problems]
    return records, problems + archive_problems(summaries, LineFinder(), failed)


# --- reading and writing rows ---------------------------------------------------------------------------


def _known_records(conn: Connection) -> dict[str, _Known]:
    query = select(
        RECORD.c.path, RECORD.c.id, RECORD.c.content_hash, RECORD.c.file_stamp, RECORD.c.orders_file, ANALYSIS.c.version
    ).select_from(RECORD.outerjoin(ANALYSIS, ANALYSIS.c.record_id == RECORD.c.id))
    return {
        path: _Known(id_, digest, stamp, orders, version)
        for path, id_, digest, stamp, orders, version in conn.execute(query)
    }


def _known_summaries(conn: Connection, records_dir: Path, paths: set[str]) -> list[Summary]:
    if not paths:
        return []
    themes: dict[str, list[str]] = defaultdict(list)
    tags: dict[str, list[str]] = defaultdict(list)
    for record_id, theme in conn.execute(select(THEME.c.record_id, THEME.c.theme)):
        themes[record_id].append(theme)
    for record_id, tag in conn.execute(select(TAG.c.record_id, TAG.c.tag)):
        tags[record_id].append(tag)
    rows = conn.execute(select(RECORD.c.path, RECORD.c.id, RECORD.c.iterates_on, RECORD.c.page_area))
    out = []
    for path, id_, iterates_on, page_area in rows:
        if path in paths:
            out.append(
                Summary(str(records_dir / path), id_, iterates_on, tuple(themes[id_]), tuple(tags[id_]), page_area)
            )
    return out


def _stored_warnings(conn: Connection, records_dir: Path, paths: set[str]) -> list[Problem]:
    out = []
    for path, blob in conn.execute(select(RECORD.c.path, RECORD.c.warnings_json)):
        if path in paths:
            for item in json.loads(blob):
                out.append(Problem(str(records_dir / path), item["line"], item["field"], item["message"], "warning"))
    return out


def _restamp(conn: Connection, known: dict[str, _Known], stamps: dict[str, str]) -> None:
    for name, stamp in stamps.items():
        conn.execute(update(RECORD).where(RECORD.c.id == known[name].id).values(file_stamp=stamp))


def _delete(conn: Connection, ids: list[str]) -> None:
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


def _insert(conn: Connection, items: Iterable[_Processed], records: dict[str, Record]) -> None:
    rows: dict[str, list[dict[str, Any]]] = defaultdict(list)
    for item in items:
        r = records[item.name]
        warnings = [
            {"line": p.line, "field": p.field, "message": p.message} for p in item.problems if p.severity == "warning"
        ]
        rows["record"].append(_record_row(r, item, json.dumps(warnings, ensure_ascii=False)))
        for position, arm in enumerate(r.arms):
            rows["arm"].append({**arm.model_dump(), "record_id": r.id, "position": position})
        rows["theme"] += [{"record_id": r.id, "theme": t} for t in dict.fromkeys(r.themes)]
        rows["tag"] += [{"record_id": r.id, "tag": t} for t in dict.fromkeys(r.tags)]
        for dim, by_value in r.segments.items():
            for value, by_arm in by_value.items():
                for arm_name, c in by_arm.items():
                    rows["segment"].append(
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
        if item.derived is not None:
            rows["analysis"].append(item.derived.row(r.id))
        rows["search"].append(
            {
                "record_id": r.id,
                "title": r.title,
                "hypothesis": r.hypothesis_text(),
                "learnings_text": "\n".join(r.learnings),
            }
        )
    for table, name in ((RECORD, "record"), (ARM, "arm"), (THEME, "theme"), (TAG, "tag"), (SEGMENT, "segment")):
        for start in range(0, len(rows[name]), _CHUNK * 4):
            conn.execute(table.insert(), rows[name][start : start + _CHUNK * 4])
    for start in range(0, len(rows["analysis"]), _CHUNK):
        conn.execute(ANALYSIS.insert(), rows["analysis"][start : start + _CHUNK])
    if rows["search"] and conn.dialect.name == "sqlite":
        conn.execute(
            text(
                "INSERT INTO record_search (record_id, title, hypothesis, learnings_text) "
                "VALUES (:record_id, :title, :hypothesis, :learnings_text)"
            ),
            rows["search"],
        )


def _record_row(r: Record, item: _Processed, warnings_json: str) -> dict[str, Any]:
    core = {name: getattr(r, name) for name in RecordCore.model_fields}
    return {
        **core,
        "hypothesis": r.hypothesis_text(),
        "path": item.name,
        "content_hash": item.digest,
        "file_stamp": item.stamp,
        "warnings_json": warnings_json,
        "orders_file": r.orders_file,
        "outcome": r.decision.outcome if r.decision else None,
        "decision_arm": r.decision.arm if r.decision else None,
        "arm_count": len(r.arms),
        "themes_text": " ".join(r.themes),
        "learnings_text": "\n".join(r.learnings),
        "body": item.record_json,
    }
