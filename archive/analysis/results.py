"""The results of analysing one test: plain dataclasses whose field names are the keys of
``archive analyze --format json`` (documented in ``site/reference/analysis-json.md``)."""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np

from archive.analysis.settings import Settings as Settings  # re-exported (they live in settings)
from archive.stats.revenue import (
    BootstrapInterval,
    ExtremeOrders,
)

CheckStatus = Literal["ok", "warning", "failed"]


@dataclass
class TrustCheck:
    name: str
    status: CheckStatus
    detail: str
    p_value: float | None = None


@dataclass
class ArmResult:
    name: str
    control: bool
    visitors: int
    conversions: int
    rate: float
    rate_low: float  # credible interval of the rate under the prior
    rate_high: float
    prob_best: float
    expected_loss: float  # conversion rate given up on average by choosing this arm
    orders: int | None
    revenue: float | None
    revenue_per_visitor: float | None
    average_order_value: float | None


@dataclass
class RevenueResult:
    method: Literal["orders-file", "sum-of-squares", "point-estimates-only", "missing"]
    rpv_control: float | None
    rpv_arm: float | None
    difference: float | None
    difference_low: float | None = None
    difference_high: float | None = None
    lift: float | None = None
    lift_low: float | None = None
    lift_high: float | None = None
    p_value: float | None = None
    bootstrap: BootstrapInterval | None = None
    capped_rpv_control: float | None = None
    capped_rpv_arm: float | None = None
    capped_difference: float | None = None
    capped_difference_low: float | None = None
    capped_difference_high: float | None = None
    extreme_orders: ExtremeOrders | None = None
    note: str = ""


@dataclass
class Comparison:
    arm: str
    lift: float | None
    lift_low: float | None
    lift_high: float | None
    difference: float
    difference_low: float
    difference_high: float
    p_value: float
    p_holm: float
    zero_cell_correction: bool
    prob_beat_control: float
    credible_lift_low: float
    credible_lift_high: float
    equivalence_margin: float
    equivalence_p: float
    equivalent: bool
    revenue: RevenueResult
    verdict: str
    reason: str
    downgraded_by: list[str] = field(default_factory=list)
    alpha: float = 0.05  # the two-sided level the Holm p-value is read at (the plan's, else the default)
    significant: bool = False  # p_holm < alpha
    revenue_guardrail: str = "unchecked"  # non-inferior, unchecked, not-shown or worse
    revenue_margin: float = 0.05  # non-inferiority margin of relative revenue per visitor
    revenue_check: str = ""  # the guardrail in words


@dataclass
class Recommendation:
    action: str  # ship, keep-control or iterate
    arm: str | None
    keep_arms: list[str]
    visitors_per_arm_needed: int | None
    explanation: str
    recorded_outcome: str | None
    recorded_arm: str | None
    agrees_with_record: bool | None
    disagreement: str | None


@dataclass
class Analysis:
    id: str
    title: str
    status: str
    control: str
    assumptions: list[str]
    checks: list[TrustCheck]
    arms: list[ArmResult]
    comparisons: list[Comparison]
    recommendation: Recommendation
    settings: dict[str, Any]
    rule: str = ""  # the ship rule in one sentence, with its error rate
    null_ship_rate: float | None = None  # P(ship some arm | no arm differs), for this test's number of arms

    def to_dict(self) -> dict[str, Any]:
        return json_safe(dataclasses.asdict(self))

    @property
    def trusted(self) -> bool:
        return all(c.status != "failed" for c in self.checks)


def json_safe(value: Any) -> Any:
    """JSON-safe: non-finite floats become None, tuples lists."""
    if isinstance(value, dict):
        return {k: json_safe(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [json_safe(v) for v in value]
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, np.floating):
        return json_safe(float(value))
    if isinstance(value, np.bool_):
        return bool(value)
    return value


class CannotAnalyze(ValueError):
    """The record holds too little to analyse (one arm, an arm without visitors, no results)."""


def known(value: int | None) -> int:
    assert value is not None  # guaranteed by usable_arms in one_test
    return value
