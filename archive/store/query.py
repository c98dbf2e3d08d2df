"""Finding tests again: filters, full-text search and DataFrames for notebooks.

All functions read the index built by :func:`archive.store.sync.index_archive` and return plain data: lists of dicts
(one per test, sorted by start date then id), validated :class:`Record` objects, or pandas DataFrames.

Date filters select the tests that were running at some point in the range: ``since`` keeps tests that ended (or,
without an end date, started) on or after it, ``until`` keeps tests that started on or before it.
"""

from __future__ import annotations

import datetime as dt
import re
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from sqlalchemy import Engine, and_, func, literal_column, or_, select, text
from sqlalchemy.sql import ColumnElement

from archive.records.model import Record, record_from_json
from archive.store.engine import search_document_sql
from archive.store.tables import ANALYSIS, ARM, RECORD, SEGMENT, TAG, THEME

if TYPE_CHECKING:
    import pandas as pd

LIST_COLUMNS = ("id", "title", "status", "page_area", "themes", "started", "ended", "owner", "outcome", "arms")


class NotIndexed(LookupError):
    """The index does not hold what was asked for."""


@dataclass(frozen=True)
class Filters:
    theme: str | None = None
    page_area: str | None = None
    status: str | None = None
    outcome: str | None = None
    owner: str | None = None
    tag: str | None = None
    since: dt.date | None = None
    until: dt.date | None = None
    text: str | None = None


def find_tests(
    engine: Engine, filters: Filters | None = None, synonyms: dict[str, set[str]] | None = None
) -> list[dict[str, Any]]:
    """Tests matching every given filter, as plain dicts with the keys of ``LIST_COLUMNS``. Text search matches
    word forms (stemming) and the ``synonyms`` groups (default: :data:`SYNONYMS`)."""
    f = filters or Filters()
    R = RECORD.c
    conditions: list[ColumnElement[bool]] = []
    if f.theme:
        conditions.append(R.id.in_(select(THEME.c.record_id).where(THEME.c.theme == f.theme)))
    if f.tag:
        conditions.append(R.id.in_(select(TAG.c.record_id).where(TAG.c.tag == f.tag)))
    for name in ("page_area", "status", "outcome", "owner"):
        value = getattr(f, name)
        if value:
            conditions.append(getattr(R, name) == value)
    if f.since:
        conditions.append(func.coalesce(R.ended, R.started) >= f.since)
    if f.until:
        conditions.append(R.started <= f.until)
    if f.text:
        conditions.append(R.id.in_(_text_matches(engine, f.text, synonyms)))
    query = select(
        R.id, R.title, R.status, R.page_area, R.themes_text, R.started, R.ended, R.owner, R.outcome, R.arm_count
    ).where(*conditions)
    query = query.order_by(R.started, R.id)
    with engine.connect() as conn:
        rows = conn.execute(query).all()
    return [
        {
            "id": r[0],
            "title": r[1],
            "status": r[2],
            "page_area": r[3],
            "themes": r[4].split(),
            "started": r[5],
            "ended": r[6],
            "owner": r[7],
            "outcome": r[8],
            "arms": r[9],
        }
        for r in rows
    ]


#: words a shop team uses for the same thing (common practice; an archive adds its own under ``synonyms:`` in
#: ``archive-settings.yaml``). Search for one finds the others.
SYNONYMS: tuple[tuple[str, ...], ...] = (
    ("shipping", "delivery", "postage"),
    ("basket", "cart", "bag"),
    ("voucher", "coupon"),
    ("instalments", "installments"),
    ("colour", "color"),
    ("review", "rating"),
)


def synonym_groups(extra: dict[str, list[str]] | None = None) -> dict[str, set[str]]:
    """Each word to the set of words it stands for (itself included), merging overlapping groups."""
    groups: list[set[str]] = [set(g) for g in SYNONYMS]
    for word, others in (extra or {}).items():
        groups.append({word.lower(), *(o.lower() for o in others)})
    merged: dict[str, set[str]] = {}
    for group in groups:
        combined = set(group)
        for word in group:
            combined |= merged.get(word, set())
        for word in combined:
            merged[word] = combined
    return merged


def _text_matches(engine: Engine, words: str, synonyms: dict[str, set[str]] | None = None) -> Any:
    terms = re.findall(r"\w+", words.lower())
    if not terms:
        raise ValueError("the search text has no words")
    groups = synonyms if synonyms is not None else synonym_groups()
    alternatives = [sorted(groups.get(t) or groups.get(t.removesuffix("s")) or {t}) for t in terms]
    if engine.dialect.name == "sqlite":
        # every word (or one of its synonyms) must occur; quoting keeps FTS5 operators out of user text
        match = " AND ".join("(" + " OR ".join(f'"{w}"' for w in options) + ")" for options in alternatives)
        return text("SELECT record_id FROM record_search WHERE record_search MATCH :q").bindparams(q=match)
    if engine.dialect.name == "postgresql":
        document = func.to_tsvector("english", literal_column(search_document_sql()))
        # \w+ words only, so the tsquery operators below are the only syntax in it
        query = func.to_tsquery("english", " & ".join("(" + " | ".join(options) + ")" for options in alternatives))
        return select(RECORD.c.id).where(document.bool_op("@@")(query))
    like = [
        or_(
            *(
                col.ilike(f"%{w}%")
                for w in options
                for col in (RECORD.c.title, RECORD.c.hypothesis, RECORD.c.learnings_text)
            )
        )
        for options in alternatives
    ]
    return select(RECORD.c.id).where(and_(*like))


def get_record(engine: Engine, record_id: str) -> Record:
    """The validated record with this id, rebuilt from the index."""
    with engine.connect() as conn:
        body = conn.execute(select(RECORD.c.body).where(RECORD.c.id == record_id)).scalar_one_or_none()
    if body is None:
        raise NotIndexed(f"no test {record_id!r} in the index; check the id or run `archive index`")
    return record_from_json(body)


# --- DataFrames -----------------------------------------------------------------------------------------


def tests_frame(engine: Engine, filters: Filters | None = None) -> pd.DataFrame:
    """One row per test (columns of ``LIST_COLUMNS``)."""
    import pandas as pd

    return pd.DataFrame(find_tests(engine, filters), columns=list(LIST_COLUMNS))


def arms_frame(engine: Engine, filters: Filters | None = None) -> pd.DataFrame:
    """One row per arm of each matching test, with its conversion rate."""
    import pandas as pd

    ids = [t["id"] for t in find_tests(engine, filters)]
    columns = [c.name for c in ARM.columns]
    with engine.connect() as conn:
        rows = conn.execute(select(ARM).order_by(ARM.c.record_id, ARM.c.position)).mappings().all()
    frame = pd.DataFrame([dict(r) for r in rows], columns=columns)
    frame = frame[frame["record_id"].isin(ids)].reset_index(drop=True)
    frame["conversion_rate"] = frame["conversions"] / frame["visitors"].where(frame["visitors"] > 0)
    return frame


def segments_frame(engine: Engine, filters: Filters | None = None) -> pd.DataFrame:
    """One row per test, segment dimension, segment value and arm."""
    import pandas as pd

    ids = [t["id"] for t in find_tests(engine, filters)]
    columns = [c.name for c in SEGMENT.columns]
    with engine.connect() as conn:
        rows = conn.execute(select(SEGMENT)).mappings().all()
    frame = pd.DataFrame([dict(r) for r in rows], columns=columns)
    frame = frame[frame["record_id"].isin(ids)]
    return frame.sort_values(["record_id", "dimension", "value", "arm"]).reset_index(drop=True)


# --- what the analysis found ----------------------------------------------------------------------------


@dataclass
class StoredAnalysis:
    """The stored analysis of one test, as JSON texts (see :mod:`archive.store.derived`)."""

    record_id: str
    version: str
    error: str | None
    trusted: bool | None
    action: str | None
    result_json: str
    memo_json: str
    segments_json: str


def get_analysis(engine: Engine, record_id: str) -> StoredAnalysis:
    """The stored analysis of a test. Raises :class:`NotIndexed` for an unknown id."""
    A = ANALYSIS.c
    query = select(A.record_id, A.version, A.error, A.trusted, A.action, A.result_json, A.memo_json, A.segments_json)
    with engine.connect() as conn:
        row = conn.execute(query.where(A.record_id == record_id)).first()
    if row is None:
        raise NotIndexed(f"no analysis of {record_id!r} in the store; check the id or run `archive index`")
    return StoredAnalysis(*row)


def all_analyses(engine: Engine) -> list[StoredAnalysis]:
    """Every stored analysis, by record id."""
    A = ANALYSIS.c
    query = select(A.record_id, A.version, A.error, A.trusted, A.action, A.result_json, A.memo_json, A.segments_json)
    with engine.connect() as conn:
        return [StoredAnalysis(*row) for row in conn.execute(query.order_by(A.record_id))]


def stored_effects(engine: Engine, segment: str | None = None) -> list[dict[str, Any]]:
    """The stored effects of every pooled test as plain dicts (records in file-name order), or their segment
    effects for one dimension."""
    import json

    column = ANALYSIS.c.effects_json if segment is None else ANALYSIS.c.segment_effects_json
    query = (
        select(column).select_from(ANALYSIS.join(RECORD, RECORD.c.id == ANALYSIS.c.record_id)).order_by(RECORD.c.path)
    )
    with engine.connect() as conn:
        blobs = [b for (b,) in conn.execute(query) if b not in ("[]", "{}")]
    if segment is None:
        return [item for blob in blobs for item in json.loads(blob)]
    return [item for blob in blobs for item in json.loads(blob).get(segment, [])]


def all_records(engine: Engine) -> list[Record]:
    """Every stored record, by file name."""
    with engine.connect() as conn:
        return [record_from_json(b) for (b,) in conn.execute(select(RECORD.c.body).order_by(RECORD.c.path))]


def record_ids(engine: Engine) -> list[str]:
    with engine.connect() as conn:
        return [i for (i,) in conn.execute(select(RECORD.c.id).order_by(RECORD.c.id))]


def label_values(engine: Engine, kind: str) -> list[str]:
    """The values in use of ``theme``, ``tag``, ``page_area``, ``status``, ``outcome`` or ``owner``."""
    if kind == "theme":
        column = THEME.c.theme
    elif kind == "tag":
        column = TAG.c.tag
    else:
        column = getattr(RECORD.c, kind)
    with engine.connect() as conn:
        return sorted(v for (v,) in conn.execute(select(column).distinct()) if v is not None)
