"""Coverage of the 95% prediction interval for a new test's true effect, by seeded simulation (known truth).

Three sources of meta-analyses, each pooled per group exactly as ``archive pool`` pools a group:

1. normal-normal, high I^2: true effects N(0, 0.2^2), within-study variances U(0.005, 0.02) (I^2 about 75%);
2. normal-normal, moderate I^2: true effects N(0, 0.025^2), within-study SE U(0.015, 0.05) (I^2 about 40%, like the
   demo archive);
3. the demo generator ``scripts/make_demo.py``: archives built with ``build_archive(seed)``, written with
   ``write_archive`` into temporary folders and read back with ``load_archive_effects``. Every comparison's truth is
   ``TRUE_EFFECTS[theme] = (mean, tau)`` (log risk ratio); comparisons whose truth is set per device or the
   deliberate device-mix shift are left out, and so are untrusted tests (as ``pool`` does). The comparisons of a
   theme are pooled across seeds and groups of k are drawn from them in two ways: ``comparisons`` (k comparisons at
   random, so two arms of one test rarely meet) and ``tests`` (whole tests in random order until k comparisons, the
   last test cut if needed: a group as an archive holds it, every arm of a multi-arm test together).

Coverage is exact given each interval: P(new true effect in [low, high]) = Phi((high - mean) / tau) - Phi((low -
mean) / tau), averaged over the meta-analyses, so the Monte-Carlo error comes from the meta-analyses only (binomial
SE with n intervals is at most sqrt(0.05 * 0.95 / n); demo subsets of one theme overlap, so their error is larger
than that). Mean width is on the log scale.

Intervals compared:

* ``split-iid``: the interval as shipped before: each comparison's variance with its test's shared control split
  evenly across its comparisons (Cochrane Handbook), comparisons independent;
* ``whole-iid``: variances against the whole control, comparisons independent;
* ``whole-shared`` (shipped): variances against the whole control and the known covariance 1/x_c - 1/n_c of two
  comparisons against the same control in the generalised Q, the mean and tau^2;
* ``hts-shared``: for comparison, the plug-in Higgins-Thompson-Spiegelhalter (2009) interval mean +/- t_{k-2}
  sqrt(tau^2 + SE^2) with REML tau^2 and the same covariance.

    python scripts/check_coverage.py [--seeds 40] [--subsets 150] [--sims 2000] [--workers 4]

Progress goes to stderr, the table to stdout.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from collections.abc import Callable
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy import special

sys.path.insert(0, str(Path(__file__).resolve().parent))

KS = (3, 5, 10, 30)


@dataclass
class Batch:
    """Many meta-analyses of one kind, stacked: estimate i belongs to meta-analysis ``group[i]``."""

    y: np.ndarray
    v_split: np.ndarray  # variance with a shared control split evenly across its comparisons
    v_whole: np.ndarray  # variance against the whole control
    shared: np.ndarray  # covariance with the other comparisons of its test (0 for a two-arm test)
    cluster: np.ndarray  # test id (unique per meta-analysis)
    group: np.ndarray
    n: int
    true_mean: np.ndarray  # per meta-analysis
    true_tau: np.ndarray


Method = Callable[[Batch], tuple[np.ndarray, np.ndarray]]


def _split_iid(b: Batch) -> tuple[np.ndarray, np.ndarray]:
    from archive.stats.meta_groups import pool_groups

    p = pool_groups(b.y, b.v_split, b.group, b.n, "REML")
    return p.prediction_low, p.prediction_high


def _whole_iid(b: Batch) -> tuple[np.ndarray, np.ndarray]:
    from archive.stats.meta_groups import pool_groups

    p = pool_groups(b.y, b.v_whole, b.group, b.n, "REML")
    return p.prediction_low, p.prediction_high


def _whole_shared(b: Batch) -> tuple[np.ndarray, np.ndarray]:
    from archive.stats.meta_groups import pool_groups

    p = pool_groups(b.y, b.v_whole, b.group, b.n, "REML", clusters=b.cluster, shared=b.shared)
    return p.prediction_low, p.prediction_high


def _hts_shared(b: Batch) -> tuple[np.ndarray, np.ndarray]:
    from archive.stats.meta_groups import pool_groups

    p = pool_groups(b.y, b.v_whole, b.group, b.n, "REML", prediction=False, clusters=b.cluster, shared=b.shared)
    assert p.hts_low is not None and p.hts_high is not None
    return p.hts_low, p.hts_high


METHODS: dict[str, Method] = {
    "split-iid": _split_iid,
    "whole-iid": _whole_iid,
    "whole-shared": _whole_shared,
    "hts-shared": _hts_shared,
}


def normal_normal(
    k: int, tau: float, variances: Callable[[np.random.Generator, tuple[int, int]], np.ndarray], sims: int, seed: int
) -> Batch:
    rng = np.random.default_rng(seed)
    v = variances(rng, (sims, k))
    y = rng.normal(0, tau, (sims, k)) + rng.normal(0, np.sqrt(v))
    group = np.repeat(np.arange(sims), k)
    return Batch(
        y.ravel(),
        v.ravel(),
        v.ravel(),
        np.zeros(sims * k),
        np.arange(sims * k),
        group,
        sims,
        np.zeros(sims),
        np.full(sims, tau),
    )


REGIMES: dict[str, tuple[float, Callable[[np.random.Generator, tuple[int, int]], np.ndarray]]] = {
    "normal-normal, tau 0.2, v U(0.005, 0.02) (I^2 ~ 75%)": (0.2, lambda r, s: r.uniform(0.005, 0.02, s)),
    "normal-normal, tau 0.025, SE U(0.015, 0.05) (I^2 ~ 40%)": (0.025, lambda r, s: r.uniform(0.015, 0.05, s) ** 2),
}


def demo_rows(seed: int) -> list[tuple[str, str, float, float, float, float]]:
    """(theme, test id, log RR, split variance, whole variance, shared covariance) of the usable comparisons."""
    import make_demo

    from archive.pooling.effects import load_archive_effects

    tests = make_demo.build_archive(seed)
    by_id = {t.id: t for t in tests}
    with tempfile.TemporaryDirectory() as folder:
        make_demo.write_archive(tests, Path(folder))
        _, effects = load_archive_effects(Path(folder))
    rows = []
    for e in effects:
        t = by_id[e.record_id]
        truth = t.truth["log_rr"][e.arm]
        if not e.trusted or e.double_zero or isinstance(truth, dict):
            continue  # untrusted (left out by pool) or truth set per device
        if t.parent is None and t.idea["slug"] in make_demo.MIX_SHIFT:
            continue  # the deliberate device-mix shift
        whole = e.sampling_variance if e.sampling_variance is not None else e.variance
        rows.append((t.idea["theme"], f"{seed}/{e.record_id}", e.log_rr, e.variance, whole, e.shared_variance))
    return rows


def demo_batches(
    rows: list[tuple[str, str, float, float, float, float]], k: int, subsets: int, seed: int, design: str
) -> Batch:
    import make_demo

    rng = np.random.default_rng([seed, k, design == "tests"])
    themes = sorted({r[0] for r in rows})
    parts: list[list[np.ndarray]] = [[] for _ in range(6)]
    means, taus = [], []
    n = 0
    for theme in themes:
        mine = [r for r in rows if r[0] == theme]
        y = np.array([r[2] for r in mine])
        v_split, v_whole, shared = (np.array([r[j] for r in mine]) for j in (3, 4, 5))
        tests = sorted({r[1] for r in mine})
        test_of = np.array([tests.index(r[1]) for r in mine])
        members = [np.nonzero(test_of == j)[0] for j in range(len(tests))]
        for _ in range(subsets):
            if design == "comparisons":
                pick = rng.choice(len(mine), size=k, replace=False)
            else:
                pick = np.concatenate([members[j] for j in rng.permutation(len(tests))])[:k]
            for store, x in zip(parts, (y, v_split, v_whole, shared, test_of, None), strict=True):
                store.append(x[pick] if x is not None else np.full(k, n))
            mean, tau = make_demo.TRUE_EFFECTS[theme]
            means.append(mean)
            taus.append(tau)
            n += 1
    y, v_split, v_whole, shared, test_of, group = (np.concatenate(p) for p in parts)
    cluster = group * 100_000 + test_of
    # a comparison alone in its group shares its control with nobody there
    return Batch(
        y, v_split, v_whole, shared, cluster.astype(np.int64), group.astype(np.intp), n, np.array(means), np.array(taus)
    )


def coverage(b: Batch, method: Method) -> tuple[float, float, float]:
    """Mean exact coverage, its binomial-style standard error, mean width."""
    low, high = method(b)
    p = special.ndtr((high - b.true_mean) / b.true_tau) - special.ndtr((low - b.true_mean) / b.true_tau)
    return float(np.mean(p)), float(np.sqrt(0.05 * 0.95 / len(p))), float(np.mean(high - low))


def _log(message: str) -> None:
    print(message, file=sys.stderr, flush=True)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, default=40, help="demo archives (about 1.5 s each)")
    parser.add_argument("--subsets", type=int, default=150, help="groups of k drawn per theme and k")
    parser.add_argument("--sims", type=int, default=2000, help="normal-normal meta-analyses per k")
    parser.add_argument("--workers", type=int, default=4)
    parser.add_argument("--methods", default=",".join(METHODS), help="comma-separated, of: " + ", ".join(METHODS))
    args = parser.parse_args()
    methods = {name: METHODS[name] for name in args.methods.split(",")}
    table: list[tuple[str, str, int, float, float, float]] = []
    for r, (title, (tau, variances)) in enumerate(REGIMES.items()):
        for k in KS:
            batch = normal_normal(k, tau, variances, args.sims, seed=1000 * (r + 1) + k)
            for name, method in methods.items():
                start = time.perf_counter()
                table.append((title, name, k, *coverage(batch, method)))
                _log(f"{title} k={k} {name}: {table[-1][3]:.3f} ({time.perf_counter() - start:.1f} s)")
    start = time.perf_counter()
    rows: list[tuple[str, str, float, float, float, float]] = []
    with ProcessPoolExecutor(args.workers) as pool:
        for seed, part in zip(range(1, args.seeds + 1), pool.map(demo_rows, range(1, args.seeds + 1)), strict=True):
            rows += part
            _log(f"demo seed {seed}: {len(part)} comparisons ({time.perf_counter() - start:.0f} s)")
    multi = sum(r[5] > 0 for r in rows)
    _log(f"demo: {len(rows)} comparisons, {multi} of them share a control")
    for design in ("comparisons", "tests"):
        title = f"demo generator, {args.seeds} seeds, groups of {design}"
        for k in KS:
            batch = demo_batches(rows, k, args.subsets, seed=7, design=design)
            for name, method in methods.items():
                table.append((title, name, k, *coverage(batch, method)))
                _log(f"{title} k={k} {name}: {table[-1][3]:.3f}")
    print("coverage of the 95% prediction interval (exact given each interval; target 0.93-0.97)")
    current = ""
    for title, name, k, cov, se, width in table:
        if title != current:
            print(f"\n{title}\n  {'method':14s} {'k':>3s} {'coverage':>9s} {'+/-SE':>7s} {'mean width':>11s}")
            current = title
        print(f"  {name:14s} {k:3d} {cov:9.3f} {se:7.3f} {width:11.4f}")


if __name__ == "__main__":
    main()
