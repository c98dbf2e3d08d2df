"""Where the store lives and how to reach it: an SQLite file by default, any SQLAlchemy URL otherwise.

The URL comes from, in order: the ``--db`` option, the ``ARCHIVE_DB`` environment variable, then
``sqlite:///<archive root>/.archive/index.sqlite``. Full-text search uses SQLite's FTS5 or PostgreSQL's text
search; both are set up here. Only :func:`prepare` (called by ``archive index``) creates or drops tables; every
other command asks :func:`schema_state` and refuses a missing or outdated store.

Writes are serialised: :func:`write_transaction` opens one transaction per sync that holds SQLite's write lock
(``BEGIN IMMEDIATE``, with a busy timeout) or a PostgreSQL advisory lock, so that syncs started together run one
after the other and readers only ever see a whole sync.
"""

from __future__ import annotations

import contextlib
import os
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Literal

from sqlalchemy import Connection, Engine, Table, create_engine, event, text
from sqlalchemy.engine import make_url
from sqlmodel import SQLModel

from archive.store.tables import ALL_TABLES, META, SCHEMA_VERSION, MetaRow

ENV_VAR = "ARCHIVE_DB"
DEFAULT_DIR = ".archive"
BUSY_SECONDS = 600  # how long a sync waits for another one to finish
_ADVISORY_KEY = 0x61726368  # PostgreSQL advisory lock key of the store ("arch")

SEARCH_COLUMNS = ("title", "hypothesis", "learnings_text")

SchemaState = Literal["current", "missing", "outdated"]


class StoreUnavailable(LookupError):
    """The store cannot be used as it is (missing, outdated, unreachable); the message says what to do."""


def default_url(root: Path) -> str:
    return f"sqlite:///{root.resolve() / DEFAULT_DIR / 'index.sqlite'}"


def resolve_url(root: Path, url: str | None = None) -> str:
    return url or os.environ.get(ENV_VAR) or default_url(root)


def display_url(url: str) -> str:
    """The URL with its password masked, for every message that shows it."""
    try:
        return make_url(url).render_as_string(hide_password=True)
    except Exception:  # not a URL SQLAlchemy can parse: show only its scheme
        return url.split(":", 1)[0] + ":***"


def sqlite_file(url: str) -> Path | None:
    """The database file of an SQLite URL (None for other databases and in-memory SQLite)."""
    if not url.startswith("sqlite"):
        return None
    database = make_url(url).database
    return Path(database) if database and database != ":memory:" else None


def make_engine(url: str, create_folder: bool = False) -> Engine:
    """An engine for ``url``. SQLite: foreign keys on, WAL journal, a busy timeout, and transactions begun by us
    (so that a sync can take the write lock at its start). ``create_folder`` makes the SQLite file's folder."""
    if url.startswith("postgresql://"):
        url = "postgresql+psycopg://" + url.removeprefix("postgresql://")
    if not url.startswith("sqlite"):
        return create_engine(url)
    path = sqlite_file(url)
    if path is not None and create_folder:
        path.parent.mkdir(parents=True, exist_ok=True)
    engine = create_engine(url, connect_args={"timeout": BUSY_SECONDS})

    @event.listens_for(engine, "connect")
    def _pragmas(dbapi_connection, _record):  # type: ignore[no-untyped-def]
        dbapi_connection.isolation_level = None  # we emit BEGIN ourselves (see _begin)
        cursor = dbapi_connection.cursor()
        cursor.execute("PRAGMA foreign_keys = ON")
        cursor.execute(f"PRAGMA busy_timeout = {BUSY_SECONDS * 1000}")
        if cursor.execute("PRAGMA journal_mode").fetchone()[0] != "wal":
            cursor.execute("PRAGMA journal_mode = WAL")
        cursor.close()

    @event.listens_for(engine, "begin")
    def _begin(conn):  # type: ignore[no-untyped-def]
        immediate = conn.get_execution_options().get("archive_write", False)
        conn.exec_driver_sql("BEGIN IMMEDIATE" if immediate else "BEGIN")

    return engine


def schema_state(engine: Engine) -> SchemaState:
    """Whether the store holds tables of this version of the program. Creates nothing."""
    with engine.connect() as conn:
        if not engine.dialect.has_table(conn, MetaRow.__tablename__):
            return "missing"
        row = conn.execute(text("SELECT value FROM index_meta WHERE key = 'schema_version'")).first()
    return "current" if row is not None and row[0] == str(SCHEMA_VERSION) else "outdated"


def require_current(engine: Engine, url: str) -> None:
    """Refuse a store that ``archive index`` has not made (or made with another version)."""
    state = schema_state(engine)
    if state == "missing":
        raise StoreUnavailable(f"no store at {display_url(url)} yet: run `archive index` first")
    if state == "outdated":
        raise StoreUnavailable(
            f"the store at {display_url(url)} was made by another version of archive: "
            "run `archive index` to rebuild it from the records"
        )


@contextlib.contextmanager
def write_transaction(engine: Engine, on_wait: Callable[[], None] | None = None) -> Iterator[Connection]:
    """One transaction holding the store's write lock for the whole of a sync.

    SQLite: ``BEGIN IMMEDIATE`` (waiting up to ``BUSY_SECONDS`` for another writer). PostgreSQL: a transaction
    advisory lock. ``on_wait`` is called once if another sync holds the lock, before waiting for it."""
    if engine.dialect.name == "sqlite":
        if on_wait is not None:
            _probe_sqlite_lock(engine, on_wait)
        with engine.connect().execution_options(archive_write=True) as conn, conn.begin():
            yield conn
        return
    with engine.connect() as conn, conn.begin():
        if engine.dialect.name == "postgresql":
            got = conn.execute(text("SELECT pg_try_advisory_xact_lock(:k)"), {"k": _ADVISORY_KEY}).scalar()
            if not got:
                if on_wait is not None:
                    on_wait()
                conn.execute(text("SELECT pg_advisory_xact_lock(:k)"), {"k": _ADVISORY_KEY})
        yield conn


def _probe_sqlite_lock(engine: Engine, on_wait: Callable[[], None]) -> None:
    raw = engine.raw_connection()
    try:
        cursor = raw.cursor()
        cursor.execute("PRAGMA busy_timeout = 0")
        try:
            cursor.execute("BEGIN IMMEDIATE")
            cursor.execute("ROLLBACK")
        except Exception:
            on_wait()
        finally:
            cursor.execute(f"PRAGMA busy_timeout = {BUSY_SECONDS * 1000}")
    finally:
        raw.close()


def prepare(conn: Connection) -> bool:
    """Create the tables inside the sync's transaction if needed. Returns False when a store of another schema
    version had to be dropped (it is rebuilt from the records)."""
    fresh = True
    dialect = conn.dialect
    if dialect.has_table(conn, MetaRow.__tablename__):
        row = conn.execute(text("SELECT value FROM index_meta WHERE key = 'schema_version'")).first()
        if row is not None and row[0] == str(SCHEMA_VERSION):
            return True
        _drop(conn)
        fresh = False
    SQLModel.metadata.create_all(conn, tables=_tables())
    if dialect.name == "sqlite":
        conn.execute(
            text(
                "CREATE VIRTUAL TABLE IF NOT EXISTS record_search USING fts5("
                "record_id UNINDEXED, title, hypothesis, learnings_text, tokenize='porter unicode61')"
            )
        )
    elif dialect.name == "postgresql":
        conn.execute(
            text(
                "CREATE INDEX IF NOT EXISTS ix_record_search ON record USING gin ("
                f"to_tsvector('english', {search_document_sql()}))"
            )
        )
    conn.execute(META.insert(), [{"key": "schema_version", "value": str(SCHEMA_VERSION)}])
    return fresh


def search_document_sql() -> str:
    """The PostgreSQL expression that text search indexes and queries (must match exactly)."""
    return " || ' ' || ".join(f"coalesce({c}, '')" for c in SEARCH_COLUMNS)


def _tables() -> list[Table]:
    return list(ALL_TABLES)


def _drop(conn: Connection) -> None:
    if conn.dialect.name == "sqlite":
        conn.execute(text("DROP TABLE IF EXISTS record_search"))
    cascade = " CASCADE" if conn.dialect.name == "postgresql" else ""
    # tables of an older schema may differ from ours: drop them by name, children first
    for table in reversed(_tables()):
        conn.execute(text(f"DROP TABLE IF EXISTS {table.name}{cascade}"))
