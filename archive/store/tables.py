"""The store's tables: what was filed (SQLModel table models built on the same cores as the record models) and
what the archive derived from it (the analysis of each record).

Table models do not validate on creation; rows are always made from a :class:`~archive.records.model.Record` that
was validated first. ``body`` keeps the whole validated record as JSON so that every command can rebuild it
without reading the YAML again. ``analysis`` holds, per record, everything the per-test analysis found, as JSON,
keyed by the analysis version (code version + settings); the record's ``content_hash`` keys the rest.
"""

from __future__ import annotations

from sqlalchemy import Column, Index, Table, Text
from sqlmodel import Field, SQLModel

from archive.records.model import ArmCore, RecordCore

#: bump when the tables change; an index of another version is rebuilt from the records
SCHEMA_VERSION = 3


class RecordRow(RecordCore, table=True):
    __tablename__ = "record"

    id: str = Field(primary_key=True)
    path: str = Field(index=True, description="Record file, relative to the records folder.")
    content_hash: str = Field(description="SHA-256 of the file's bytes (and of its orders file) when synced.")
    file_stamp: str = Field(default="", description="size:mtime_ns:inode of the file (and its orders file).")
    warnings_json: str = Field(default="[]", sa_column=Column(Text, nullable=False, default="[]"))
    orders_file: str | None = Field(default=None, description="The record's orders file, if any.")
    outcome: str | None = Field(default=None, index=True, description="decision.outcome")
    decision_arm: str | None = None
    arm_count: int = 0
    themes_text: str = Field(default="", description="Themes joined by spaces.")
    learnings_text: str = Field(default="", sa_column=Column(Text, nullable=False, default=""))
    body: str = Field(sa_column=Column(Text, nullable=False), description="The validated record as JSON.")


class ArmRow(ArmCore, table=True):
    __tablename__ = "arm"

    record_id: str = Field(primary_key=True, foreign_key="record.id", ondelete="CASCADE")
    name: str = Field(primary_key=True)
    position: int = 0


class ThemeRow(SQLModel, table=True):
    __tablename__ = "record_theme"

    record_id: str = Field(primary_key=True, foreign_key="record.id", ondelete="CASCADE")
    theme: str = Field(primary_key=True, index=True)


class TagRow(SQLModel, table=True):
    __tablename__ = "record_tag"

    record_id: str = Field(primary_key=True, foreign_key="record.id", ondelete="CASCADE")
    tag: str = Field(primary_key=True, index=True)


class SegmentRow(SQLModel, table=True):
    __tablename__ = "segment"

    record_id: str = Field(primary_key=True, foreign_key="record.id", ondelete="CASCADE")
    dimension: str = Field(primary_key=True)
    value: str = Field(primary_key=True)
    arm: str = Field(primary_key=True)
    visitors: int
    conversions: int
    revenue: float | None = None


class AnalysisRow(SQLModel, table=True):
    """What the analysis of one record found (JSON of the result dataclasses), for one analysis version."""

    __tablename__ = "analysis"

    record_id: str = Field(primary_key=True, foreign_key="record.id", ondelete="CASCADE")
    version: str = Field(description="Analysis code version and settings hash this was computed with.")
    error: str | None = Field(default=None, description="Why the record cannot be analysed (None: analysed).")
    trusted: bool | None = None
    action: str | None = Field(default=None, description="The recommended action: ship, keep-control or iterate.")
    result_json: str = Field(default="null", sa_column=Column(Text, nullable=False, default="null"))
    memo_json: str = Field(default="null", sa_column=Column(Text, nullable=False, default="null"))
    segments_json: str = Field(default="null", sa_column=Column(Text, nullable=False, default="null"))
    effects_json: str = Field(default="[]", sa_column=Column(Text, nullable=False, default="[]"))
    segment_effects_json: str = Field(default="{}", sa_column=Column(Text, nullable=False, default="{}"))


class SitePageRow(SQLModel, table=True):
    """The rendered pieces of one test's page on the site (Markdown of its memo, its charts as SVG text), kept
    as JSON so that a site build renders again only what changed."""

    __tablename__ = "site_page"

    record_id: str = Field(primary_key=True, foreign_key="record.id", ondelete="CASCADE")
    key: str = Field(description="Site code version, record content hash and analysis version it was made from.")
    page_json: str = Field(sa_column=Column(Text, nullable=False))


class MetaRow(SQLModel, table=True):
    __tablename__ = "index_meta"

    key: str = Field(primary_key=True)
    value: str


def table_of(model: type[SQLModel]) -> Table:
    """The SQLAlchemy table behind a table model (typed, for Core queries)."""
    return model.__table__  # type: ignore[attr-defined, no-any-return]


RECORD = table_of(RecordRow)
ARM = table_of(ArmRow)
THEME = table_of(ThemeRow)
TAG = table_of(TagRow)
SEGMENT = table_of(SegmentRow)
META = table_of(MetaRow)
ANALYSIS = table_of(AnalysisRow)
SITE_PAGE = table_of(SitePageRow)
CHILD_TABLES = (ARM, THEME, TAG, SEGMENT, ANALYSIS, SITE_PAGE)
ALL_TABLES = (RECORD, *CHILD_TABLES, META)

Index("ix_record_started", RECORD.c.started)
