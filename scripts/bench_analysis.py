"""Benchmark of the per-test analysis (invented data, seeded).

1. Analysis of a 5-arm record with 1,000,000 visitors per arm and an order-level file of 150,000 orders
   (target: under 2 s, file reading and checks included).
2. P(best) for 10 arms by integration against a 200,000-draw Monte Carlo, measured in the same run
   (target: at least 20x faster; the integration accurate to 1e-4, the Monte Carlo only to about 1e-3).

    python scripts/bench_analysis.py [--json]
"""

from __future__ import annotations

import argparse
import json
import tempfile
import time
from pathlib import Path

import numpy as np

from archive.analysis import analyze
from archive.records.load import load_record
from archive.stats.bayes import BetaPosterior, prob_best


def _best_of(fn, repeats: int = 5) -> float:  # type: ignore[no-untyped-def]
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return min(times)


def write_big_record(folder: Path, seed: int = 11) -> Path:
    rng = np.random.default_rng(seed)
    arms = ["control", "b", "c", "d", "e"]
    rows = ["arm,order_id,value"]
    lines = [
        "id: big-test",
        "title: Five-arm benchmark test",
        "status: finished",
        "started: 2025-01-06",
        "ended: 2025-02-02",
        "page_area: product-page",
        "themes: [benchmark]",
        "hypothesis: invented data for timing",
        "plan: {visitors_per_arm: 1000000, minimum_lift: 0.02}",
        "orders_file: big-test-orders.csv",
        "arms:",
    ]
    for i, name in enumerate(arms):
        n_orders = 30_000
        values = np.round(rng.lognormal(3.9, 0.7, n_orders), 2)
        rows += [f"{name},{name}{j},{v:.2f}" for j, v in enumerate(values)]
        lines += [
            f"  - name: {name}",
            *(["    control: true"] if i == 0 else []),
            "    visitors: 1000000",
            f"    conversions: {n_orders}",
            f"    orders: {n_orders}",
            f"    revenue: {values.sum():.2f}",
        ]
    (folder / "big-test-orders.csv").write_text("\n".join(rows) + "\n")
    path = folder / "big-test.yaml"
    path.write_text("\n".join(lines) + "\n")
    return path


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", action="store_true")
    args = parser.parse_args()
    results: dict[str, float] = {}
    with tempfile.TemporaryDirectory() as tmp:
        path = write_big_record(Path(tmp))

        def full() -> None:
            loaded, _ = load_record(path)
            assert loaded is not None
            analyze(loaded.record, loaded.orders)

        results["analysis_5_arms_1M_visitors_150k_orders_s"] = _best_of(full, 3)

    posteriors = [BetaPosterior.from_counts(30_000 + 120 * i, 1_000_000) for i in range(10)]
    rng = np.random.default_rng(1)

    def monte_carlo() -> np.ndarray:
        draws = np.stack([rng.beta(p.alpha, p.beta, 200_000) for p in posteriors])
        return np.bincount(draws.argmax(axis=0), minlength=len(posteriors)) / draws.shape[1]

    results["prob_best_10_arms_integration_s"] = _best_of(lambda: prob_best(posteriors), 20)
    results["prob_best_10_arms_monte_carlo_200k_s"] = _best_of(monte_carlo, 5)
    results["speed_ratio_monte_carlo_over_integration"] = (
        results["prob_best_10_arms_monte_carlo_200k_s"] / results["prob_best_10_arms_integration_s"]
    )
    results["max_abs_difference_integration_vs_monte_carlo"] = float(
        np.max(np.abs(prob_best(posteriors) - monte_carlo()))
    )
    if args.json:
        print(json.dumps(results, indent=2))
        return
    print("targets: analysis < 2 s; integration >= 20x faster than 200k-draw Monte Carlo")
    for key, value in results.items():
        print(f"{key:50s} {value:.4g}")


if __name__ == "__main__":
    main()
