"""Hypotheses in four parts (what changes, for whom, the effect expected, what was observed), one sentence shown."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from sqlalchemy import Engine
from typer.testing import CliRunner

from archive.cli.main import app
from archive.records.load import load_record
from archive.records.model import Hypothesis
from archive.store.query import Filters, find_tests
from archive.store.sync import index_archive
from tests.conftest import good_text

runner = CliRunner()
OLD = """hypothesis: >-
  Showing how much is missing for free delivery should raise conversion, since visitors abandon baskets just
  below the free delivery threshold.
"""
PARTS = """hypothesis:
  change: a bar showing the amount missing for free delivery
  audience: visitors with a basket under 60 EUR
  expected: raise conversion
  observed: that baskets are often left at the delivery-cost line
"""


def _parts_text(record_id: str = "free-delivery-bar", parts: str = PARTS) -> str:
    text = good_text(record_id)
    assert OLD in text
    return text.replace(OLD, parts)


def test_parts_are_shown_as_one_sentence(tmp_path: Path) -> None:
    path = tmp_path / "free-delivery-bar.yaml"
    path.write_text(_parts_text())
    loaded, problems = load_record(path)
    assert loaded is not None and problems == []
    assert isinstance(loaded.record.hypothesis, Hypothesis)
    assert loaded.record.hypothesis_text() == (
        "A bar showing the amount missing for free delivery for visitors with a basket under 60 EUR should raise "
        "conversion. Observed that baskets are often left at the delivery-cost line."
    )


def test_a_plain_sentence_stays_valid(tmp_path: Path) -> None:
    path = tmp_path / "free-delivery-bar.yaml"
    path.write_text(good_text())
    loaded, problems = load_record(path)
    assert loaded is not None and problems == []
    assert loaded.record.hypothesis_text().startswith("Showing how much is missing for free")


def test_audience_may_be_left_out() -> None:
    h = Hypothesis(
        change="free gift wrap in December.", expected="raise orders", observed="gift notes in 12% of orders"
    )
    assert h.sentence() == "Free gift wrap in December should raise orders. Observed gift notes in 12% of orders."


@pytest.mark.parametrize(
    ("parts", "field", "message"),
    [
        ("hypothesis:\n  change: a bar\n  expected: raise conversion\n", "hypothesis", "required field is missing"),
        (
            "hypothesis:\n  change: a bar\n  expected: more\n  observed: x\n  reason: y\n",
            "hypothesis.reason",
            "unknown",
        ),
        ('hypothesis: ""\n', "hypothesis", "at least 1 character"),
    ],
)
def test_broken_parts_are_located(tmp_path: Path, parts: str, field: str, message: str) -> None:
    path = tmp_path / "free-delivery-bar.yaml"
    text = _parts_text(parts=parts)
    path.write_text(text)
    loaded, problems = load_record(path)
    line = text.splitlines().index(next(x for x in text.splitlines() if x.startswith("hypothesis"))) + 1
    assert loaded is None and len(problems) == 1
    (problem,) = problems
    assert problem.field.startswith(field) and message in problem.message, problem
    assert "parts" not in problem.field and "text" not in problem.field  # no pydantic union tags in the field
    assert problem.line >= line


def test_index_and_search_use_the_sentence(tmp_path: Path, engine: Engine) -> None:
    records = tmp_path / "records"
    records.mkdir()
    (records / "free-delivery-bar.yaml").write_text(_parts_text())
    index_archive(records, engine)
    found = find_tests(engine, Filters(text="delivery-cost line"))
    assert [t["id"] for t in found] == ["free-delivery-bar"]
    db = str(engine.url.render_as_string(hide_password=False))
    result = runner.invoke(app, ["show", "free-delivery-bar", "--records", str(records), "--db", db])
    assert result.exit_code == 0, result.stdout
    assert "Hypothesis: A bar showing the amount missing" in " ".join(result.stdout.split())


def test_new_writes_parts_that_check_and_refuses_both_forms(tmp_path: Path) -> None:
    records = tmp_path / "records"
    args = ["new", "gift-wrap", "--title", "Gift wrap", "--page-area", "basket", "--theme", "gift-wrap"]
    parts = ["--change", "free gift wrap", "--expected", "raise orders", "--observed", "gift notes in 12% of orders"]
    result = runner.invoke(app, [*args, *parts, "--records", str(records)])
    assert result.exit_code == 0, result.stdout
    loaded, problems = load_record(records / "gift-wrap.yaml")
    assert loaded is not None and not [p for p in problems if p.severity == "error"]
    assert (
        loaded.record.hypothesis_text() == "Free gift wrap should raise orders. Observed gift notes in 12% of orders."
    )
    result = runner.invoke(app, [*args, *parts, "--hypothesis", "x", "--records", str(tmp_path / "other")])
    assert result.exit_code == 2 and "one sentence or in parts, not both" in result.stdout


def test_schema_offers_both_forms() -> None:
    result = runner.invoke(app, ["schema"])
    schema = json.loads(result.stdout)
    assert "Hypothesis" in json.dumps(schema["properties"]["hypothesis"]) and "Hypothesis" in schema["$defs"]
