"""Shared fixtures: a valid record, a small archive in a temp folder, a store per test, the demo archive's store,
and store engines (SQLite, PostgreSQL)."""

from __future__ import annotations

import os
import sqlite3
import uuid
from collections.abc import Iterator
from pathlib import Path

import pytest
from sqlalchemy import Engine, text

from archive.store.engine import make_engine

# Invented test data (not from any real shop); numbers chosen so every check passes.
GOOD = """\
id: {id}
title: Free delivery threshold on the basket page
status: finished
owner: basket team
started: 2024-03-04
ended: 2024-03-31
page_area: basket
themes:
  - shipping-cost
  - social-proof
tags: [delivery, spring-2024]
hypothesis: >-
  Showing how much is missing for free delivery should raise conversion, since visitors abandon baskets just
  below the free delivery threshold.
plan:
  baseline_rate: 0.031
  minimum_lift: 0.08
  visitors_per_arm: 9000
  split: {{control: 1, threshold-bar: 1}}
  segments: [device]
arms:
  - name: control
    control: true
    description: no threshold message
    visitors: 10000
    conversions: 310
    orders: 330
    revenue: 15500.5
    revenue_sum_of_squares: 1200000.0
  - name: threshold-bar
    description: a bar showing the amount missing for free delivery
    visitors: 10050
    conversions: 342
    orders: 360
    revenue: 16800.0
segments:
  device:
    mobile:
      control: {{visitors: 6000, conversions: 150, revenue: 7000.0}}
      threshold-bar: {{visitors: 6050, conversions: 170, revenue: 8000.0}}
    desktop:
      control: {{visitors: 4000, conversions: 160, revenue: 8500.5}}
      threshold-bar: {{visitors: 4000, conversions: 172, revenue: 8800.0}}
decision:
  outcome: ship
  arm: threshold-bar
  rationale: More converting visitors at no cost to order value.
learnings:
  - The threshold bar helped most on desktop, where the basket summary is visible.
links:
  - {{label: design, url: "https://wiki.example/threshold"}}
"""


def good_text(record_id: str = "free-delivery-bar") -> str:
    return GOOD.format(id=record_id)


@pytest.fixture
def records_dir(tmp_path: Path) -> Path:
    folder = tmp_path / "records"
    folder.mkdir()
    (folder / "free-delivery-bar.yaml").write_text(good_text(), encoding="utf-8")
    second = (
        good_text("free-delivery-bar-2")
        .replace("title: Free delivery threshold on the basket page", "title: Threshold bar, second round")
        .replace("owner: basket team", "owner: growth team\niterates_on: free-delivery-bar")
        .replace("started: 2024-03-04", "started: 2024-05-06")
        .replace("ended: 2024-03-31", "ended: 2024-06-02")
        .replace("  - shipping-cost\n  - social-proof", "  - shipping-cost")
        .replace("outcome: ship", "outcome: keep-control")
        .replace("  arm: threshold-bar\n", "")
        .replace("The threshold bar helped most", "The second round of the gift message helped least")
    )
    (folder / "free-delivery-bar-2.yaml").write_text(second, encoding="utf-8")
    return folder


def snapshot(folder: Path) -> dict[str, bytes]:
    """Every file under ``folder`` with its bytes, to prove nothing was modified."""
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def _postgres_url() -> str | None:
    return os.environ.get("ARCHIVE_TEST_POSTGRES_URL")


@pytest.fixture(params=["sqlite", "postgresql"])
def engine(request: pytest.FixtureRequest, tmp_path: Path) -> Iterator[Engine]:
    """An empty index database: an SQLite file, or a fresh schema in the test PostgreSQL server."""
    if request.param == "sqlite":
        eng = make_engine(f"sqlite:///{tmp_path / 'index.sqlite'}")
        yield eng
        eng.dispose()
        return
    url = _postgres_url()
    if url is None:
        if os.environ.get("ARCHIVE_REQUIRE_POSTGRES"):
            pytest.fail("ARCHIVE_REQUIRE_POSTGRES is set but ARCHIVE_TEST_POSTGRES_URL is not")
        pytest.skip("set ARCHIVE_TEST_POSTGRES_URL to run the PostgreSQL tests (CI does)")
    schema = f"t_{uuid.uuid4().hex[:12]}"
    admin = make_engine(url)
    with admin.begin() as conn:
        conn.execute(text(f'CREATE SCHEMA "{schema}"'))
    sep = "&" if "?" in url else "?"
    eng = make_engine(f"{url}{sep}options=-csearch_path%3D{schema}")  # libpq option: tables go in the schema
    yield eng
    eng.dispose()
    with admin.begin() as conn:
        conn.execute(text(f'DROP SCHEMA "{schema}" CASCADE'))
    admin.dispose()


ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(autouse=True)
def own_store(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> str:
    """Every test gets its own store (ARCHIVE_DB), so that no test reads or writes another's, nor the repository's
    own ``.archive/``. Tests of the default location unset it."""
    url = f"sqlite:///{tmp_path / 'store' / 'index.sqlite'}"
    (tmp_path / "store").mkdir(exist_ok=True)
    monkeypatch.setenv("ARCHIVE_DB", url)
    monkeypatch.delenv("ARCHIVE_RECORDS", raising=False)
    return url


@pytest.fixture(scope="session")
def _demo_store_file(tmp_path_factory: pytest.TempPathFactory) -> Path:
    from archive.api import Archive

    path = tmp_path_factory.mktemp("demo-store") / "index.sqlite"
    Archive.open(records=ROOT / "records", db=f"sqlite:///{path}").index()
    return path


@pytest.fixture
def demo_db(_demo_store_file: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> str:
    """A synced store of the demo archive (a copy per test), set as ARCHIVE_DB; returns its URL."""
    target = tmp_path / "demo-store.sqlite"
    with sqlite3.connect(_demo_store_file) as source, sqlite3.connect(target) as copy:
        source.backup(copy)  # the WAL's pages included
    url = f"sqlite:///{target}"
    monkeypatch.setenv("ARCHIVE_DB", url)
    return url
