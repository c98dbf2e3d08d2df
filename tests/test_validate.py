"""The validator against a corpus of broken records: each gives its message, at its line, and changes no file."""

from __future__ import annotations

from pathlib import Path

import pytest

from archive.records.load import check_archive, load_record
from archive.records.problems import Problem
from tests.conftest import good_text, snapshot


def _problems(folder: Path) -> list[Problem]:
    return check_archive(folder).problems


def _line_of(text: str, fragment: str) -> int:
    """The 1-based line on which ``fragment`` (possibly several lines) ends."""
    end = text.index(fragment) + len(fragment.rstrip("\n"))
    return text[:end].count("\n") + 1


def test_good_archive_has_no_problems(records_dir: Path) -> None:
    report = check_archive(records_dir)
    assert report.problems == []
    assert report.files == 2 and len(report.records) == 2


# (name, replace this, with that, expected field, expected message fragment, line holding this fragment)
CASES = [
    ("unknown key", "    orders: 330\n", "    ordrs: 330\n", "arms[0].ordrs", "did you mean 'orders'", "ordrs"),
    ("wrong type", "    visitors: 10000\n", "    visitors: lots\n", "arms[0].visitors", "valid integer", "lots"),
    ("string number", "    visitors: 10000\n", '    visitors: "10000"\n', "arms[0].visitors", "integer", '"10000"'),
    ("no control", "    control: true\n", "", "arms", "no arm is the control", "arms:"),
    (
        "two controls",
        "  - name: threshold-bar\n",
        "  - name: threshold-bar\n    control: true\n",
        "arms[1].control",
        "second control",
        "  - name: threshold-bar\n    control: true",
    ),
    ("conversions > visitors", "conversions: 310\n", "conversions: 10310\n", "arms[0].conversions", "exceed", "10310"),
    ("negative revenue", "revenue: 15500.5\n", "revenue: -5\n", "arms[0].revenue", "must be at least 0 (got -5)", "-5"),
    ("end before start", "ended: 2024-03-31", "ended: 2024-02-01", "ended", "before it starts", "ended:"),
    (
        "segment arm unknown",
        "      threshold-bar: {visitors: 6050",
        "      thresholdbar: {visitors: 6050",
        "segments.device.mobile.thresholdbar",
        "not an arm",
        "thresholdbar",
    ),
    (
        "segment totals exceed arm",
        "control: {visitors: 4000, conversions: 160",
        "control: {visitors: 4500, conversions: 160",
        "segments.device",
        "more than the arm's 10000",
        "  device:",
    ),
    ("id mismatch", "id: free-delivery-bar", "id: free-delivery-banner", "id", "does not match the file", "id:"),
    ("unsafe id", "id: free-delivery-bar", "id: ../x", "id", "not a safe id", "id:"),
    ("NaN", "revenue: 15500.5\n", "revenue: .nan\n", "arms[0].revenue", "not a finite number", ".nan"),
    ("infinity", "revenue: 15500.5\n", "revenue: .inf\n", "arms[0].revenue", "not a finite number", ".inf"),
    (
        "duplicate key",
        "owner: basket team\n",
        "owner: basket team\nowner: growth team\n",
        "owner",
        "duplicate key (first given on line 4)",
        "growth team",
    ),
    (
        "object tag",
        "owner: basket team\n",
        "owner: !!python/object/apply:os.system [echo hi]\n",
        "owner",
        "not allowed",
        "!!python",
    ),
    ("missing field", "page_area: basket\n", "", "page_area", "required field is missing", "id:"),
    (
        "planned with results",
        "status: finished",
        "status: planned",
        "status",
        "status is planned but arms have results",
        "status:",
    ),
    (
        "ship without arm",
        "  arm: threshold-bar\n",
        "",
        "decision.arm",
        "needs the arm",
        "decision:",
    ),
    (
        "split names unknown arm",
        "split: {control: 1, threshold-bar: 1}",
        "split: {control: 1, threshold-bar: 1, c: 1}",
        "plan.split.c",
        "not an arm",
        "split:",
    ),
    (
        "impossible sum of squares",
        "revenue_sum_of_squares: 1200000.0",
        "revenue_sum_of_squares: 100.0",
        "arms[0].revenue_sum_of_squares",
        "impossible",
        "revenue_sum_of_squares",
    ),
    ("quoted date", "started: 2024-03-04", 'started: "2024-03-04"', "started", "YYYY-MM-DD", "started:"),
    ("yes as a word", "owner: basket team", "owner: yes", "owner", "put the word in quotes", "owner:"),
    ("YAML syntax", "title: Free delivery", "title: [Free delivery", "", "YAML syntax", "hypothesis:"),
]


@pytest.mark.parametrize(("name", "old", "new", "field", "fragment", "line_fragment"), CASES, ids=[c[0] for c in CASES])
def test_bad_record(
    records_dir: Path, name: str, old: str, new: str, field: str, fragment: str, line_fragment: str
) -> None:
    path = records_dir / "free-delivery-bar.yaml"
    text = good_text()
    assert old in text, name
    broken = text.replace(old, new, 1)
    path.write_text(broken, encoding="utf-8")
    before = snapshot(records_dir)
    problems = [p for p in _problems(records_dir) if p.path == str(path) and p.severity == "error"]
    assert snapshot(records_dir) == before
    matching = [p for p in problems if fragment in p.message and (p.field == field or not field)]
    assert matching, f"{name}: expected {field}: {fragment!r}, got {[str(p) for p in problems]}"
    if name != "YAML syntax":  # libyaml reports the syntax error where it noticed it; the line is checked below
        assert matching[0].line == _line_of(broken, line_fragment), str(matching[0])


def test_yaml_syntax_error_names_a_line(records_dir: Path) -> None:
    path = records_dir / "free-delivery-bar.yaml"
    path.write_text("id: a\ntitle: [unclosed\nstatus: finished\n", encoding="utf-8")
    (problem,) = [p for p in _problems(records_dir) if p.path == str(path)]
    assert problem.path == str(path) and problem.line >= 2 and "YAML syntax" in problem.message


WHOLE_FILE = [
    ("empty file", b"", "file is empty"),
    ("only a comment", b"# nothing\n", "no YAML document"),
    ("a list", b"- a\n- b\n", "the file is a list"),
    ("a scalar", b"just words\n", "a single value"),
    ("non-UTF-8", b"id: caf\xe9\n", "not valid UTF-8"),
    ("10 MB", b"id: x\nhypothesis: " + b"a" * 10_000_000 + b"\n", "at most 1 MB"),
]


@pytest.mark.parametrize(("name", "raw", "fragment"), WHOLE_FILE, ids=[c[0] for c in WHOLE_FILE])
def test_unreadable_file(records_dir: Path, name: str, raw: bytes, fragment: str) -> None:
    path = records_dir / "broken.yaml"
    path.write_bytes(raw)
    before = snapshot(records_dir)
    problems = [p for p in _problems(records_dir) if p.path == str(path)]
    assert snapshot(records_dir) == before
    assert len(problems) == 1 and fragment in problems[0].message, [str(p) for p in problems]


def test_every_problem_is_reported_and_sorted(records_dir: Path) -> None:
    path = records_dir / "free-delivery-bar.yaml"
    text = (
        good_text()
        .replace("conversions: 310\n", "conversions: 10310\n")
        .replace("ended: 2024-03-31", "ended: 2024-02-01")
    )
    path.write_text(text, encoding="utf-8")
    (records_dir / "empty.yaml").write_bytes(b"")
    problems = [p for p in _problems(records_dir) if p.severity == "error"]
    assert {p.field for p in problems} == {"", "arms[0].conversions", "arms[0].orders", "ended"}
    assert problems == sorted(problems)
    assert str(problems[0]).startswith(f"{records_dir / 'empty.yaml'}:0: -: ")


def test_iterates_on_missing_id(records_dir: Path) -> None:
    path = records_dir / "free-delivery-bar-2.yaml"
    path.write_text(path.read_text().replace("iterates_on: free-delivery-bar", "iterates_on: free-delivery-ba"))
    (problem,) = [p for p in _problems(records_dir) if p.field == "iterates_on"]
    assert "no record 'free-delivery-ba'" in problem.message and "did you mean 'free-delivery-bar'" in problem.message
    assert problem.line == _line_of(path.read_text(), "iterates_on")


def test_theme_spelled_two_ways(records_dir: Path) -> None:
    path = records_dir / "free-delivery-bar-2.yaml"
    path.write_text(path.read_text().replace("  - shipping-cost", "  - Shipping cost"))
    problems = _problems(records_dir)
    error = next(p for p in problems if p.severity == "error")
    assert error.path == str(path) and error.field == "themes[0]"
    assert "'Shipping cost' is spelled 'shipping-cost'" in error.message
    warning = next(p for p in problems if p.severity == "warning")
    assert "write 'shipping-cost'" in warning.message


def test_duplicate_ids_across_files(records_dir: Path) -> None:
    (records_dir / "free-delivery-bar.yml").write_text(good_text(), encoding="utf-8")
    problems = _problems(records_dir)
    assert any(p.field == "id" and "also used by" in p.message for p in problems)


def test_orders_file_checked(records_dir: Path) -> None:
    path = records_dir / "free-delivery-bar.yaml"
    path.write_text(good_text().replace("segments:\n", "orders_file: bar-orders.csv\nsegments:\n", 1))
    missing = [p for p in _problems(records_dir) if p.field == "orders_file"]
    assert missing and "not found" in missing[0].message
    (records_dir / "bar-orders.csv").write_text("arm,order_id,value\ncontrol,o1,12.5\nb,o2,-3\ncontrol,o3,x\n")
    bad = {(p.line, p.field) for p in _problems(records_dir) if p.path.endswith("bar-orders.csv")}
    assert bad == {(3, "arm"), (4, "value")}
    path.write_text(good_text().replace("segments:\n", "orders_file: ../outside.csv\nsegments:\n", 1))
    assert any("no '..'" in p.message for p in _problems(records_dir))


def test_segment_counts_beyond_segment_visitors(records_dir: Path) -> None:
    text = good_text().replace(
        "control: {visitors: 6000, conversions: 150", "control: {visitors: 100, conversions: 150"
    )
    (records_dir / "free-delivery-bar.yaml").write_text(text)
    assert any("exceed 100 visitors" in p.message for p in _problems(records_dir))


def test_load_record_reads_given_bytes_only(tmp_path: Path) -> None:
    path = tmp_path / "free-delivery-bar.yaml"  # never created: the bytes are passed in
    loaded, problems = load_record(path, good_text().encode())
    assert loaded is not None and loaded.record.control_arm().name == "control"
    assert [p for p in problems if p.severity == "error"] == []
    assert not path.exists()
