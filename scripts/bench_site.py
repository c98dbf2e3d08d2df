"""Benchmark of the site build on synthetic archives (invented data, seeded).

For each size: a fresh build (every test analysed, pages generated, MkDocs run), then a rebuild after one record
changed. Reports seconds, pages per second, the generation step as a share of the MkDocs build, the time per test
page (to check the build grows linearly), and peak memory. Each size runs in its own process.

    python scripts/bench_site.py --counts 1000 10000 [--json]
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent


def one(count: int) -> dict[str, float]:
    sys.path.insert(0, str(HERE))
    from synth_archive import write_archive  # type: ignore[import-not-found]

    from archive.site.build import build_site

    with tempfile.TemporaryDirectory() as tmp:
        records = Path(tmp) / "records"
        write_archive(records, count, seed=7)
        out = Path(tmp) / "site"
        start = time.perf_counter()
        fresh = build_site(records, out)
        total = time.perf_counter() - start
        changed = sorted(records.glob("*.yaml"))[count // 2]
        changed.write_text(changed.read_text().replace("title: ", "title: Changed ", 1))
        start = time.perf_counter()
        again = build_site(records, out)
        rebuild = time.perf_counter() - start
    return {
        "records": count,
        "pages": fresh.pages,
        "generate_s": fresh.generate_seconds,
        "mkdocs_s": fresh.mkdocs_seconds,
        "total_s": total,
        "pages_per_s": fresh.pages / total,
        "generate_share_of_mkdocs": fresh.generate_seconds / fresh.mkdocs_seconds,
        "ms_per_test_page": 1000 * total / count,
        "rebuild_generate_s": again.generate_seconds,
        "rebuild_files_written": len(again.written),
        "rebuild_total_s": rebuild,
        "peak_rss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--counts", type=int, nargs="+", default=[1000, 10000])
    parser.add_argument("--one", type=int, help=argparse.SUPPRESS)
    parser.add_argument("--json", action="store_true")
    args = parser.parse_args()
    if args.one:
        print(json.dumps(one(args.one)))
        return
    rows = []
    for count in args.counts:
        command = [sys.executable, __file__, "--one", str(count)]
        done = subprocess.run(command, capture_output=True, text=True, check=True)
        rows.append(json.loads(done.stdout.strip().splitlines()[-1]))
    if len(rows) >= 2:
        rows[-1]["ms_per_test_page_ratio_to_first"] = rows[-1]["ms_per_test_page"] / rows[0]["ms_per_test_page"]
    if args.json:
        print(json.dumps(rows, indent=2))
        return
    print("targets: generation < 10% of the MkDocs build; time per test page at the largest size within 1.3x of")
    print("the time per test page at the first size")
    for row in rows:
        print(", ".join(f"{k} {v:.4g}" if isinstance(v, float) else f"{k} {v}" for k, v in row.items()))


if __name__ == "__main__":
    main()
