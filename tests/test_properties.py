"""Generated input: random records, valid and mutated, through the loader and the command line.

For every input: no traceback; `archive check` and `archive analyze --file` exit 0 or 1, and with 1 say where
(`path:line: field: message`); the user's files are byte for byte what they were. Valid records pass `check`
and are analysed.

Profiles: the normal run is short and seeded (``derandomize``: the same examples on every run, as CI needs);
``ARCHIVE_LONG_PROPERTIES=1`` runs many more, freshly random examples. An input that fails is written to
``test-artifacts/property-failures/``; keep it as a regression file in ``tests/corpus/`` (see test_corpus).
"""

from __future__ import annotations

import copy
import datetime as dt
import hashlib
import os
import re
import tempfile
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import typer
import yaml
from click.testing import CliRunner
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from archive.cli.main import app
from archive.records.load import check_archive, load_record
from archive.records.model import MAX_COUNT, MAX_MONEY, MAX_SUM_OF_SQUARES, canonical_label
from tests.conftest import snapshot

LONG = os.environ.get("ARCHIVE_LONG_PROPERTIES") == "1"
_COMMON = {
    "deadline": None,
    "database": None,  # nothing written to the working tree; failures are kept in tests/corpus/ by hand
    "suppress_health_check": [HealthCheck.too_slow, HealthCheck.data_too_large, HealthCheck.filter_too_much],
}
settings.register_profile("archive-short", derandomize=True, **_COMMON)  # type: ignore[arg-type]
settings.register_profile("archive-long", derandomize=False, **_COMMON)  # type: ignore[arg-type]
settings.load_profile("archive-long" if LONG else "archive-short")


def examples(short: int) -> int:
    return short * 20 if LONG else short


ROOT = Path(__file__).resolve().parents[1]
FAILURES = ROOT / "test-artifacts" / "property-failures"
RECORD = "prop-record.yaml"
runner = CliRunner()
COMMAND = typer.main.get_command(app)  # built once: typer's own runner rebuilds it on every call
LOCATED = re.compile(r"^[^\n]+:\d+: [^\n]*?: .+$", re.M)
# `analyze` refuses a record that passes `check` but holds too little to analyse; the command line maps that
# refusal (CannotAnalyze: the record is the problem) to exit 1 with one line
TOO_LITTLE = re.compile(
    r"\Aerror: prop-record: (a test needs a control and at least one other arm|arm .* has no results yet"
    r"|arm .* has no visitors)[^\n]*\n\Z"
)

# ---------------------------------------------------------------------------------------------------- valid records

WORD_CHARS = st.characters(categories=["Ll", "Lu", "Lo", "Nd"], exclude_characters="\x85\u2028\u2029")
WORD = st.text(WORD_CHARS, min_size=1, max_size=10)
NAME = st.lists(WORD, min_size=1, max_size=3).map(" ".join).filter(lambda s: len(s) <= 60 and canonical_label(s) != "")
TEXT = st.text(min_size=1, max_size=40)  # any unicode, control characters included
DAY = st.dates(dt.date(1996, 1, 1), dt.date(2025, 12, 31))


@st.composite
def arm_counts(draw: st.DrawFn, finished: bool, analysable: bool) -> dict[str, Any]:
    """Counts of one arm that pass every check (conversions <= visitors <= the limit, ...)."""
    if not finished and not analysable and draw(st.booleans()):
        return {}
    least = 1 if analysable else 0
    visitors = draw(st.one_of(st.integers(least, 100_000), st.integers(least, MAX_COUNT)))
    conversions = draw(st.integers(0, visitors))
    counts: dict[str, Any] = {"visitors": visitors, "conversions": conversions}
    if draw(st.booleans()):
        counts["orders"] = draw(st.integers(conversions, MAX_COUNT))
    if conversions > 0 and counts.get("orders", 1) > 0 and draw(st.booleans()):
        revenue = draw(st.one_of(st.just(0.0), st.floats(1.0, MAX_MONEY)))
        counts["revenue"] = revenue
        if draw(st.booleans()):
            # Cauchy-Schwarz: the sum of squares over n buyers is at least revenue^2 / n
            least = revenue**2 / conversions
            counts["revenue_sum_of_squares"] = min(least * draw(st.floats(1.0, 50.0)), MAX_SUM_OF_SQUARES)
    return counts


@st.composite
def valid_record(draw: st.DrawFn, analysable: bool = False) -> dict[str, Any]:
    """A record that passes `check` (warnings allowed); ``analysable``: one `analyze` can work on (two arms or
    more, each with visitors)."""
    status = draw(st.sampled_from(["running", "finished", "stopped-early"] + ([] if analysable else ["planned"])))
    finished = status in ("finished", "stopped-early")
    names = draw(st.lists(NAME, min_size=2 if analysable else 1, max_size=4, unique_by=canonical_label))
    arms = []
    for i, name in enumerate(names):
        arm: dict[str, Any] = {"name": name}
        if i == 0:
            arm["control"] = True
        if draw(st.booleans()):
            arm["description"] = draw(TEXT)
        if status != "planned":
            arm.update(draw(arm_counts(finished, analysable)))
        arms.append(arm)
    themes = draw(st.lists(NAME, min_size=1, max_size=3, unique_by=canonical_label))
    record: dict[str, Any] = {
        "id": RECORD.removesuffix(".yaml"),
        "title": draw(TEXT),
        "status": status,
        "page_area": draw(NAME),
        "hypothesis": draw(TEXT),
        "themes": themes,
        "tags": draw(st.lists(NAME, max_size=3, unique_by=canonical_label)),
        "arms": arms,
    }
    if draw(st.booleans()):
        record["owner"] = draw(TEXT)
    if finished or draw(st.booleans()):
        started = draw(DAY)
        record["started"] = started
        record["ended"] = started + dt.timedelta(days=draw(st.integers(0, 120)))
    if draw(st.booleans()):
        record["plan"] = {
            "baseline_rate": draw(st.floats(0.001, 0.5)),
            "minimum_lift": draw(st.floats(0.01, 2.0)),
            "visitors_per_arm": draw(st.integers(1, MAX_COUNT)),
            "split": {name: draw(st.integers(1, 100)) for name in names},
        }
    if finished and all("visitors" in a for a in arms) and draw(st.booleans()):
        dim = draw(NAME)
        values = draw(st.lists(NAME, min_size=2, max_size=2, unique_by=canonical_label))
        by_value: dict[str, dict[str, dict[str, int]]] = {v: {} for v in values}
        for arm in arms:
            v1 = draw(st.integers(0, arm["visitors"]))
            c1 = min(v1, arm["conversions"] // 2)
            c2 = min(arm["visitors"] - v1, arm["conversions"] - c1)
            by_value[values[0]][arm["name"]] = {"visitors": v1, "conversions": c1}
            by_value[values[1]][arm["name"]] = {"visitors": arm["visitors"] - v1, "conversions": c2}
        record["segments"] = {dim: by_value}
    if status != "planned" and draw(st.booleans()):
        outcome = draw(st.sampled_from(["keep-control", "iterate"] + (["ship"] if len(names) > 1 else [])))
        decision: dict[str, Any] = {"outcome": outcome, "rationale": draw(TEXT)}
        if outcome == "ship":
            decision["arm"] = draw(st.sampled_from(names[1:]))
        if record.get("started") and draw(st.booleans()):
            decision["decided"] = record["ended"]
        record["decision"] = decision
    if draw(st.booleans()):
        record["learnings"] = draw(st.lists(TEXT, max_size=3))
    if draw(st.booleans()):
        record["links"] = [{"label": draw(TEXT), "url": "https://wiki.example/" + draw(WORD)}]
    return record


def dump(record: Any) -> str:
    return yaml.safe_dump(record, allow_unicode=True, sort_keys=False, width=1000)


# ---------------------------------------------------------------------------------------------------- mutations

EDGE_NUMBERS = st.sampled_from(
    [0, -1, 1, 2**31 - 1, 2**31, 2**63 - 1, 2**63, 2**64, -(2**63), 10**30, MAX_COUNT, MAX_COUNT + 1]
    + [0.0, -0.0, 5e-324, 1e-300, 1.5, 1e15, 1.000001e15, 1e30, 1.0000001e30, 1e308, -1e308]
)
ANY_VALUE = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(),
    EDGE_NUMBERS,
    st.floats(),  # nan and inf included
    st.text(max_size=30),
    st.dates(),
    st.datetimes(),
    st.binary(max_size=8),
    st.lists(st.integers(), max_size=3),
    st.dictionaries(st.text(max_size=6), st.integers(), max_size=3),
)


def _paths(value: Any, here: tuple[Any, ...] = ()) -> Iterator[tuple[Any, ...]]:
    yield here
    if isinstance(value, dict):
        for key, child in value.items():
            yield from _paths(child, here + (key,))
    elif isinstance(value, list):
        for i, child in enumerate(value):
            yield from _paths(child, here + (i,))


def _set(root: Any, path: tuple[Any, ...], value: Any) -> Any:
    if not path:
        return value
    holder = root
    for part in path[:-1]:
        holder = holder[part]
    holder[path[-1]] = value
    return root


def _drop(root: Any, path: tuple[Any, ...]) -> Any:
    if not path:
        return root
    holder = root
    for part in path[:-1]:
        holder = holder[part]
    del holder[path[-1]]
    return root


@st.composite
def mutated_data(draw: st.DrawFn) -> Any:
    """A valid record with 1-3 changes to its data: keys dropped or added, values of another type, edge numbers."""
    record = copy.deepcopy(draw(valid_record()))
    for _ in range(draw(st.integers(1, 3))):
        paths = list(_paths(record))
        path = draw(st.sampled_from(paths))
        action = draw(st.sampled_from(["drop", "swap", "edge", "unicode", "add", "alias", "bomb"]))
        if action in ("alias", "bomb"):
            # shared objects: the dumper writes an anchor (&id001) and aliases (*id001), perhaps recursive ones
            if action == "alias":
                other = draw(st.sampled_from(paths))
                target = record
                for part in other:
                    target = target[part]
            else:
                target = ["lol"] * 9
                for _ in range(draw(st.integers(1, 8))):
                    target = [target] * 9
            record = _set(record, path, target)
            break  # the data may now contain itself: no further walk over it
        if action == "drop":
            record = _drop(record, path)
        elif action == "swap":
            record = _set(record, path, draw(ANY_VALUE))
        elif action == "edge":
            record = _set(record, path, draw(EDGE_NUMBERS))
        elif action == "unicode":
            record = _set(record, path, draw(st.text(st.characters(codec="utf-8"), max_size=20)))
        else:
            target = record
            for part in path:
                target = target[part]
            if isinstance(target, dict):
                target[draw(st.text(max_size=12))] = draw(ANY_VALUE)
            elif isinstance(target, list):
                target.append(draw(ANY_VALUE))
        if not isinstance(record, dict):
            break
    return record


YAML_SNIPPETS = st.sampled_from(
    [
        "&a ",
        "*a",
        "&b [*a, *a, *a, *a]",
        "!!python/object/apply:os.system ['true'] ",
        "!!binary aGVsbG8= ",
        "!custom ",
        "!!set {a, b} ",
        "!!omap [a: 1] ",
        "!!str ",
        "!!int ",
        "!!float ",
        "!!timestamp ",
        "!!null ",
        "!!bool ",
        "!!map ",
        "!!seq ",
        "<<: *a",
        "? [a, b]\n: c",
        "031722",
        "8:48:42",
        "0x1f",
        "0o17",
        "1_000",
        "1e+27",
        ".inf",
        "-.nan",
        "1e999",
        "9" * 40,
        "2999-01-01",
        "0001-01-01",
        "\ufeff",
        "\x00",
        "\t",
        "\r",
        "\u2028",
        "---\n",
        "...\n",
        "%YAML 1.1\n---\n",
        "{",
        "[",
        '"',
        "'",
        "#",
        "|\n",
        ">-\n",
        "\\",
        "[" * 40 + "]" * 40,
    ]
)


@st.composite
def mutated_text(draw: st.DrawFn) -> bytes:
    """A valid record's YAML with 1-4 edits to its text: lines duplicated or dropped, YAML features inserted
    (anchors, aliases, tags, merge keys, directives), number forms, control characters, truncation, bad bytes."""
    text = dump(draw(valid_record()))
    for _ in range(draw(st.integers(1, 4))):
        lines = text.splitlines(keepends=True) or [""]
        i = draw(st.integers(0, len(lines) - 1))
        action = draw(st.sampled_from(["duplicate", "drop", "insert", "replace value", "truncate"]))
        if action == "duplicate":
            lines.insert(i, lines[i])
        elif action == "drop":
            del lines[i]
        elif action == "insert":
            at = draw(st.integers(0, len(lines[i])))
            lines[i] = lines[i][:at] + draw(YAML_SNIPPETS) + lines[i][at:]
        elif action == "replace value" and ": " in lines[i]:
            key, _, _ = lines[i].partition(": ")
            lines[i] = f"{key}: {draw(YAML_SNIPPETS)}\n"
        elif action == "truncate":
            lines = lines[:i] + [lines[i][: draw(st.integers(0, len(lines[i])))]]
        text = "".join(lines)
    raw = text.encode("utf-8")
    if draw(st.integers(0, 9)) == 0:  # now and then, bytes that are not UTF-8
        at = draw(st.integers(0, len(raw)))
        raw = raw[:at] + draw(st.binary(min_size=1, max_size=3)) + raw[at:]
    return raw


CSV_CELLS = st.one_of(
    st.sampled_from(["control", "", "0", "-1", "1e308", "inf", "nan", "0x1f", "1_000", "1e-400", '"', '""', ",", "\r"]),
    EDGE_NUMBERS.map(str),
    st.text(max_size=12),
)


@st.composite
def orders_csv(draw: st.DrawFn, arms: list[str]) -> bytes:
    header = draw(st.sampled_from(["arm,order_id,value", "arm,visitor_id,value", "value,arm,order_id", "arm,value"]))
    rows = [header]
    for _ in range(draw(st.integers(0, 6))):
        if draw(st.booleans()) and arms:
            rows.append(f"{draw(st.sampled_from(arms))},o{len(rows)},{draw(st.floats(0, 1e6)):.2f}")
        else:
            rows.append(",".join(draw(st.lists(CSV_CELLS, min_size=1, max_size=4))))
    raw = "\n".join(rows).encode("utf-8", "surrogatepass")
    if draw(st.integers(0, 4)) == 0:
        at = draw(st.integers(0, len(raw)))
        raw = raw[:at] + draw(st.binary(min_size=1, max_size=3)) + raw[at:]
    return raw


@st.composite
def record_with_orders(draw: st.DrawFn) -> tuple[bytes, bytes]:
    record = draw(valid_record())
    record["orders_file"] = "orders.csv"
    names = [a["name"] for a in record["arms"]]
    return dump(record).encode("utf-8"), draw(orders_csv(names))


# ---------------------------------------------------------------------------------------------------- the properties


@contextmanager
def archive_folder(raw: bytes, orders: bytes | None = None) -> Iterator[Path]:
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp) / "records"
        folder.mkdir()
        (folder / RECORD).write_bytes(raw)
        if orders is not None:
            (folder / "orders.csv").write_bytes(orders)
        yield folder


@contextmanager
def kept_on_failure(raw: bytes, orders: bytes | None = None) -> Iterator[None]:
    """Write the input to test-artifacts/property-failures/ when the block fails, to be kept as a corpus file."""
    try:
        yield
    except BaseException:
        FAILURES.mkdir(parents=True, exist_ok=True)
        name = hashlib.sha256(raw + (orders or b"")).hexdigest()[:12]
        (FAILURES / f"{name}.yaml").write_bytes(raw)
        if orders is not None:
            (FAILURES / f"{name}.csv").write_bytes(orders)
        raise


def _invoke(*args: str) -> tuple[int, str]:
    result = runner.invoke(COMMAND, list(args))
    if result.exception is not None and not isinstance(result.exception, SystemExit):
        raise result.exception
    return result.exit_code, result.output


def assert_loader_holds(raw: bytes, orders: bytes | None = None) -> None:
    """The library: load_record and check_archive return problems, never raise, and touch no file."""
    with archive_folder(raw, orders) as folder:
        before = snapshot(folder)
        path = folder / RECORD
        loaded, problems = load_record(path, raw)
        for problem in problems:
            assert isinstance(problem.line, int) and problem.line >= 0, problem
            assert LOCATED.fullmatch(str(problem).splitlines()[0] if str(problem) else ""), str(problem)
        if loaded is None:
            assert any(p.severity == "error" for p in problems), problems
        report = check_archive(folder)
        assert report.files == 1
        assert (report.records == []) == (loaded is None)
        assert snapshot(folder) == before


def assert_cli_holds(raw: bytes, orders: bytes | None = None, analyze: bool = True) -> tuple[int, int]:
    """The command line: exit 0 or 1, a located message with 1, no traceback, no file changed."""
    with archive_folder(raw, orders) as folder:
        before = snapshot(folder)
        path = folder / RECORD
        check_code, output = _invoke("check", "--records", str(folder))
        assert check_code in (0, 1), output
        if check_code == 1:
            assert LOCATED.search(output), output
        analyze_code = -1
        if analyze:
            analyze_code, output = _invoke("analyze", "--file", str(path), "--records", str(folder))
            if analyze_code == 1 and check_code == 0:
                assert TOO_LITTLE.match(output), output
            else:
                assert analyze_code in (0, 1), output
                assert analyze_code == check_code, output  # what check passes is analysed, what it refuses is not
                if analyze_code == 1:
                    assert LOCATED.search(output), output
        assert snapshot(folder) == before
        return check_code, analyze_code


def _guarded(check: Callable[..., Any], raw: bytes, orders: bytes | None = None, **kw: Any) -> Any:
    with kept_on_failure(raw, orders):
        return check(raw, orders, **kw)


@settings(max_examples=examples(60))
@given(valid_record(analysable=True))
def test_valid_records_pass_check_and_are_analysed(record: dict[str, Any]) -> None:
    raw = dump(record).encode("utf-8")
    codes = _guarded(assert_cli_holds, raw)
    assert codes == (0, 0)


@settings(max_examples=examples(60))
@given(valid_record())
def test_valid_records_pass_check(record: dict[str, Any]) -> None:
    raw = dump(record).encode("utf-8")
    with kept_on_failure(raw), archive_folder(raw) as folder:
        report = check_archive(folder)
        assert [str(p) for p in report.problems if p.severity == "error"] == []


@settings(max_examples=examples(300))
@given(st.one_of(mutated_data().map(lambda d: dump(d).encode("utf-8")), mutated_text()))
def test_loader_never_raises(raw: bytes) -> None:
    _guarded(assert_loader_holds, raw)


@settings(max_examples=examples(80))
@given(st.one_of(mutated_data().map(lambda d: dump(d).encode("utf-8")), mutated_text()))
def test_cli_on_mutated_records(raw: bytes) -> None:
    _guarded(assert_cli_holds, raw)


@settings(max_examples=examples(60))
@given(record_with_orders())
def test_cli_on_orders_files(pair: tuple[bytes, bytes]) -> None:
    raw, orders = pair
    _guarded(assert_loader_holds, raw, orders)
    _guarded(assert_cli_holds, raw, orders)


# ---------------------------------------------------------------------------------------------------- the corpus

CORPUS = ROOT / "tests" / "corpus"


def test_corpus_of_found_failures() -> None:
    """Each file kept in tests/corpus/ (found by the properties above, or made by hand) holds the properties."""
    files = sorted(CORPUS.glob("*.yaml"))
    assert files, "the corpus is empty"
    for path in files:
        orders_file = path.with_suffix(".csv")
        orders = orders_file.read_bytes() if orders_file.exists() else None
        raw = path.read_bytes()
        try:
            assert_loader_holds(raw, orders)
            assert_cli_holds(raw, orders)
        except AssertionError as exc:
            raise AssertionError(f"corpus file {path.name}: {exc}") from exc
