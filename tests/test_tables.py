"""Tables that fit a 100-column terminal without splitting a value, and plain rows when piped."""

from __future__ import annotations

import io
import json
from pathlib import Path

import pytest
from rich.console import Console
from typer.testing import CliRunner

from archive.cli.main import app
from archive.render.model import Memo
from archive.render.tables import PROSE_WORDS, emit_rows, fit_columns
from archive.render.terminal import render_terminal

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "records"
WIDTH = 100
runner = CliRunner()


def _console() -> tuple[Console, io.StringIO]:
    buffer = io.StringIO()
    return Console(file=buffer, width=WIDTH, color_system=None, highlight=False, soft_wrap=True), buffer


def _assert_fits(text: str, tables: list[tuple[list[str], list[list[str]]]]) -> None:
    """No line is wider than the terminal; every short value sits whole on one line (or its column is named as
    left out); every word of a longer text is whole (wrapping happens at spaces only)."""
    lines = text.splitlines()
    assert lines and max(len(line) for line in lines) <= WIDTH
    flat = " ".join(text.split())
    notes = [part.split(" (a wider terminal")[0] for part in flat.split("Not shown at this width: ")[1:]]
    left_out = {name for note in notes for name in note.split(", ")}
    tokens = set(text.split())
    checked = 0
    for headers, rows in tables:
        prose = [any(len(row[i].split()) >= PROSE_WORDS for row in rows) for i in range(len(headers))]
        for row in rows:
            for i, (header, value) in enumerate(zip(headers, row, strict=True)):
                if not value.strip():
                    continue
                if not prose[i]:
                    whole = any(value in line for line in lines)
                    assert whole or header in left_out, (header, value)
                else:
                    assert all(word in tokens for word in value.split()), (header, value)
                checked += 1
    assert checked > 20


def _memo_tables(memo: Memo) -> list[tuple[list[str], list[list[str]]]]:
    return [(t.headers, t.rows) for s in memo.sections for t in s.tables]


def test_list_fits_100_columns(tmp_path: Path) -> None:
    db = f"sqlite:///{tmp_path / 'index.sqlite'}"
    assert runner.invoke(app, ["index", "--records", str(DEMO), "--db", db]).exit_code == 0
    result = runner.invoke(app, ["list", "--records", str(DEMO), "--db", db, "-f", "json"])
    rows = json.loads(result.stdout)
    from archive.store.query import LIST_COLUMNS

    console, buffer = _console()
    emit_rows(rows, LIST_COLUMNS, "table", "Tests", console=console, plain=False)
    text = buffer.getvalue()
    cells = [[" ".join(map(str, v)) if isinstance(v, list) else str(v or "") for v in r.values()] for r in rows]
    _assert_fits(text, [([c.replace("_", " ") for c in LIST_COLUMNS], cells)])
    assert "2023-12-free-delivery-threshold" in text and "Not shown at this width" in text


def test_analyze_fits_100_columns() -> None:
    from archive.analysis import Settings, analyze
    from archive.records.load import load_record
    from archive.render.analysis import build_memo

    loaded, _ = load_record(DEMO / "2023-12-free-delivery-threshold.yaml")
    assert loaded is not None
    memo = build_memo(analyze(loaded.record, loaded.orders, Settings()))
    console, buffer = _console()
    render_terminal(memo, console, plain=False, details=True)
    _assert_fits(buffer.getvalue(), _memo_tables(memo))
    assert "verdict" in buffer.getvalue()  # the verdict column outranks the probabilities when columns go


def test_pool_by_theme_fits_100_columns() -> None:
    from archive.pooling.effects import load_archive_effects
    from archive.pooling.groups import pool
    from archive.render.pooling import build_pool_memo

    _, effects = load_archive_effects(DEMO)
    memo = build_pool_memo(pool(effects, "theme"))
    console, buffer = _console()
    render_terminal(memo, console, plain=False, details=True)
    _assert_fits(buffer.getvalue(), _memo_tables(memo))


def test_piped_output_is_tab_separated(tmp_path: Path) -> None:
    db = f"sqlite:///{tmp_path / 'index.sqlite'}"
    runner.invoke(app, ["index", "--records", str(DEMO), "--db", db])
    result = runner.invoke(app, ["list", "--records", str(DEMO), "--db", db], env={"COLUMNS": "100"})
    lines = result.stdout.splitlines()
    assert result.exit_code == 0
    assert lines[0].split("\t")[:3] == ["id", "title", "status"]
    assert len(lines) == 77 and all(line.count("\t") == 9 for line in lines)  # 76 records + header
    assert "│" not in result.stdout and "━" not in result.stdout


@pytest.mark.parametrize(
    ("width", "shown", "legend"),
    [
        (80, ["name", "conversions", "verdict", "note"], []),  # everything fits
        (36, ["name", "conv.", "verdict"], [("conv.", "conversions")]),  # abbreviate, then leave out the note
        (26, ["name", "verdict"], []),  # the verdict outranks a count
    ],
)
def test_fit_columns_abbreviates_then_leaves_out(width: int, shown: list[str], legend: list[tuple[str, str]]) -> None:
    headers = ["name", "conversions", "verdict", "note"]
    rows = [["threshold-45", "6,926", "trade-off", "x"], ["control", "6,662", "", ""]]
    layout = fit_columns(headers, rows, width)
    assert layout.headers == shown and layout.legend == legend


def test_prose_wraps_at_spaces_never_inside_a_word() -> None:
    headers = ["check", "detail"]
    rows = [["sample ratio", "split control 33.46%, threshold-50 33.26% fits the planned split (p 0.35)"]]
    layout = fit_columns(headers, rows, 40)
    assert layout.shown == [0, 1] and layout.wrap[1] is not None and layout.wrap[1] >= len("threshold-50")
