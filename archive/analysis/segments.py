"""Slicing one test by segment without fooling ourselves.

For each requested dimension (device, traffic source, ...) and each arm against control:

* per segment: visitors, conversion rates, relative lift with its Katz interval, the z-test p-value, the
  segment's share of each arm's traffic and a sample ratio check inside the segment;
* whether the effect differs by segment: Cochran's Q and I^2 over the segment log risk ratios (the pooling
  code in :mod:`archive.stats.meta`) and, for two segments, the interaction test of Altman & Bland (2003). The
  effect is said to differ only when that test rejects at the verdict alpha; otherwise the segments are
  consistent with one common effect, whatever their separate p-values say;
* p-values adjusted across all segments x arms (Benjamini-Hochberg by default, Holm on request); a dimension
  not named in the plan before the test is exploratory;
* Simpson's paradox: the pooled lift beside the Mantel-Haenszel (mix-adjusted) lift, a flag when the pooled
  lift points against every segment, and a flag when the segment mix differs between arms enough to move the
  pooled figure.

Small segments are kept out of the heterogeneity test by this rule (common practice, no source): fewer than
``MIN_EXPECTED`` expected conversions in the arm or the control, expected = the segment's visitors in that arm
times the segment's conversion rate over both arms.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from typing import Any, Literal

from archive.analysis.results import Settings, json_safe
from archive.records.model import Record
from archive.stats.meta import heterogeneity, interaction_test
from archive.stats.multiple import benjamini_hochberg, holm
from archive.stats.proportions import compare_rates, log_risk_ratio, mantel_haenszel_rr
from archive.stats.srm import contingency_p, sample_ratio_test

MIN_EXPECTED = 10.0
Adjustment = Literal["bh", "holm"]


@dataclass
class SegmentRow:
    dimension: str
    segment: str
    arm: str
    visitors: int
    conversions: int
    control_visitors: int
    control_conversions: int
    rate: float
    control_rate: float
    share_of_arm: float  # this segment's share of the arm's visitors (within the dimension)
    share_of_control: float
    lift: float | None
    lift_low: float | None
    lift_high: float | None
    p_value: float
    p_adjusted: float | None = None
    srm_p_value: float | None = None
    small: bool = False
    zero_cell_correction: bool = False


@dataclass
class SegmentEffectTest:
    dimension: str
    arm: str
    segments_used: list[str]
    segments_excluded: list[str]
    q: float | None
    df: int | None
    q_p_value: float | None
    i_squared: float | None
    interaction_z: float | None
    interaction_p_value: float | None
    differs: bool
    statement: str


@dataclass
class MixCheck:
    dimension: str
    arm: str
    pooled_lift: float | None
    adjusted_lift: float | None  # Mantel-Haenszel risk ratio - 1
    adjusted_low: float | None
    adjusted_high: float | None
    mix_p_value: float | None  # chi-square of the segment mix between this arm and control
    reversal: bool
    mix_moves_pooled: bool
    warning: str | None


@dataclass
class DimensionResult:
    dimension: str
    preregistered: bool
    label: str  # "pre-registered" or "exploratory"
    rows: list[SegmentRow]
    effect_tests: list[SegmentEffectTest]
    mix_checks: list[MixCheck]


@dataclass
class SegmentAnalysis:
    id: str
    adjustment: str
    min_expected_conversions: float
    dimensions: list[DimensionResult] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        return json_safe(dataclasses.asdict(self))  # type: ignore[no-any-return]


class UnknownDimension(ValueError):
    pass


def analyze_segments(
    record: Record, dimensions: list[str], adjust: Adjustment = "bh", settings: Settings | None = None
) -> SegmentAnalysis:
    s = settings or Settings()
    if adjust not in ("bh", "holm"):
        raise ValueError("adjust is 'bh' (Benjamini-Hochberg) or 'holm'")
    missing = [d for d in dimensions if d not in record.segments]
    if missing:
        known = ", ".join(record.segments) or "none"
        raise UnknownDimension(
            f"{record.id} has no segments by {', '.join(missing)} (dimensions in the record: {known})"
        )
    control = record.control_arm()
    planned = set(record.plan.segments) if record.plan else set()
    weights = _planned_weights(record)
    result = SegmentAnalysis(record.id, "Benjamini-Hochberg" if adjust == "bh" else "Holm", MIN_EXPECTED)
    all_rows: list[SegmentRow] = []
    for dim in dimensions:
        by_value = record.segments[dim]
        rows: list[SegmentRow] = []
        for arm in (a for a in record.arms if not a.control):
            rows += _rows(dim, by_value, arm.name, control.name, weights)
        tests = [_effect_test(dim, arm.name, rows, s) for arm in record.arms if not arm.control]
        mixes = [_mix_check(record, dim, arm.name, s) for arm in record.arms if not arm.control]
        pre = dim in planned
        result.dimensions.append(
            DimensionResult(dim, pre, "pre-registered" if pre else "exploratory", rows, tests, mixes)
        )
        all_rows += rows
    _adjust(all_rows, adjust)
    result.notes = [
        f"p-values adjusted with {result.adjustment} across {len(all_rows)} segment x arm comparisons.",
        "Cuts not named in the plan before the test are exploratory: treat them as ideas for a next test.",
        f"Segments with fewer than {MIN_EXPECTED:g} expected conversions in an arm are flagged small and left out "
        "of the test of whether the effect differs.",
        "A segment's p-value below 0.05 while another's is not does not show that the effect differs; "
        "only the interaction / heterogeneity test speaks to that.",
    ]
    return result


def _planned_weights(record: Record) -> dict[str, float]:
    if record.plan is not None and record.plan.split is not None:
        return dict(record.plan.split)
    return {a.name: 1.0 for a in record.arms}


def _rows(dim: str, by_value: dict, arm: str, control: str, weights: dict[str, float]) -> list[SegmentRow]:  # type: ignore[type-arg]
    total_arm = sum(cells[arm].visitors for cells in by_value.values() if arm in cells)
    total_control = sum(cells[control].visitors for cells in by_value.values() if control in cells)
    rows = []
    for value, cells in by_value.items():
        if arm not in cells or control not in cells:
            continue
        t, c = cells[arm], cells[control]
        if t.visitors == 0 or c.visitors == 0:
            continue
        r = compare_rates(t.conversions, t.visitors, c.conversions, c.visitors)
        pooled_rate = (t.conversions + c.conversions) / (t.visitors + c.visitors)
        small = min(t.visitors, c.visitors) * pooled_rate < MIN_EXPECTED
        srm = sample_ratio_test([t.visitors, c.visitors], [weights.get(arm, 1.0), weights.get(control, 1.0)])
        rows.append(
            SegmentRow(
                dimension=dim,
                segment=value,
                arm=arm,
                visitors=t.visitors,
                conversions=t.conversions,
                control_visitors=c.visitors,
                control_conversions=c.conversions,
                rate=t.conversions / t.visitors,
                control_rate=c.conversions / c.visitors,
                share_of_arm=t.visitors / total_arm if total_arm else 0.0,
                share_of_control=c.visitors / total_control if total_control else 0.0,
                lift=r.lift,
                lift_low=r.lift_low,
                lift_high=r.lift_high,
                p_value=r.p_value,
                srm_p_value=srm.p_value,
                small=small,
                zero_cell_correction=r.zero_cell_correction,
            )
        )
    return rows


def _effect_test(dim: str, arm: str, rows: list[SegmentRow], s: Settings) -> SegmentEffectTest:
    mine = [r for r in rows if r.arm == arm]
    used = [r for r in mine if not r.small and r.lift is not None]
    excluded = [r.segment for r in mine if r not in used]
    if len(used) < 2:
        return SegmentEffectTest(
            dim,
            arm,
            [r.segment for r in used],
            excluded,
            None,
            None,
            None,
            None,
            None,
            None,
            False,
            "too few segments with enough conversions to test whether the effect differs",
        )
    estimates = [log_risk_ratio(r.conversions, r.visitors, r.control_conversions, r.control_visitors) for r in used]
    y = [e[0] for e in estimates]
    v = [e[1] for e in estimates]
    het = heterogeneity(y, v)
    z = p_int = None
    if len(used) == 2:
        inter = interaction_test(y[0], math.sqrt(v[0]), y[1], math.sqrt(v[1]))
        z, p_int = inter.z, inter.p_value
    p_test = p_int if p_int is not None else het.p_value
    differs = p_test is not None and p_test < s.rules.alpha
    names = ", ".join(r.segment for r in used)
    if differs:
        test = f"interaction p {p_int:.3g}" if p_int is not None else f"Q {het.q:.2f}, df {het.df}, p {het.p_value:.3g}"
        statement = f"the effect differs by {dim} ({test}; I² {het.i_squared:.0%}) across {names}"
    else:
        test = f"interaction p {p_int:.3g}" if p_int is not None else f"Q p {het.p_value:.3g}"
        statement = (
            f"the {dim} segments ({names}) are consistent with one common effect ({test}; I² {het.i_squared:.0%}), "
            "whatever the separate p-values say"
        )
    return SegmentEffectTest(
        dim,
        arm,
        [r.segment for r in used],
        excluded,
        het.q,
        het.df,
        het.p_value,
        het.i_squared,
        z,
        p_int,
        differs,
        statement,
    )


def _mix_check(record: Record, dim: str, arm: str, s: Settings) -> MixCheck:
    control = record.control_arm().name
    cells = [(v, c[arm], c[control]) for v, c in record.segments[dim].items() if arm in c and control in c]
    strata = [(t.conversions, t.visitors, c.conversions, c.visitors) for _, t, c in cells if t.visitors and c.visitors]
    x_t = sum(t.conversions for _, t, _ in cells)
    n_t = sum(t.visitors for _, t, _ in cells)
    x_c = sum(c.conversions for _, _, c in cells)
    n_c = sum(c.visitors for _, _, c in cells)
    if not strata or n_t == 0 or n_c == 0:
        return MixCheck(dim, arm, None, None, None, None, None, False, False, None)
    pooled = compare_rates(x_t, n_t, x_c, n_c)
    mh = mantel_haenszel_rr(strata)
    mix_p = None
    if len(cells) >= 2:
        table = [[t.visitors for _, t, _ in cells], [c.visitors for _, _, c in cells]]
        mix_p = contingency_p(table)
    lifts = [compare_rates(*st).lift for st in strata]
    signs = {math.copysign(1, lift) for lift in lifts if lift}
    reversal = bool(
        pooled.lift is not None and pooled.lift != 0 and len(signs) == 1 and math.copysign(1, pooled.lift) not in signs
    )
    moves = False
    if mh is not None and pooled.log_rr is not None and pooled.log_rr_se:
        moves = abs(pooled.log_rr - mh.log_rr) > 0.5 * pooled.log_rr_se and (mix_p is not None and mix_p < 0.05)
    warning = None
    if reversal:
        warning = (
            f"Simpson's paradox: the pooled lift ({pooled.lift:+.1%}) points the other way from every {dim} segment; "
            f"read the mix-adjusted lift ({mh.lift:+.1%})"
            if mh
            else "Simpson's paradox: pooled and segment lifts disagree"
        )
    elif moves and mh is not None:
        warning = (
            f"the {dim} mix differs between {arm} and control (p {mix_p:.2g}) and moves the pooled lift "
            f"({pooled.lift:+.1%}) away from the mix-adjusted one ({mh.lift:+.1%})"
        )
    return MixCheck(
        dim,
        arm,
        pooled.lift,
        mh.lift if mh else None,
        mh.lift_low if mh else None,
        mh.lift_high if mh else None,
        mix_p,
        reversal,
        moves,
        warning,
    )


def _adjust(rows: list[SegmentRow], adjust: Adjustment) -> None:
    if not rows:
        return
    raw = [r.p_value for r in rows]
    adjusted = benjamini_hochberg(raw) if adjust == "bh" else holm(raw)
    for row, p in zip(rows, adjusted, strict=True):
        row.p_adjusted = float(p)
