"""From history to a prior: what the archive says about the true lift of the next test of a kind.

The prior for a new test's true relative lift is the pooling's predictive distribution, normal on the log scale
with mean mu and variance tau^2 + SE(mu)^2 (plain random-effects SE), from the comparisons of the theme (and page
area, when given). With fewer than ``MIN_GROUP`` comparisons it falls back to the whole archive, with a warning.
The baseline conversion rate of a page area gets a Beta prior fitted across that area's control arms
(beta-binomial maximum marginal likelihood).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats

from archive.pooling.effects import Effect
from archive.pooling.groups import MIN_GROUP, beta_binomial_fit
from archive.records.model import Record
from archive.stats.meta import random_effects


@dataclass(frozen=True)
class LiftPrior:
    """Normal prior on the log of (1 + relative lift)."""

    source: str  # which comparisons it came from
    comparisons: int
    mean: float
    sd: float
    tau2: float
    warning: str | None = None

    @property
    def lift(self) -> float:
        return math.expm1(self.mean)

    def prob_above(self, lift: float) -> float:
        """P(true relative lift > lift)."""
        return float(stats.norm.sf((math.log1p(lift) - self.mean) / self.sd))

    def interval(self, level: float = 0.95) -> tuple[float, float]:
        z = float(stats.norm.ppf(0.5 + level / 2))
        return math.expm1(self.mean - z * self.sd), math.expm1(self.mean + z * self.sd)

    def label(self) -> str:
        low, high = self.interval()
        return (
            f"history prior from {self.source} ({self.comparisons} comparisons): log(1 + lift) ~ "
            f"Normal({self.mean:+.4f}, {self.sd:.4f}^2), i.e. lift {self.lift:+.1%}, 95% [{low:+.1%}, {high:+.1%}]"
        )


def _fit(effects: list[Effect], source: str, warning: str | None = None) -> LiftPrior:
    y = np.array([e.log_rr for e in effects])
    v = np.array([e.variance for e in effects])
    re = random_effects(y, v, "REML", hksj=False, prediction=False)
    return LiftPrior(source, len(effects), re.mean, math.sqrt(re.tau2 + re.se**2), re.tau2, warning)


def lift_prior(effects: list[Effect], theme: str, page_area: str | None = None) -> LiftPrior:
    """The prior for a new test of ``theme`` (on ``page_area``), from trusted comparisons: the theme on that
    page area, else the theme anywhere, else the whole archive, whichever first has ``MIN_GROUP`` comparisons."""
    trusted = [e for e in effects if e.trusted]
    if len(trusted) < 2:
        raise ValueError("the archive needs at least two trusted comparisons to build a prior")
    candidates = []
    if page_area is not None:
        on_area = [e for e in trusted if theme in e.themes and e.page_area == page_area]
        candidates.append((f"theme {theme} on {page_area}", on_area))
    candidates.append((f"theme {theme}", [e for e in trusted if theme in e.themes]))
    first_name, first_group = candidates[0]
    for name, group in candidates:
        if len(group) >= MIN_GROUP:
            note = None
            if name != first_name:
                note = f"only {len(first_group)} comparison(s) for {first_name}: using {name} instead"
            return _fit(group, name, note)
    warning = (
        f"only {len(first_group)} comparison(s) for {first_name}: using the whole archive "
        f"({len(trusted)} comparisons) instead"
    )
    return _fit(trusted, "the whole archive", warning)


@dataclass(frozen=True)
class BaselinePrior:
    page_area: str
    controls: int
    alpha: float
    beta: float

    @property
    def mean(self) -> float:
        return self.alpha / (self.alpha + self.beta)

    def interval(self, level: float = 0.95) -> tuple[float, float]:
        tail = (1 - level) / 2
        low, high = stats.beta.ppf([tail, 1 - tail], self.alpha, self.beta)
        return float(low), float(high)


def baseline_prior(records: list[Record], page_area: str) -> BaselinePrior | None:
    """Beta prior of the control conversion rate on a page area, fitted across its control arms."""
    counts, totals = [], []
    for r in records:
        if r.page_area != page_area or r.status not in ("finished", "stopped-early"):
            continue
        control = r.control_arm()
        if control.visitors and control.conversions is not None:
            counts.append(control.conversions)
            totals.append(control.visitors)
    if len(counts) < 2:
        return None
    fit = beta_binomial_fit(counts, totals)
    if fit is None:
        return None
    return BaselinePrior(page_area, len(counts), fit[0], fit[1])


def prior_yaml(prior: LiftPrior, baseline: BaselinePrior | None) -> str:
    """Lines to paste under a record's ``plan:`` key."""
    lines = []
    if baseline is not None:
        b_low, b_high = baseline.interval()
        lines.append(
            f"  baseline_rate: {baseline.mean:.5f}  # page area {baseline.page_area}: 95% {b_low:.4f} to {b_high:.4f}"
        )
    low, high = prior.interval()
    lines += [
        f"  prior:  # expected lift {prior.lift:+.2%}, 95% {low:+.2%} to {high:+.2%}; "
        f"P(lift > 0) {prior.prob_above(0.0):.2f}",
        f"    source: {prior.source} ({prior.comparisons} comparisons)",
        f"    mean_log_lift: {prior.mean:.6f}",
        f"    sd_log_lift: {prior.sd:.6f}",
    ]
    return "\n".join(lines) + "\n"


@dataclass(frozen=True)
class InformedLift:
    """One comparison's lift with the history prior combined with the test's normal likelihood on the log scale."""

    arm: str
    observed_lift: float | None
    shrunk_lift: float
    low: float
    high: float
    prob_positive: float
    prob_above_minimum: float | None
    minimum_lift: float | None
    weight_on_data: float  # how much of the estimate comes from this test (0..1)


def informed_lift(
    arm: str, log_rr: float, se: float, prior: LiftPrior, minimum_lift: float | None = None
) -> InformedLift:
    """Normal-normal update: posterior precision = 1/se^2 + 1/sd^2, mean weighted by precision."""
    if se <= 0:
        raise ValueError("the standard error must be > 0")
    precision = 1 / se**2 + 1 / prior.sd**2
    mean = (log_rr / se**2 + prior.mean / prior.sd**2) / precision
    sd = math.sqrt(1 / precision)
    z = float(stats.norm.ppf(0.975))
    above = None if minimum_lift is None else float(stats.norm.sf((math.log1p(minimum_lift) - mean) / sd))
    return InformedLift(
        arm,
        math.expm1(log_rr),
        math.expm1(mean),
        math.expm1(mean - z * sd),
        math.expm1(mean + z * sd),
        float(stats.norm.sf(-mean / sd)),
        above,
        minimum_lift,
        (1 / se**2) / precision,
    )


def prior_for_record(effects: list[Effect], record: Record) -> LiftPrior:
    """The history prior for a test (its first theme, on its page area where history allows), built from the
    other tests only: the test's own data are the likelihood."""
    others = [e for e in effects if e.record_id != record.id]
    return lift_prior(others, record.themes[0], record.page_area)
