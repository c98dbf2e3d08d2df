"""What the analysis can be told: :class:`Settings` and the verdict thresholds (:class:`VerdictRules`).

A module of its own with no heavy import, so that reading the archive's settings (every command does) does not
load the statistics. The rules themselves are explained in :mod:`archive.analysis.verdict`.
"""

from __future__ import annotations

from dataclasses import dataclass, field


@dataclass(frozen=True)
class VerdictRules:
    win_probability: float = 0.95  # the opt-in probability rule only (common practice: 90-95%)
    alpha: float = 0.05  # two-sided, Holm-adjusted, when the record has no plan (a plan's alpha wins); common practice
    leaning_probability: float = 0.80  # common practice
    default_margin: float = 0.05  # equivalence margin when the plan names no smallest lift that matters
    ship_on_probability: bool = False  # opt-in: P(beats control) >= win_probability also wins (no error control)
    min_conversions_without_plan: int = 100  # common practice: without a planned size, no ship below this per arm
    revenue_margin: float = 0.05  # non-inferiority margin of relative revenue per visitor for a ship

    def __post_init__(self) -> None:
        if not 0.5 < self.leaning_probability <= self.win_probability < 1:
            raise ValueError("need 0.5 < leaning_probability <= win_probability < 1")
        if not 0 < self.alpha < 1 or not 0 < self.default_margin < 1:
            raise ValueError("alpha and default_margin lie strictly between 0 and 1")
        if not 0 < self.revenue_margin < 1 or self.min_conversions_without_plan < 0:
            raise ValueError("revenue_margin lies strictly between 0 and 1; min_conversions_without_plan >= 0")


@dataclass(frozen=True)
class Settings:
    """Everything the analysis can be told; every default is stated in the report."""

    prior: tuple[float, float] = (1.0, 1.0)  # Beta prior of each arm's conversion rate (uniform)
    prior_label: str = "uniform Beta(1, 1) on each arm's conversion rate"
    confidence: float = 0.95
    srm_alpha: float = 0.001  # common practice: alarm on sample ratio mismatch at p < 0.001
    margin: float | None = None  # equivalence margin on relative lift; None: the plan's minimum_lift, else default
    cap_percentile: float = 99.0
    top_fraction: float = 0.01
    bootstrap_replicates: int = 1000
    seed: int = 0
    currency: str = "EUR"  # shown beside every amount of revenue (an archive setting)
    rules: VerdictRules = field(default_factory=VerdictRules)
