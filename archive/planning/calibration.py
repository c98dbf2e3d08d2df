"""Was the history worth using? Replaying the archive in date order with priors built only from earlier tests.

For each trusted comparison, in the order its test started, the prior is the history model's
(:mod:`archive.planning.priors`) for its first theme (every comparison counted in its first theme), fitted to the
comparisons of tests that started earlier (none before ``MIN_HISTORY`` earlier comparisons exist). The replay keeps
the model's sums on the fixed coarse grid and grows them date by date; unlike ``archive prior`` it does not refine
the grid, so in a very large archive its predictive sd can be a few percent off the refined value.

Two forecasts are scored against what the test then showed:

* the 95% predictive interval of the observed log lift, Normal(mu, sd^2 + se^2): its coverage and mean width;
* P(significant win) = P(y / se > z) under that predictive distribution, scored by the Brier score against
  whether the comparison was a significant win (z-test of the log risk ratio at two-sided 0.05).

Two comparators: a flat prior, Normal(0, ``FLAT_SD``^2) on the log lift ("any lift between about -40% and +60% is
as plausible as no change", without looking at history), and the running win rate, P(win) = (earlier wins + 1/2)
/ (earlier comparisons + 1), which knows how often tests won but nothing about the kind of test. A reliability
table bins the history prior's P(win) and sets the observed share of wins beside each bin's mean forecast, with
a Jeffreys 95% interval of that share (calibrated: the mean forecast inside it).
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import special, stats

from archive.analysis import json_safe
from archive.planning.hyperprior import DEFAULT_HYPERPRIOR, Hyperprior
from archive.planning.priors import ThemeSums, fit_history, history_grid, primary_themes
from archive.pooling.effects import Effect
from archive.pooling.groups import jeffreys

MIN_HISTORY = 10
FLAT_SD = 0.25
Z = float(stats.norm.ppf(0.975))
BIN_EDGES = (0.0, 0.05, 0.1, 0.2, 0.35, 0.5, 1.0)  # forecast bins of the reliability table


@dataclass
class Score:
    forecasts: int
    coverage: float | None  # share of observed lifts inside the 95% predictive interval
    mean_width: float | None  # mean width of that interval, on the log scale
    brier: float | None  # mean squared error of P(significant win)
    mean_forecast: float | None  # mean predicted P(win)
    win_rate: float | None  # observed share of significant wins


@dataclass
class ReliabilityBin:
    low: float  # forecast P(win) in [low, high)
    high: float
    forecasts: int
    mean_forecast: float | None
    observed: float | None  # share of those comparisons that won
    observed_low: float | None  # Jeffreys 95% interval of that share
    observed_high: float | None


@dataclass
class Calibration:
    history: Score
    flat: Score
    skipped: int
    min_history: int
    flat_prior_sd: float
    notes: list[str]
    running: Score | None = None  # the running win rate of earlier comparisons as the forecast of P(win)
    reliability: list[ReliabilityBin] = field(default_factory=list)  # of the history prior's P(win)

    def to_dict(self) -> dict[str, Any]:
        return json_safe(dataclasses.asdict(self))  # type: ignore[no-any-return]


Row = tuple[float, float, bool, bool]  # forecast P(win), interval width, covered, won


def _score(rows: list[Row]) -> Score:
    """rows: (forecast P(win), interval width, covered, won)."""
    if not rows:
        return Score(0, None, None, None, None, None)
    n = len(rows)
    return Score(
        n,
        sum(r[2] for r in rows) / n,
        sum(r[1] for r in rows) / n,
        sum((r[0] - r[3]) ** 2 for r in rows) / n,
        sum(r[0] for r in rows) / n,
        sum(r[3] for r in rows) / n,
    )


def _forecast(prior_mean: float, prior_sd: float, e: Effect) -> Row:
    # the estimate varies with its own sampling variance (whole control); "won" is read, as everywhere, on the
    # pooling scale (z against the split control's standard error)
    sampling = e.sampling_variance if e.sampling_variance is not None else e.variance
    spread = math.sqrt(prior_sd**2 + sampling)
    p_win = float(special.ndtr((prior_mean - Z * e.se) / spread))
    covered = abs(e.log_rr - prior_mean) <= Z * spread
    won = e.log_rr / e.se > Z
    return p_win, 2 * Z * spread, covered, won


def reliability_table(rows: list[tuple[float, bool]]) -> list[ReliabilityBin]:
    """(forecast, won) pairs binned by forecast (``BIN_EDGES``), with the observed share and its Jeffreys interval."""
    out = []
    for low, high in zip(BIN_EDGES[:-1], BIN_EDGES[1:], strict=True):
        inside = [(f, w) for f, w in rows if low <= f < high or (high == 1.0 and f == 1.0)]
        if not inside:
            out.append(ReliabilityBin(low, high, 0, None, None, None, None))
            continue
        wins = sum(w for _, w in inside)
        share = jeffreys(wins, len(inside))
        out.append(
            ReliabilityBin(
                low, high, len(inside), sum(f for f, _ in inside) / len(inside), share.rate, share.low, share.high
            )
        )
    return out


@dataclass
class Replay:
    """The forecasts of a replay, before scoring: per forecast comparison its history and flat-prior rows and the
    running win rate, and how many comparisons had too little history."""

    history: list[Row]
    flat: list[Row]
    running: list[float]
    skipped: int

    def forecasts(self) -> list[tuple[float, bool]]:
        """(history forecast of P(significant win), won) pairs, e.g. for pooling over archives."""
        return [(r[0], r[3]) for r in self.history]


def replay(
    effects: list[Effect], hyper: Hyperprior = DEFAULT_HYPERPRIOR, progress: Callable[[int, int], None] | None = None
) -> Replay:
    """Replay the archive in start-date order. The history model's sufficient statistics grow test date by test
    date, so each forecast sees exactly the comparisons of tests that started earlier (undated ones never);
    ``progress`` is told (comparisons done, all comparisons) after each test date."""
    trusted = sorted(
        (e for e in effects if e.trusted and not e.double_zero),
        key=lambda e: (e.started or dt.date.min, e.record_id, e.arm),
    )
    names, index = primary_themes(trusted)
    y = np.array([e.log_rr for e in trusted])
    v = np.array([e.variance for e in trusted])
    tau2, omega2, log_prior = history_grid(hyper)
    sums = ThemeSums.empty(tau2, len(names))
    history_rows: list[Row] = []
    flat_rows: list[Row] = []
    running_rows: list[float] = []
    skipped = earlier = wins = 0
    start = 0
    while start < len(trusted):
        day = trusted[start].started
        stop = start
        while stop < len(trusted) and trusted[stop].started == day:
            stop += 1
        block = range(start, stop)
        fitted = None if day is None or earlier < MIN_HISTORY else fit_history(sums, omega2, log_prior, hyper.mean_sd)
        for i in block:
            e = trusted[i]
            if fitted is None:
                skipped += 1
                continue
            post = fitted.predict(int(index[i]))
            history_rows.append(_forecast(post.mean, post.sd, e))
            flat_rows.append(_forecast(0.0, FLAT_SD, e))
            running_rows.append((wins + 0.5) / (earlier + 1))
        if day is not None:
            sums.add(y[start:stop], v[start:stop], index[start:stop])
            earlier += len(block)
            wins += sum(trusted[i].log_rr / trusted[i].se > Z for i in block)
        start = stop
        if progress is not None:
            progress(stop, len(trusted))
    return Replay(history_rows, flat_rows, running_rows, skipped)


def calibrate(
    effects: list[Effect],
    hyper: Hyperprior = DEFAULT_HYPERPRIOR,
    progress: Callable[[int, int], None] | None = None,
) -> Calibration:
    """Replay the archive and score it (:func:`replay`, :func:`scores`)."""
    return scores(replay(effects, hyper, progress), hyper)


def scores(done: Replay, hyper: Hyperprior = DEFAULT_HYPERPRIOR) -> Calibration:
    """Score the history prior's forecasts against the flat prior and the running win rate (module docstring)."""
    history_rows, flat_rows, running_rows, skipped = done.history, done.flat, done.running, done.skipped
    won = [r[3] for r in history_rows]
    running = _score([(f, 0.0, False, w) for f, w in zip(running_rows, won, strict=True)])
    running.coverage = running.mean_width = None  # a win rate forecasts no interval of the lift
    return Calibration(
        _score(history_rows),
        _score(flat_rows),
        skipped,
        MIN_HISTORY,
        FLAT_SD,
        [
            f"Priors use only tests that started earlier; the first {MIN_HISTORY} comparisons have no history.",
            "Each forecast is the history model's prior for the comparison's first theme: the theme's earlier "
            "tests, pulled toward the archive mean by as much as earlier tests say themes differ.",
            hyper.label(),
            "Well calibrated: coverage near 95% with narrow intervals, a low Brier score, and in the reliability "
            "table each bin's mean forecast inside the interval of its observed share.",
            "The running win rate is the baseline to beat: a history prior that does not beat it adds nothing "
            "beyond how often tests win.",
        ],
        running,
        reliability_table([(r[0], r[3]) for r in history_rows]),
    )
