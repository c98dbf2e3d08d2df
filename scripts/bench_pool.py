"""Benchmark of the vectorised random-effects pooling of many groups (invented data, seeded).

10,000 invented records with 1-4 comparisons against control each (log risk ratios from binomial counts), every
record in 1-2 of 12 themes. Timed in the same run, best of 5:

1. ``pool_groups`` for all themes in one call, full default (REML, HKSJ, Q-profile interval, prediction interval);
   also with the comparisons of a record sharing a control (``clusters``, ``shared``), and with DL for a
   like-for-like comparison with the statsmodels DL loop;
2. a Python loop over the themes calling statsmodels ``combine_effects(y, v, method_re="dl")``, and with
   ``method_re="iterated"`` (its Paule-Mandel iteration);
3. a Python loop over the themes calling our scalar ``random_effects`` (full default).

Targets: ``pool_groups`` for every theme under 1 s and at least 10x faster than the statsmodels loop. The same
comparison is repeated for a finer grouping (theme x page area x quarter, several hundred small groups), where the
per-group overhead of a loop, not the arithmetic, dominates. Ratios are loop time / ``pool_groups`` time.

    python scripts/bench_pool.py [--json]
"""

from __future__ import annotations

import argparse
import json
import time
from collections.abc import Callable

import numpy as np
from statsmodels.stats.meta_analysis import combine_effects

from archive.stats.meta import random_effects
from archive.stats.meta_groups import pool_groups

N_RECORDS = 10_000
N_THEMES = 12
N_PAGE_AREAS = 8
N_QUARTERS = 8


def _best_of(fn: Callable[[], object], repeats: int = 5) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return min(times)


def synthetic_effects(seed: int = 17) -> dict[str, np.ndarray]:
    """One row per (comparison, theme): log RR, its delta-method variance, theme, page area, quarter.

    Invented: theme means ~ N(0.01, 0.03^2), between-test sd 0.01-0.08 per theme, baseline rates 1-8%, 2,000 to
    300,000 visitors per arm. (Each comparison draws its own control; ``shared`` gives a record's comparisons a
    covariance, the smallest of their control terms, so that pooling with shared controls can be timed as well.)
    """
    rng = np.random.default_rng(seed)
    theme_mean = rng.normal(0.01, 0.03, N_THEMES)
    theme_tau = rng.uniform(0.01, 0.08, N_THEMES)
    n_comparisons = rng.integers(1, 5, N_RECORDS)
    n_themes = rng.integers(1, 3, N_RECORDS)
    first_theme = rng.integers(0, N_THEMES, N_RECORDS)
    second_theme = (first_theme + rng.integers(1, N_THEMES, N_RECORDS)) % N_THEMES
    page_area = rng.integers(0, N_PAGE_AREAS, N_RECORDS)
    quarter = rng.integers(0, N_QUARTERS, N_RECORDS)
    base_rate = rng.uniform(0.01, 0.08, N_RECORDS)
    visitors = np.round(10 ** rng.uniform(np.log10(2_000), np.log10(300_000), N_RECORDS))

    record = np.repeat(np.arange(N_RECORDS), n_comparisons)
    true_log_rr = theme_mean[first_theme[record]] + rng.normal(0, theme_tau[first_theme[record]])
    n = visitors[record]
    control = rng.binomial(n.astype(np.int64), base_rate[record]) + 0.5  # 0.5: no zero cells
    treated = rng.binomial(n.astype(np.int64), np.minimum(base_rate[record] * np.exp(true_log_rr), 0.99)) + 0.5
    y = np.log(treated / n) - np.log(control / n)
    v = 1 / treated - 1 / n + 1 / control - 1 / n
    # for the timing with shared controls: the covariance of a record's comparisons, the smallest control term
    control_term = 1 / control - 1 / n
    smallest = np.full(N_RECORDS, np.inf)
    np.minimum.at(smallest, record, control_term)
    shared = np.where(n_comparisons[record] > 1, smallest[record], 0.0)

    # a record in two themes contributes its comparisons to both
    in_second = n_themes[record] == 2
    rows = np.concatenate([np.arange(len(record)), np.nonzero(in_second)[0]])
    theme = np.concatenate([first_theme[record], second_theme[record][in_second]])
    return {
        "y": y[rows],
        "v": v[rows],
        "theme": theme,
        "cell": (theme * N_PAGE_AREAS + page_area[record][rows]) * N_QUARTERS + quarter[record][rows],
        "record": record[rows],
        "shared": shared[rows],
        "n_comparisons": np.array(len(record)),
    }


def _compare(
    y: np.ndarray, v: np.ndarray, index: np.ndarray, n_groups: int, prefix: str, record: np.ndarray, shared: np.ndarray
) -> dict[str, float]:
    used = np.unique(index)
    groups = [(y[index == j], v[index == j]) for j in used]  # split outside the timed loops
    results: dict[str, float] = {}
    results[f"{prefix}_groups"] = float(len(used))
    results[f"{prefix}_pool_groups_full_s"] = _best_of(lambda: pool_groups(y, v, index, n_groups))
    results[f"{prefix}_pool_groups_full_shared_controls_s"] = _best_of(
        lambda: pool_groups(y, v, index, n_groups, clusters=record, shared=shared)
    )
    results[f"{prefix}_pool_groups_dl_s"] = _best_of(lambda: pool_groups(y, v, index, n_groups, "DL"))

    def statsmodels_loop(method_re: str) -> Callable[[], object]:
        def run() -> object:
            with np.errstate(invalid="ignore", divide="ignore"):  # negative DL tau2 (check-values §12)
                return [combine_effects(a, b, method_re=method_re) for a, b in groups]

        return run

    results[f"{prefix}_statsmodels_dl_loop_s"] = _best_of(statsmodels_loop("dl"))
    results[f"{prefix}_statsmodels_iterated_loop_s"] = _best_of(statsmodels_loop("iterated"))
    results[f"{prefix}_scalar_random_effects_loop_s"] = _best_of(lambda: [random_effects(a, b) for a, b in groups])

    full = results[f"{prefix}_pool_groups_full_s"]
    results[f"{prefix}_ratio_statsmodels_dl_loop_over_pool_full"] = results[f"{prefix}_statsmodels_dl_loop_s"] / full
    results[f"{prefix}_ratio_statsmodels_iterated_loop_over_pool_full"] = (
        results[f"{prefix}_statsmodels_iterated_loop_s"] / full
    )
    results[f"{prefix}_ratio_statsmodels_dl_loop_over_pool_dl"] = (
        results[f"{prefix}_statsmodels_dl_loop_s"] / results[f"{prefix}_pool_groups_dl_s"]
    )
    results[f"{prefix}_ratio_scalar_loop_over_pool_full"] = results[f"{prefix}_scalar_random_effects_loop_s"] / full

    # the two implementations must agree (not timed)
    pooled = pool_groups(y, v, index, n_groups)
    scalar = [random_effects(a, b) for a, b in groups]
    results[f"{prefix}_max_relative_difference_mean_vs_scalar"] = max(
        abs(pooled.mean[j] - r.mean) / max(abs(r.mean), 1e-12) for j, r in zip(used, scalar, strict=True)
    )
    results[f"{prefix}_max_abs_difference_tau2_vs_scalar"] = max(
        abs(pooled.tau2[j] - r.tau2) for j, r in zip(used, scalar, strict=True)
    )
    return results


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", action="store_true")
    args = parser.parse_args()
    data = synthetic_effects()
    y, v = data["y"], data["v"]
    results: dict[str, float] = {"records": float(N_RECORDS), "comparisons": float(data["n_comparisons"])}
    results["rows_effect_x_theme"] = float(len(y))
    shared = (data["record"], data["shared"])
    results |= _compare(y, v, data["theme"], N_THEMES, "themes", *shared)
    results |= _compare(y, v, data["cell"], N_THEMES * N_PAGE_AREAS * N_QUARTERS, "cells", *shared)
    results["target_pool_under_1s_met"] = float(results["themes_pool_groups_full_s"] < 1.0)
    results["target_10x_statsmodels_dl_loop_met_themes"] = float(
        results["themes_ratio_statsmodels_dl_loop_over_pool_full"] >= 10
    )
    results["target_10x_statsmodels_dl_loop_met_cells"] = float(
        results["cells_ratio_statsmodels_dl_loop_over_pool_full"] >= 10
    )
    if args.json:
        print(json.dumps(results, indent=2))
        return
    print("targets: pool_groups for every theme < 1 s; >= 10x faster than the statsmodels loop")
    for key, value in results.items():
        print(f"{key:58s} {value:.4g}")


if __name__ == "__main__":
    main()
