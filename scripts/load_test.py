"""Load test of the store: readers and writers at the same time, then a check that the store equals a clean sync.

    python scripts/load_test.py [--seconds 120] [--readers 8] [--writers 2] [--postgres] [--json]

A copy of the demo archive is made in a temporary folder and indexed. Then, for ``--seconds``:

* ``--readers`` processes each loop over the reading calls of the API (list, search, show, analyze, pool), every
  call on a freshly opened :class:`archive.Archive` that syncs first, as a command would;
* ``--writers`` processes each loop: edit a random record (append or remove a learning), then sync.

Every call that raises counts as an error (with its message kept). At the end the store is compared with a clean
sync of the final records into a new SQLite file (records, analyses and their versions must be identical).
With ``--postgres`` the store is ``ARCHIVE_TEST_POSTGRES_URL`` (its tables are dropped first).
"""

from __future__ import annotations

import argparse
import json
import multiprocessing
import os
import random
import shutil
import sys
import tempfile
import time
import traceback
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[1]
EXTRA = "  - Noted again in the quarterly review."


def reader(root: str, url: str, seconds: float, seed: int, out: Any) -> None:
    from archive import Archive
    from archive.store.query import Filters

    rng = random.Random(seed)
    count, errors = 0, []
    deadline = time.monotonic() + seconds
    ids: list[str] = []
    while time.monotonic() < deadline:
        kind = rng.choice(["list", "search", "show", "analyze", "pool"])
        try:
            archive = Archive.open(root, db=url)
            if kind == "list":
                archive.find(Filters(theme="shipping-cost"))
            elif kind == "search":
                archive.find(Filters(text="delivery"))
            elif kind in ("show", "analyze"):
                ids = ids or archive.ids()
                record_id = rng.choice(ids)
                if kind == "show":
                    archive.record(record_id)
                else:
                    try:
                        archive.analyze(record_id)
                    except ValueError as exc:  # a planned test cannot be analysed: an answer, not an error
                        if "no results" not in str(exc) and "visitors" not in str(exc):
                            raise
            else:
                archive.pool(by="theme")
            archive.engine().dispose()
        except Exception as exc:  # noqa: BLE001 - every failure is counted and reported
            errors.append(f"{kind}: {type(exc).__name__}: {exc}".splitlines()[0][:300])
        count += 1
    out.put({"role": "reader", "requests": count, "errors": errors})


def writer(root: str, url: str, seconds: float, seed: int, out: Any) -> None:
    from archive import Archive

    rng = random.Random(seed)
    files = sorted((Path(root) / "records").glob("*.yaml"))
    count, errors = 0, []
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        path = rng.choice(files)
        text = path.read_text(encoding="utf-8")
        if EXTRA in text:
            text = text.replace("\n" + EXTRA, "", 1)
        elif "\nlearnings:\n" in text:
            text = text.replace("\nlearnings:\n", "\nlearnings:\n" + EXTRA + "\n", 1)
        tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
        tmp.write_text(text, encoding="utf-8")
        os.replace(tmp, path)  # an editor's atomic save
        try:
            archive = Archive.open(root, db=url)
            archive.sync()
            archive.engine().dispose()
        except Exception as exc:  # noqa: BLE001
            errors.append(f"sync: {type(exc).__name__}: {exc}".splitlines()[0][:300])
            traceback.print_exc()
        count += 1
    out.put({"role": "writer", "requests": count, "errors": errors})


def dump(root: Path, url: str) -> list[tuple[Any, ...]]:
    from sqlalchemy import text

    from archive import Archive

    archive = Archive.open(root, db=url, sync=False)
    with archive.engine().connect() as conn:
        rows = conn.execute(text("SELECT id, content_hash, body FROM record ORDER BY id")).all()
        rows += conn.execute(text("SELECT record_id, version, result_json FROM analysis ORDER BY record_id")).all()
    archive.engine().dispose()
    return [tuple(r) for r in rows]


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--seconds", type=float, default=120.0)
    parser.add_argument("--readers", type=int, default=8)
    parser.add_argument("--writers", type=int, default=2)
    parser.add_argument("--postgres", action="store_true")
    parser.add_argument("--json", action="store_true")
    args = parser.parse_args(argv)
    sys.path.insert(0, str(ROOT))
    from archive import Archive

    root = Path(tempfile.mkdtemp(prefix="load-test-"))
    shutil.copytree(ROOT / "records", root / "records")
    if args.postgres:
        url = os.environ["ARCHIVE_TEST_POSTGRES_URL"]
        from sqlalchemy import create_engine, text

        engine = create_engine(url)
        with engine.begin() as conn:
            for name in ("analysis", "segment", "record_tag", "record_theme", "arm", "record", "index_meta"):
                conn.execute(text(f"DROP TABLE IF EXISTS {name} CASCADE"))
        engine.dispose()
    else:
        url = f"sqlite:///{root / '.archive' / 'index.sqlite'}"
    Archive.open(root, db=url).index()
    context = multiprocessing.get_context("spawn")
    results = context.Queue()
    processes = [
        context.Process(target=reader, args=(str(root), url, args.seconds, i, results)) for i in range(args.readers)
    ] + [
        context.Process(target=writer, args=(str(root), url, args.seconds, 100 + i, results))
        for i in range(args.writers)
    ]
    for p in processes:
        p.start()
    reports = [results.get(timeout=args.seconds + 600) for _ in processes]
    for p in processes:
        p.join()
    Archive.open(root, db=url).sync()  # the last edits of the writers are in
    clean = f"sqlite:///{root / 'clean.sqlite'}"
    Archive.open(root, db=clean).index()
    same = dump(root, url) == dump(root, clean)
    summary = {
        "store": "postgresql" if args.postgres else "sqlite",
        "seconds": args.seconds,
        "reader_requests": sum(r["requests"] for r in reports if r["role"] == "reader"),
        "writer_syncs": sum(r["requests"] for r in reports if r["role"] == "writer"),
        "errors": [e for r in reports for e in r["errors"]],
        "store_equals_clean_sync": same,
    }
    if args.json:
        print(json.dumps(summary, indent=2))
    else:
        print(
            f"{summary['store']}: {summary['reader_requests']} reads and {summary['writer_syncs']} edit+syncs in "
            f"{args.seconds:.0f} s; {len(summary['errors'])} errors; store equals a clean sync: {same}"
        )
        for message in summary["errors"][:20]:
            print("  ", message)
    return 0 if same and not summary["errors"] else 1


if __name__ == "__main__":
    raise SystemExit(main())
