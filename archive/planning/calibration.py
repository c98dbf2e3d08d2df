"""Was the history worth using? Replaying the archive in date order with priors built only from earlier tests.

For each trusted comparison, in the order its test started, the prior is built from the comparisons of tests
that started earlier (its theme when that has at least ``MIN_GROUP`` comparisons, else all earlier ones; none
before ``MIN_HISTORY`` earlier comparisons exist). Two forecasts are scored against what the test then showed:

* the 95% predictive interval of the observed log lift, Normal(mu, sd^2 + se^2): its coverage and mean width;
* P(significant win) = P(y / se > z) under that predictive distribution, scored by the Brier score against
  whether the comparison was a significant win (z-test of the log risk ratio at two-sided 0.05).

The comparator is a flat prior: Normal(0, ``FLAT_SD``^2) on the log lift, i.e. "any lift between about -40% and
+60% is as plausible as no change" without looking at history.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import math
from dataclasses import dataclass
from typing import Any

from scipy import stats

from archive.analysis import json_safe
from archive.planning.priors import LiftPrior, lift_prior
from archive.pooling.effects import Effect
from archive.pooling.groups import MIN_GROUP

MIN_HISTORY = 10
FLAT_SD = 0.25
Z = float(stats.norm.ppf(0.975))


@dataclass
class Score:
    forecasts: int
    coverage: float | None  # share of observed lifts inside the 95% predictive interval
    mean_width: float | None  # mean width of that interval, on the log scale
    brier: float | None  # mean squared error of P(significant win)
    mean_forecast: float | None  # mean predicted P(win)
    win_rate: float | None  # observed share of significant wins


@dataclass
class Calibration:
    history: Score
    flat: Score
    skipped: int
    min_history: int
    flat_prior_sd: float
    notes: list[str]

    def to_dict(self) -> dict[str, Any]:
        return json_safe(dataclasses.asdict(self))  # type: ignore[no-any-return]


def _score(rows: list[tuple[float, float, bool, bool]]) -> Score:
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


def _forecast(prior_mean: float, prior_sd: float, e: Effect) -> tuple[float, float, bool, bool]:
    spread = math.sqrt(prior_sd**2 + e.variance)
    p_win = float(stats.norm.sf((Z * e.se - prior_mean) / spread))
    covered = abs(e.log_rr - prior_mean) <= Z * spread
    won = e.log_rr / e.se > Z
    return p_win, 2 * Z * spread, covered, won


def calibrate(effects: list[Effect]) -> Calibration:
    trusted = sorted((e for e in effects if e.trusted), key=lambda e: (e.started or dt.date.min, e.record_id, e.arm))
    history_rows, flat_rows, skipped = [], [], 0
    for e in trusted:
        earlier = [x for x in trusted if x.started and e.started and x.started < e.started]
        if len(earlier) < MIN_HISTORY:
            skipped += 1
            continue
        prior: LiftPrior = lift_prior(earlier, e.themes[0])
        history_rows.append(_forecast(prior.mean, prior.sd, e))
        flat_rows.append(_forecast(0.0, FLAT_SD, e))
    return Calibration(
        _score(history_rows),
        _score(flat_rows),
        skipped,
        MIN_HISTORY,
        FLAT_SD,
        [
            f"Priors use only tests that started earlier; the first {MIN_HISTORY} comparisons have no history.",
            f"A theme needs {MIN_GROUP} earlier comparisons for its own prior; otherwise all earlier ones are used.",
            "Well calibrated: coverage near 95% with narrow intervals, and a low Brier score.",
        ],
    )
