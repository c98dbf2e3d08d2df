"""The command line as a mapping: options in, exit code and messages out, files untouched."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from pydantic import BaseModel
from typer.testing import CliRunner

from archive.cli.main import app
from archive.records.fieldref import SECTIONS, field_reference
from archive.records.model import Record
from tests.conftest import good_text, snapshot

ROOT = Path(__file__).resolve().parents[1]
runner = CliRunner()


def run(*args: str) -> tuple[int, str, str]:
    result = runner.invoke(app, list(args))
    return result.exit_code, result.stdout, result.stderr


def test_check_clean_and_broken(records_dir: Path) -> None:
    code, out, err = run("check", "--records", str(records_dir))
    assert code == 0 and out == "" and "2 record(s) checked: 0 error(s), 0 warning(s)" in err
    path = records_dir / "free-delivery-bar.yaml"
    path.write_text(good_text().replace("    orders: 330\n", "    ordrs: 330\n"))
    before = snapshot(records_dir)
    code, out, _ = run("check", "--records", str(records_dir))
    assert code == 1
    assert out.strip() == f"{path}:27: arms[0].ordrs: unknown field 'ordrs'; did you mean 'orders'?"
    assert snapshot(records_dir) == before
    code, out, _ = run("check", "--records", str(records_dir), "--format", "json")
    assert code == 1 and json.loads(out)[0]["line"] == 27


def test_strict_fails_on_warnings(records_dir: Path) -> None:
    path = records_dir / "free-delivery-bar.yaml"
    path.write_text(good_text().replace("tags: [delivery, spring-2024]", "tags: [delivery, spring-2024, Easter sale]"))
    assert run("check", "--records", str(records_dir))[0] == 0
    code, out, _ = run("check", "--records", str(records_dir), "--strict")
    assert code == 1 and "warning: write 'easter-sale'" in out


def test_missing_records_folder(tmp_path: Path) -> None:
    code, _, err = run("check", "--records", str(tmp_path / "nope"))
    assert code != 0 and "does not exist" in err


def test_new_from_options_then_check(tmp_path: Path) -> None:
    records = tmp_path / "records"
    args = ["new", "gift-wrap-offer", "--title", "Gift wrap offer", "--page-area", "Basket", "--theme", "gift wrap"]
    code, out, _ = run(*args, "--arm", "control", "--arm", "ribbon", "--records", str(records))
    assert code == 0, out
    text = (records / "gift-wrap-offer.yaml").read_text()
    assert "status: planned" in text and "page_area: basket" in text and "  - gift-wrap" in text
    assert run("check", "--records", str(records))[0] == 0  # a fresh draft holds no error
    code, out, _ = run("check", "--records", str(records), "--strict")
    assert code == 1  # but --strict points at every prompt of the template still in place
    assert "hypothesis.change: warning: template text left in place" in out
    assert "plan.minimum_lift: warning: left empty" in out and "arms[1].description: warning: template text" in out
    # refuses to overwrite, leaves the file as it was
    (records / "gift-wrap-offer.yaml").write_text(text + "# edited by hand\n")
    before = snapshot(records)
    code, _, err = run(*args, "--records", str(records))
    assert code == 1 and "already exists" in err
    assert snapshot(records) == before
    assert not [p for p in records.iterdir() if p.name.startswith(".")]  # no temp file left behind


def test_new_from_results_csv(tmp_path: Path) -> None:
    records = tmp_path / "records"
    csv_path = tmp_path / "results.csv"
    csv_path.write_text("arm,visitors,conversions,revenue\ncontrol,10000,310,15500.5\nribbon,10050,342,16800\n")
    code, out, _ = run(
        "new",
        "gift-wrap-offer",
        "--title",
        "Gift wrap offer",
        "--page-area",
        "basket",
        "--theme",
        "gift-wrap",
        "--results",
        str(csv_path),
        "--started",
        "2024-03-04",
        "--ended",
        "2024-03-31",
        "--records",
        str(records),
    )
    assert code == 0, out
    code, out, _ = run("check", "--records", str(records))
    assert code == 0, out  # only warnings: no decision, no learnings yet
    assert "no decision recorded" in out
    from archive.records.load import check_archive

    (loaded,) = check_archive(records).records
    assert loaded.record.arm("ribbon").conversions == 342 and loaded.record.control_arm().name == "control"


def test_new_rejects_bad_csv(tmp_path: Path) -> None:
    csv_path = tmp_path / "results.csv"
    csv_path.write_text("arm,visitors,conversions,revenue\ncontrol,10000,310,15500.5\nribbon,many,342,16800\n")
    args = ["new", "x-test", "--title", "X", "--page-area", "basket", "--theme", "t", "--results", str(csv_path)]
    code, out, _ = run(*args, "--records", str(tmp_path / "records"))
    assert code == 2 and f"{csv_path}:3: visitors: 'many' is not a whole number" in out
    assert not (tmp_path / "records" / "x-test.yaml").exists()


def test_new_rejects_bad_id(tmp_path: Path) -> None:
    code, out, _ = run("new", "../x", "--title", "X", "--page-area", "b", "--theme", "t", "--records", str(tmp_path))
    assert code == 2 and "lowercase letters" in out


def test_index_list_search_show(records_dir: Path, tmp_path: Path) -> None:
    db = f"sqlite:///{tmp_path / 'cli.sqlite'}"
    common = ["--records", str(records_dir), "--db", db]
    code, _, err = run("list", *common)
    assert code == 1 and "run `archive index` first" in err
    code, _, err = run("index", *common)
    assert code == 0 and "2 added" in err
    code, _, err = run("index", *common)
    assert code == 0 and "2 unchanged" in err
    code, out, _ = run("list", *common, "--theme", "social-proof", "--format", "json")
    assert code == 0 and [t["id"] for t in json.loads(out)] == ["free-delivery-bar"]
    code, out, _ = run("search", "gift", *common, "--csv")
    assert code == 0
    lines = out.strip().splitlines()
    assert lines[0].startswith("id,title,status") and lines[1].startswith("free-delivery-bar-2,")
    code, out, _ = run("show", "free-delivery-bar", *common)
    assert code == 0 and "threshold-bar" in out and "3.40%" in out and "Decision: ship threshold-bar" in out
    code, out, _ = run("show", "free-delivery-bar", *common, "--json")
    assert json.loads(out)["arms"][1]["visitors"] == 10050
    code, _, err = run("show", "no-such-test", *common)
    assert code == 1 and "no test 'no-such-test'" in err


def test_index_refuses_broken_archive(records_dir: Path, tmp_path: Path) -> None:
    (records_dir / "broken.yaml").write_text("id: broken\n")
    code, out, err = run("index", "--records", str(records_dir), "--db", f"sqlite:///{tmp_path / 'i.sqlite'}")
    assert code == 1 and "broken.yaml:1: title: required field is missing" in out and "Nothing was changed" in err


def test_schema_is_json_schema() -> None:
    code, out, _ = run("schema")
    schema = json.loads(out)
    assert code == 0 and schema["additionalProperties"] is False and "arms" in schema["required"]


def test_field_reference_in_docs_is_current() -> None:
    committed = (ROOT / "site" / "reference" / "record-fields.md").read_text(encoding="utf-8")
    assert committed == field_reference(), (
        "regenerate with: archive schema --markdown > site/reference/record-fields.md"
    )


@pytest.mark.parametrize("model", [m for _, m, _ in SECTIONS], ids=[t for t, _, _ in SECTIONS])
def test_every_field_has_a_description(model: type[BaseModel]) -> None:
    assert [name for name, info in model.model_fields.items() if not info.description] == []


def test_every_command_has_help() -> None:
    import typer.main

    group = typer.main.get_command(app)
    assert set(group.commands) >= {"check", "new", "schema", "index", "list", "search", "show"}  # type: ignore[attr-defined]
    for name, command in group.commands.items():  # type: ignore[attr-defined]
        assert command.help, name
        code, out, _ = run(name, "--help")
        assert code == 0 and "Usage" in out


def test_record_model_is_the_schema() -> None:
    assert set(Record.model_json_schema()["properties"]) == set(Record.model_fields)
