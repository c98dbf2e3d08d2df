"""Whole-process timings of the commands that read the store, as ratios to a baseline measured in the same run.

    python scripts/bench_store.py [--count 10000] [--keep DIR] [--postgres] [--json]

A synthetic archive (``synth_archive.py``) is written to a temporary folder. Baseline: reading and parsing every
record with PyYAML's C loader (``yaml.CSafeLoader``), in this process. Subjects, each a fresh ``archive`` process
(so import time counts, as it does for a user):

  cold index       ``archive index`` into an empty store (parse, validate, analyse in worker processes, store)
  warm index       ``archive index`` with nothing changed
  warm check       ``archive check`` with the store in sync
  one changed      ``archive index`` after one record's title changed (its re-analysis included)
  warm pool        ``archive pool --by theme`` with the store in sync
  site generation  the site build's generation step through the API in a fresh process: first (every page
                   rendered and kept in the store) and again (nothing changed); with ``--mkdocs`` also the MkDocs
                   build of the same site (the ratio the site targets are stated in)

With ``--postgres`` the same runs against ``ARCHIVE_TEST_POSTGRES_URL`` (its tables are dropped first).
Targets (issue 10): warm pool <= 0.25x the C-loader parse; warm check and warm index <= 1 s at 10,000 records;
one changed <= 1 s; cold index <= 4x the C-loader parse on 2 cores.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import yaml

sys.path.insert(0, str(Path(__file__).resolve().parent))

from synth_archive import write_archive  # noqa: E402

SITE_SNIPPET = """
import sys, time
from pathlib import Path
from archive import Archive
a = Archive.open('.')
out = Path(sys.argv[1])
t = time.perf_counter()
a.build_site(out, run_mkdocs=False)
cold = time.perf_counter() - t
t = time.perf_counter()
report = a.build_site(out, run_mkdocs=sys.argv[2] == '1')
print(cold, time.perf_counter() - t - report.mkdocs_seconds, report.mkdocs_seconds)
"""


def c_parse_seconds(records: Path) -> float:
    start = time.perf_counter()
    for path in sorted(records.glob("*.yaml")):
        yaml.load(path.read_bytes(), Loader=yaml.CSafeLoader)
    return time.perf_counter() - start


def timed(args: list[str], cwd: Path, env: dict[str, str]) -> float:
    start = time.perf_counter()
    done = subprocess.run(args, cwd=cwd, env=env, capture_output=True, text=True)
    seconds = time.perf_counter() - start
    if done.returncode != 0:
        raise SystemExit(f"{' '.join(args)} failed:\n{done.stderr[-2000:]}")
    return seconds


def measure(root: Path, env: dict[str, str], label: str, mkdocs: bool = False) -> dict[str, float]:
    archive = [sys.executable, "-m", "archive.cli.main"]
    out: dict[str, float] = {}
    out["cold index"] = timed([*archive, "index"], root, env)
    out["warm index"] = min(timed([*archive, "index"], root, env) for _ in range(3))
    out["warm check"] = min(timed([*archive, "check"], root, env) for _ in range(3))
    target = sorted((root / "records").glob("*.yaml"))[len(list((root / "records").glob("*.yaml"))) // 2]
    text = target.read_text(encoding="utf-8")
    target.write_text(text.replace("title: ", "title: Edited ", 1), encoding="utf-8")
    out["one changed"] = timed([*archive, "index"], root, env)
    target.write_text(text, encoding="utf-8")
    timed([*archive, "index"], root, env)
    out["warm pool"] = min(timed([*archive, "pool", "--by", "theme"], root, env) for _ in range(3))
    site = Path(tempfile.mkdtemp(prefix=f"bench-site-{label}-"))
    done = subprocess.run(
        [sys.executable, "-c", SITE_SNIPPET, str(site / "out"), "1" if mkdocs else "0"],
        cwd=root,
        env=env,
        capture_output=True,
        text=True,
    )
    if done.returncode == 0:
        cold, warm, mkdocs_seconds = map(float, done.stdout.strip().splitlines()[-1].split())
        out["site generation (first)"] = cold
        out["site generation (again)"] = warm
        if mkdocs:
            out["MkDocs build"] = mkdocs_seconds
    else:
        print(done.stderr[-2000:], file=sys.stderr)
    return out


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--count", type=int, default=10_000)
    parser.add_argument("--seed", type=int, default=7)
    parser.add_argument("--keep", type=Path, default=None, help="write the archive here and keep it")
    parser.add_argument("--postgres", action="store_true", help="also run against ARCHIVE_TEST_POSTGRES_URL")
    parser.add_argument("--mkdocs", action="store_true", help="also time the MkDocs build (slow at 10,000)")
    parser.add_argument("--json", action="store_true")
    args = parser.parse_args(argv)
    root = args.keep or Path(tempfile.mkdtemp(prefix="bench-store-"))
    records = root / "records"
    if not records.is_dir() or not any(records.glob("*.yaml")):
        write_archive(records, args.count, args.seed)
    baseline = min(c_parse_seconds(records) for _ in range(3))
    env = {**os.environ, "CI": "1"}
    env.pop("ARCHIVE_DB", None)
    store = root / ".archive"
    if store.exists():
        for path in store.iterdir():
            path.unlink()
    results = {"sqlite": measure(root, env, "sqlite", args.mkdocs)}
    url = os.environ.get("ARCHIVE_TEST_POSTGRES_URL")
    if args.postgres and url:
        from sqlalchemy import create_engine, text

        engine = create_engine(url)
        with engine.begin() as conn:
            for name in ("analysis", "segment", "record_tag", "record_theme", "arm", "record", "index_meta"):
                conn.execute(text(f"DROP TABLE IF EXISTS {name} CASCADE"))
        engine.dispose()
        results["postgresql"] = measure(root, {**env, "ARCHIVE_DB": url}, "postgresql")
    summary = {"records": len(list(records.glob("*.yaml"))), "c_loader_parse_s": baseline, "results": results}
    if args.json:
        print(json.dumps(summary, indent=2))
        return 0
    print(f"{summary['records']} records; PyYAML C-loader parse {baseline:.2f} s (the baseline)")
    for store_name, figures in results.items():
        print(f"\n{store_name}")
        for name, seconds in figures.items():
            print(f"  {name:16s} {seconds:7.2f} s   {seconds / baseline:5.2f}x the C-loader parse")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
