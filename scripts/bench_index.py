"""Benchmark of checking and indexing a large synthetic archive, as ratios to baselines measured in the same run.

    python scripts/bench_index.py [--count 10000] [--keep DIR] [--json]

A synthetic archive (see ``synth_archive.py``) is written to a temporary folder, then timed with
``time.perf_counter``:

baselines  (a) reading every file (``read_bytes``)
           (b) reading + parsing every file with PyYAML's C loader (``yaml.CSafeLoader``)
           (c) reading + parsing every file with PyYAML's pure-Python ``yaml.SafeLoader``
subjects   (d) ``check_archive``
           (e) full ``index_archive`` into a fresh SQLite file
           (f) incremental ``index_archive`` after one record's title changed
           (g) incremental ``index_archive`` with nothing changed
           (h) full ``index_archive`` into PostgreSQL, when ARCHIVE_TEST_POSTGRES_URL is set (a SQLAlchemy URL of a
               scratch database: the archive's tables in it are dropped before and after), and (h2) the
               incremental index after one change there

The measures run in rounds, each round taking every measure once in the order above, so that baselines and
subjects share whatever else the machine is doing. ``--repeats`` rounds are run (default 3) and the best time of
each measure is kept; a measure whose first run took ``--cheap`` seconds or more (default 30), and (c) always, runs
in the first round only. Absolute seconds depend on the machine; the ratios to (b) are what the targets are stated
in:

* check + full index within 3x the C-loader parse time of the same files;
* incremental index after one changed record under 1 s.

The exit status is 1 when a target is missed. The files are read from the OS cache (they were just written), for
the baselines and the subjects alike. Beside the wall-clock time, the table shows this process's CPU time for the
same run: much less CPU than wall time means the machine was busy with something else (or, for PostgreSQL, that
the server did part of the work).
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import re
import resource
import sys
import tempfile
import time
from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import yaml
from sqlalchemy import Engine, text
from sqlmodel import SQLModel

sys.path.insert(0, str(Path(__file__).resolve().parent))

from synth_archive import write_archive  # noqa: E402

from archive.records.load import check_archive  # noqa: E402
from archive.records.problems import errors  # noqa: E402
from archive.store.engine import make_engine  # noqa: E402
from archive.store.sync import index_archive  # noqa: E402

PG_ENV = "ARCHIVE_TEST_POSTGRES_URL"
CHEAP = 30.0  # seconds; a measure whose first run is faster than this is repeated in later rounds
REPEATS = 3
TARGET_CHECK_INDEX = 3.0  # (check + full index) / C-loader parse
TARGET_INCREMENTAL = 1.0  # seconds, one changed record


@dataclass
class Step:
    key: str
    label: str
    fn: Callable[[], object]
    setup: Callable[[], object] | None = None  # untimed, before every run
    once: bool = False
    times: list[tuple[float, float]] = field(default_factory=list)  # (wall, cpu) per run
    peak_rss_mb: float = 0.0  # of the process, after this step's first run

    def run(self) -> None:
        if self.setup is not None:
            self.setup()
        wall, cpu = time.perf_counter(), time.process_time()
        self.fn()
        self.times.append((time.perf_counter() - wall, time.process_time() - cpu))
        if len(self.times) == 1:  # the process's peak so far, after the first round
            self.peak_rss_mb = peak_rss_mb()

    @property
    def best(self) -> tuple[float, float]:
        return min(self.times)


@dataclass
class Measure:
    key: str
    label: str
    seconds: float
    cpu_seconds: float
    runs: int
    records: int
    peak_rss_mb: float

    @property
    def per_second(self) -> float:
        return self.records / self.seconds if self.seconds > 0 else float("inf")


def peak_rss_mb() -> float:
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return peak / 1024 / 1024 if sys.platform == "darwin" else peak / 1024  # bytes on macOS, KiB on Linux


def say(message: str) -> None:
    print(message, file=sys.stderr, flush=True)


def clear_postgres(engine: Engine) -> None:
    SQLModel.metadata.drop_all(engine)
    with engine.begin() as conn:
        conn.execute(text("DROP TABLE IF EXISTS index_meta"))


class Bench:
    def __init__(self, folder: Path, count: int, work: Path):
        self.folder, self.count, self.work = folder, count, work
        self.paths = sorted(folder.glob("*.yaml"))
        self.sqlite: Engine | None = None
        self.postgres: Engine | None = None
        self._db_number = 0
        self._edits = 0
        self.edited = ""

    # --- baselines -----------------------------------------------------------------------------------

    def read_all(self) -> None:
        for p in self.paths:
            p.read_bytes()

    def parse_all(self, loader: type) -> None:
        for p in self.paths:
            yaml.load(p.read_bytes().decode("utf-8"), Loader=loader)  # noqa: S506 - safe loaders only

    # --- subjects ------------------------------------------------------------------------------------

    def check(self) -> None:
        report = check_archive(self.folder)
        if report.files != self.count or errors(report.problems):
            raise SystemExit(f"check found {len(errors(report.problems))} error(s) in {report.files} file(s)")

    def fresh_sqlite(self) -> None:
        if self.sqlite is not None:
            self.sqlite.dispose()
        self._db_number += 1
        self.sqlite = make_engine(f"sqlite:///{self.work / f'index-{self._db_number}.sqlite'}")

    def fresh_postgres(self) -> None:
        assert self.postgres is not None
        clear_postgres(self.postgres)

    def index_full(self, engine: Engine | None) -> None:
        assert engine is not None
        report = index_archive(self.folder, engine)
        if len(report.added) != self.count:
            raise SystemExit(f"full index added {len(report.added)} of {self.count} records")

    def edit_one(self) -> None:
        """Change the title of one record (the middle one), keeping it valid."""
        self._edits += 1
        path = self.paths[len(self.paths) // 2]
        body = path.read_text(encoding="utf-8")
        body, n = re.subn(
            r'^title: "(.*?)(?: \(edit \d+\))?"$', rf'title: "\1 (edit {self._edits})"', body, count=1, flags=re.M
        )
        if n != 1:
            raise SystemExit(f"no title line to edit in {path}")
        path.write_text(body, encoding="utf-8")
        self.edited = path.stem

    def index_one_changed(self, engine: Engine | None) -> None:
        assert engine is not None
        report = index_archive(self.folder, engine)
        if report.updated != [self.edited] or report.unchanged != self.count - 1:
            raise SystemExit(f"incremental index: updated {report.updated}, unchanged {report.unchanged}")

    def index_unchanged(self, engine: Engine | None) -> None:
        assert engine is not None
        report = index_archive(self.folder, engine)
        if report.added or report.updated or report.removed or report.unchanged != self.count:
            raise SystemExit("index with nothing changed did some work")

    # --- the run -------------------------------------------------------------------------------------

    def steps(self, pure_python: bool, postgres_url: str | None) -> list[Step]:
        steps = [
            Step("a", "read files", self.read_all),
            Step("b", "read + parse, C loader", lambda: self.parse_all(yaml.CSafeLoader)),
        ]
        if pure_python:
            steps.append(
                Step("c", "read + parse, pure-Python loader", lambda: self.parse_all(yaml.SafeLoader), once=True)
            )
        steps += [
            Step("d", "check_archive", self.check),
            Step("e", "full index, SQLite", lambda: self.index_full(self.sqlite), self.fresh_sqlite),
            Step("f", "incremental index, 1 changed", lambda: self.index_one_changed(self.sqlite), self.edit_one),
            Step("g", "incremental index, none changed", lambda: self.index_unchanged(self.sqlite)),
        ]
        if postgres_url:
            self.postgres = make_engine(postgres_url)
            steps += [
                Step("h", "full index, PostgreSQL", lambda: self.index_full(self.postgres), self.fresh_postgres),
                Step(
                    "h2",
                    "incremental index, 1 changed, PostgreSQL",
                    lambda: self.index_one_changed(self.postgres),
                    self.edit_one,
                ),
            ]
        return steps

    def measure(self, pure_python: bool, repeats: int, cheap: float) -> list[Measure]:
        steps = self.steps(pure_python, os.environ.get(PG_ENV))
        try:
            for round_number in range(1, repeats + 1):
                say(f"round {round_number} of {repeats}")
                for step in steps:
                    if round_number > 1 and (step.once or step.times[0][0] >= cheap):
                        continue
                    say(f"  ({step.key}) {step.label} ...")
                    step.run()
        finally:
            for engine in (self.sqlite, self.postgres):
                if engine is not None:
                    if engine is self.postgres:
                        clear_postgres(engine)
                    engine.dispose()
        return [Measure(s.key, s.label, s.best[0], s.best[1], len(s.times), self.count, s.peak_rss_mb) for s in steps]


def summarise(
    measures: list[Measure], bench: Bench, generated_seconds: float, repeats: int, cheap: float
) -> dict[str, Any]:
    by_key = {m.key: m for m in measures}
    c_loader = by_key["b"].seconds
    check, full, one = by_key["d"].seconds, by_key["e"].seconds, by_key["f"].seconds
    ratios = {
        "check / C-loader": check / c_loader,
        "full index / C-loader": full / c_loader,
        "(check + full index) / C-loader": (check + full) / c_loader,
    }
    if "h" in by_key:
        ratios["full index PostgreSQL / C-loader"] = by_key["h"].seconds / c_loader
    targets = {
        f"check + full index <= {TARGET_CHECK_INDEX:g}x C-loader": (check + full) / c_loader <= TARGET_CHECK_INDEX,
        f"incremental index, 1 changed < {TARGET_INCREMENTAL:g} s": one < TARGET_INCREMENTAL,
    }
    return {
        "records": bench.count,
        "average_record_bytes": round(sum(p.stat().st_size for p in bench.paths) / len(bench.paths)),
        "generated_seconds": generated_seconds,
        "python": platform.python_version(),
        "platform": platform.platform(),
        "cpus": os.cpu_count(),
        "libyaml": bool(getattr(yaml, "__with_libyaml__", False)),
        "postgres": "h" in by_key,
        "repeats": repeats,
        "cheap_seconds": cheap,
        "measures": [
            {**asdict(m), "records_per_second": m.per_second, "ratio_to_c_loader": m.seconds / c_loader}
            for m in measures
        ],
        "ratios": ratios,
        "incremental_one_changed_seconds": one,
        "incremental_none_changed_seconds": by_key["g"].seconds,
        "targets": targets,
        "peak_rss_mb": peak_rss_mb(),
    }


def print_table(summary: dict[str, Any]) -> None:
    print(
        f"{summary['records']} synthetic records, {summary['average_record_bytes']} bytes each on average "
        f"(generated in {summary['generated_seconds']:.1f} s); Python {summary['python']}, {summary['cpus']} CPU(s), "
        f"libyaml {'yes' if summary['libyaml'] else 'no'}; best of up to {summary['repeats']} interleaved rounds"
    )
    print()
    print(
        f"{'':5}{'measure':<42}{'seconds':>9}{'CPU s':>9}{'records/s':>11}{'x C-loader':>12}{'runs':>6}"
        f"{'peak RSS MB':>13}"
    )
    for m in summary["measures"]:
        print(
            f"{'(' + m['key'] + ')':<5}{m['label']:<42}{m['seconds']:>9.3f}{m['cpu_seconds']:>9.3f}"
            f"{m['records_per_second']:>11,.0f}{m['ratio_to_c_loader']:>12.2f}{m['runs']:>6}{m['peak_rss_mb']:>13.0f}"
        )
    if not summary["postgres"]:
        print(f"{'(h)':<5}full index, PostgreSQL: skipped ({PG_ENV} is not set)")
    print()
    for name, value in summary["ratios"].items():
        print(f"{name:<44}{value:>8.2f}x")
    print(f"{'incremental index, 1 changed':<44}{summary['incremental_one_changed_seconds']:>8.3f} s")
    print(f"{'incremental index, none changed':<44}{summary['incremental_none_changed_seconds']:>8.3f} s")
    print(f"{'peak RSS':<44}{summary['peak_rss_mb']:>8.0f} MB")
    print()
    for name, met in summary["targets"].items():
        print(f"target: {name:<50} {'met' if met else 'MISSED'}")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--count", type=int, default=10_000, help="records in the synthetic archive (default 10000)")
    parser.add_argument("--seed", type=int, default=7, help="seed of the synthetic archive (default 7)")
    parser.add_argument(
        "--keep", type=Path, metavar="DIR", help="write the archive (DIR/records) and SQLite indexes to DIR, keep them"
    )
    parser.add_argument("--json", action="store_true", help="print the results as JSON instead of a table")
    parser.add_argument("--repeats", type=int, default=REPEATS, help=f"rounds; best run kept (default {REPEATS})")
    parser.add_argument(
        "--cheap", type=float, default=CHEAP, help=f"repeat only measures faster than this many s (default {CHEAP:g})"
    )
    parser.add_argument(
        "--no-pure-python", action="store_true", help="skip baseline (c), the slow pure-Python YAML parse"
    )
    args = parser.parse_args(argv)
    if args.count < 1:
        parser.error("--count must be at least 1")
    if args.repeats < 1:
        parser.error("--repeats must be at least 1")
    if not getattr(yaml, "__with_libyaml__", False):
        parser.error("PyYAML was built without libyaml; the C-loader baseline cannot be measured")

    with tempfile.TemporaryDirectory(prefix="bench-index-") as tmp:
        work = args.keep if args.keep is not None else Path(tmp)
        folder = work / "records"
        if folder.is_dir() and any(folder.iterdir()):
            parser.error(f"{folder} is not empty; give --keep a new folder")
        say(f"writing {args.count} synthetic records to {folder} ...")
        start = time.perf_counter()
        write_archive(folder, args.count, args.seed)
        generated = time.perf_counter() - start
        bench = Bench(folder, args.count, work)
        measures = bench.measure(not args.no_pure_python, args.repeats, args.cheap)
        summary = summarise(measures, bench, generated, args.repeats, args.cheap)
    if args.json:
        print(json.dumps(summary, indent=2))
    else:
        print_table(summary)
    return 0 if all(summary["targets"].values()) else 1


if __name__ == "__main__":
    sys.exit(main())
