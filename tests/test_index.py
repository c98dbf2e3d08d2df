"""Indexing into SQLite and PostgreSQL: full, incremental, idempotent, and refusing broken archives."""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import pytest
from sqlalchemy import Engine, func, select, text

from archive.records.problems import ArchiveInvalid
from archive.store.query import Filters, arms_frame, find_tests, get_record, segments_frame, tests_frame
from archive.store.sync import index_archive
from archive.store.tables import ArmRow, RecordRow, SegmentRow, ThemeRow
from tests.conftest import good_text, snapshot


def _count(engine: Engine, table: type) -> int:
    with engine.connect() as conn:
        return int(conn.execute(select(func.count()).select_from(table)).scalar_one())


def test_full_index(records_dir: Path, engine: Engine) -> None:
    before = snapshot(records_dir)
    report = index_archive(records_dir, engine)
    assert snapshot(records_dir) == before
    assert report.added == ["free-delivery-bar", "free-delivery-bar-2"] and report.unchanged == 0
    assert _count(engine, RecordRow) == 2
    assert _count(engine, ArmRow) == 4
    assert _count(engine, ThemeRow) == 3
    assert _count(engine, SegmentRow) == 8
    record = get_record(engine, "free-delivery-bar")
    assert record.arm("threshold-bar").conversions == 342 and record.started == dt.date(2024, 3, 4)


def test_incremental_and_idempotent(records_dir: Path, engine: Engine) -> None:
    index_archive(records_dir, engine)
    again = index_archive(records_dir, engine)
    assert (again.added, again.updated, again.removed, again.unchanged) == ([], [], [], 2)

    path = records_dir / "free-delivery-bar-2.yaml"
    path.write_text(path.read_text().replace("Threshold bar, second round", "Threshold bar, round two"))
    changed = index_archive(records_dir, engine)
    assert changed.updated == ["free-delivery-bar-2"] and changed.unchanged == 1
    assert get_record(engine, "free-delivery-bar-2").title == "Threshold bar, round two"

    path.unlink()
    removed = index_archive(records_dir, engine)
    assert removed.removed == ["free-delivery-bar-2"]
    assert _count(engine, RecordRow) == 1 and _count(engine, ArmRow) == 2 and _count(engine, SegmentRow) == 4
    assert find_tests(engine, Filters(text="gift")) == []  # its words left the search index too


def test_refuses_archive_with_errors_and_keeps_index(records_dir: Path, engine: Engine) -> None:
    index_archive(records_dir, engine)
    (records_dir / "free-delivery-bar-2.yaml").write_text(
        good_text("free-delivery-bar-2").replace("conversions: 310", "conversions: 20000")
    )
    (records_dir / "bad.yaml").write_text("- a list\n")
    with pytest.raises(ArchiveInvalid) as caught:
        index_archive(records_dir, engine)
    fields = {(Path(p.path).name, p.field) for p in caught.value.problems if p.severity == "error"}
    assert fields == {
        ("bad.yaml", ""),
        ("free-delivery-bar-2.yaml", "arms[0].conversions"),  # 20000 > 10000 visitors
        ("free-delivery-bar-2.yaml", "arms[0].orders"),  # 330 orders < 20000 converting visitors
    }
    assert _count(engine, RecordRow) == 2
    assert get_record(engine, "free-delivery-bar-2").title == "Threshold bar, second round"


def test_unchanged_record_broken_by_a_deletion(records_dir: Path, engine: Engine) -> None:
    index_archive(records_dir, engine)
    (records_dir / "free-delivery-bar.yaml").unlink()
    with pytest.raises(ArchiveInvalid) as caught:
        index_archive(records_dir, engine)
    (problem,) = caught.value.problems
    assert problem.field == "iterates_on" and problem.line == 5  # line found by reading the unchanged file


def test_orders_file_change_reindexes_record(records_dir: Path, engine: Engine) -> None:
    path = records_dir / "free-delivery-bar.yaml"
    path.write_text(good_text().replace("segments:\n", "orders_file: bar-orders.csv\nsegments:\n", 1))
    orders = records_dir / "bar-orders.csv"
    orders.write_text("arm,order_id,value\ncontrol,o1,15500.5\nthreshold-bar,o2,16800\n")
    index_archive(records_dir, engine)
    orders.write_text("arm,order_id,value\ncontrol,o1,15500.5\nthreshold-bar,o2,16800\nnobody,o3,1\n")
    with pytest.raises(ArchiveInvalid):
        index_archive(records_dir, engine)


def test_schema_version_change_rebuilds(records_dir: Path, engine: Engine) -> None:
    index_archive(records_dir, engine)
    with engine.begin() as conn:
        conn.execute(text("UPDATE index_meta SET value = '0' WHERE key = 'schema_version'"))
    report = index_archive(records_dir, engine)
    assert report.rebuilt and len(report.added) == 2


def test_filters_and_search(records_dir: Path, engine: Engine) -> None:
    index_archive(records_dir, engine)

    def ids(**kwargs: object) -> list[str]:
        return [t["id"] for t in find_tests(engine, Filters(**kwargs))]  # type: ignore[arg-type]

    assert ids() == ["free-delivery-bar", "free-delivery-bar-2"]
    assert ids(theme="social-proof") == ["free-delivery-bar"]
    assert ids(page_area="basket", outcome="keep-control") == ["free-delivery-bar-2"]
    assert ids(owner="growth team") == ["free-delivery-bar-2"]
    assert ids(status="planned") == []
    assert ids(tag="delivery") == ["free-delivery-bar", "free-delivery-bar-2"]
    assert ids(since=dt.date(2024, 4, 1)) == ["free-delivery-bar-2"]
    assert ids(until=dt.date(2024, 3, 31)) == ["free-delivery-bar"]
    assert ids(text="desktop") == ["free-delivery-bar", "free-delivery-bar-2"]  # learnings
    assert ids(text="gift message") == ["free-delivery-bar-2"]  # every word must occur
    assert ids(text="abandon baskets") == ["free-delivery-bar", "free-delivery-bar-2"]  # hypothesis, stemmed
    assert ids(text='threshold" OR "nothing') == []  # OR is a word to find, not an operator: no syntax leaks
    assert ids(text="threshold*") == ["free-delivery-bar", "free-delivery-bar-2"]
    assert ids(text="nowhere-to-be-found") == []
    with pytest.raises(ValueError):
        ids(text="  ")


def test_frames(records_dir: Path, engine: Engine) -> None:
    index_archive(records_dir, engine)
    tests = tests_frame(engine, Filters(theme="social-proof"))
    assert list(tests["id"]) == ["free-delivery-bar"]
    arms = arms_frame(engine)
    assert len(arms) == 4
    control = arms[(arms.record_id == "free-delivery-bar") & (arms.name == "control")].iloc[0]
    assert control.conversion_rate == pytest.approx(310 / 10000)
    segments = segments_frame(engine, Filters(outcome="ship"))
    assert set(segments["value"]) == {"mobile", "desktop"} and len(segments) == 4
