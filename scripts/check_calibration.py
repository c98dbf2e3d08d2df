"""Is the history prior calibrated? The calibration replay over many seeded demo-generator archives.

Each seed builds a fresh invented archive with ``scripts/make_demo.py`` (the same shop and ideas, fresh true
effects and traffic), replays it with :func:`archive.planning.calibration.calibrate` and pools the forecasts of
all seeds into one reliability table: per bin of forecast P(significant win), the mean forecast against the
observed share of wins with its Jeffreys 95% interval. It also reports the Brier scores of the history prior, the
flat prior and the running win rate, and in how many archives the history prior beats the running win rate.

    python scripts/check_calibration.py [--seeds 40] [--first 1] [--json]

Progress goes to stderr; the table (or JSON) to stdout.
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parent))

import make_demo  # noqa: E402

from archive.planning.calibration import BIN_EDGES, reliability_table, replay, scores  # noqa: E402
from archive.pooling.effects import load_archive_effects  # noqa: E402


def replay_seed(seed: int) -> dict[str, Any]:
    """Build the archive of ``seed`` in a temporary folder and replay it: the history forecasts with outcomes."""
    with tempfile.TemporaryDirectory() as folder:
        make_demo.write_archive(make_demo.build_archive(seed), Path(folder))
        _, effects = load_archive_effects(Path(folder))
    done = replay(effects)
    result = scores(done)
    rows = done.forecasts()
    return {
        "seed": seed,
        "rows": rows,
        "brier": {"history": result.history.brier, "flat": result.flat.brier, "running": result.running.brier}
        if result.running
        else {},
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--seeds", type=int, default=40)
    parser.add_argument("--first", type=int, default=1)
    parser.add_argument("--json", action="store_true")
    args = parser.parse_args()
    seeds = list(range(args.first, args.first + args.seeds))
    results = []
    with ProcessPoolExecutor(max_workers=2) as pool:
        for done, result in enumerate(pool.map(replay_seed, seeds), 1):
            results.append(result)
            print(f"seed {result['seed']}: {len(result['rows'])} forecasts ({done}/{len(seeds)})", file=sys.stderr)
    rows = [(f, w) for r in results for f, w in r["rows"]]
    table = reliability_table(rows)
    n = len(rows)
    briers = {k: sum(r["brier"][k] for r in results) / len(results) for k in ("history", "flat", "running")}
    beats_running = sum(r["brier"]["history"] < r["brier"]["running"] for r in results)
    out = {
        "seeds": seeds,
        "forecasts": n,
        "mean_forecast": sum(f for f, _ in rows) / n,
        "observed": sum(w for _, w in rows) / n,
        "pooled_brier": sum((f - w) ** 2 for f, w in rows) / n,
        "mean_brier_per_archive": briers,
        "history_beats_running": beats_running,
        "bins": [b.__dict__ for b in table],
        "bin_edges": list(BIN_EDGES),
    }
    if args.json:
        print(json.dumps(out, indent=2))
        return
    print(
        f"{len(seeds)} archives, {n} forecasts: mean forecast {out['mean_forecast']:.3f}, "
        f"observed {out['observed']:.3f}"
    )
    print("forecast bin     n   mean forecast  observed  Jeffreys 95%      inside")
    for b in table:
        if not b.forecasts:
            continue
        inside = b.observed_low <= b.mean_forecast <= b.observed_high
        print(
            f"[{b.low:.2f}, {b.high:.2f})  {b.forecasts:5d}  {b.mean_forecast:13.3f}  {b.observed:8.3f}  "
            f"[{b.observed_low:.3f}, {b.observed_high:.3f}]  {'yes' if inside else 'NO'}"
        )
    print(
        "mean Brier per archive: history {history:.4f}, flat {flat:.4f}, running win rate {running:.4f}".format(
            **briers
        )
    )
    print(f"history prior beats the running win rate in {beats_running} of {len(seeds)} archives")


if __name__ == "__main__":
    main()
