"""Where the index lives and how to reach it: an SQLite file by default, any SQLAlchemy URL otherwise.

The URL comes from, in order: the ``--db`` option, the ``ARCHIVE_DB`` environment variable, then
``sqlite:///<project>/.archive/index.sqlite`` next to (never inside) the records folder.
Full-text search uses SQLite's FTS5 or PostgreSQL's text search; both are set up here.
"""

from __future__ import annotations

import os
from pathlib import Path

from sqlalchemy import Engine, Table, create_engine, event, text
from sqlmodel import SQLModel

from archive.store.tables import ALL_TABLES, META, SCHEMA_VERSION, MetaRow

ENV_VAR = "ARCHIVE_DB"
DEFAULT_DIR = ".archive"

SEARCH_COLUMNS = ("title", "hypothesis", "learnings_text")


def default_url(records_dir: Path) -> str:
    folder = records_dir.resolve().parent / DEFAULT_DIR
    return f"sqlite:///{folder / 'index.sqlite'}"


def resolve_url(records_dir: Path, url: str | None = None) -> str:
    return url or os.environ.get(ENV_VAR) or default_url(records_dir)


def make_engine(url: str) -> Engine:
    """An engine for ``url``; for SQLite files the folder is created and foreign keys are switched on."""
    if url.startswith("sqlite"):
        path = url.split("///", 1)[1] if "///" in url else ""
        if path and path != ":memory:":
            Path(path).parent.mkdir(parents=True, exist_ok=True)
        engine = create_engine(url)

        @event.listens_for(engine, "connect")
        def _pragmas(dbapi_connection, _record):  # type: ignore[no-untyped-def]
            cursor = dbapi_connection.cursor()
            cursor.execute("PRAGMA foreign_keys = ON")
            cursor.execute("PRAGMA journal_mode = WAL")
            cursor.close()

        return engine
    if url.startswith("postgresql://"):
        url = "postgresql+psycopg://" + url.removeprefix("postgresql://")
    return create_engine(url)


def prepare(engine: Engine) -> bool:
    """Create the tables if needed. Returns False when an index of another schema version had to be dropped."""
    fresh = True
    with engine.begin() as conn:
        if engine.dialect.has_table(conn, MetaRow.__tablename__):
            row = conn.execute(text("SELECT value FROM index_meta WHERE key = 'schema_version'")).first()
            if row is None or row[0] != str(SCHEMA_VERSION):
                _drop(conn)
                fresh = False
    SQLModel.metadata.create_all(engine, tables=_tables())
    with engine.begin() as conn:
        if engine.dialect.name == "sqlite":
            conn.execute(
                text(
                    "CREATE VIRTUAL TABLE IF NOT EXISTS record_search USING fts5("
                    "record_id UNINDEXED, title, hypothesis, learnings_text, tokenize='porter unicode61')"
                )
            )
        elif engine.dialect.name == "postgresql":
            conn.execute(
                text(
                    "CREATE INDEX IF NOT EXISTS ix_record_search ON record USING gin ("
                    f"to_tsvector('english', {search_document_sql()}))"
                )
            )
        found = conn.execute(text("SELECT value FROM index_meta WHERE key = 'schema_version'")).first()
        if found is None:
            conn.execute(
                META.insert(),
                [{"key": "schema_version", "value": str(SCHEMA_VERSION)}],
            )
    return fresh


def search_document_sql() -> str:
    """The PostgreSQL expression that text search indexes and queries (must match exactly)."""
    return " || ' ' || ".join(f"coalesce({c}, '')" for c in SEARCH_COLUMNS)


def _tables() -> list[Table]:
    return list(ALL_TABLES)


def _drop(conn) -> None:  # type: ignore[no-untyped-def]
    if conn.dialect.name == "sqlite":
        conn.execute(text("DROP TABLE IF EXISTS record_search"))
    SQLModel.metadata.drop_all(conn, tables=_tables())
