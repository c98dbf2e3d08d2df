"""The comparisons of an archive as effect estimates for pooling.

Every treatment-vs-control comparison becomes one :class:`Effect`: the log risk ratio of conversion with its
variance (1/x_t - 1/n_t + 1/x_c - 1/n_c; with a zero cell, 0.5 added to every cell), and, where the record
allows it, the log ratio of revenue per visitor with its delta-method variance. In a test with several
treatments the comparisons share the control: ``sampling_variance`` is each one's variance against the whole
control and ``shared_variance`` the covariance 1/x_c - 1/n_c of any two of them, which pooling uses (Gleser &
Olkin 2009). ``variance`` keeps the control split evenly across its comparisons (Cochrane Handbook, "studies with
more than two intervention groups"), for the methods that treat comparisons as independent (the meta-regression
on date, Egger's test). Each effect carries the verdict and trust checks of the per-test analysis.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path

from archive.analysis.results import Analysis, CannotAnalyze, Settings
from archive.records.load import LoadedRecord, check_archive
from archive.records.model import Record
from archive.records.orders import Orders
from archive.records.problems import ArchiveInvalid, errors


@dataclass
class Effect:
    record_id: str
    arm: str
    title: str
    themes: list[str]
    page_area: str
    tags: list[str]
    started: dt.date | None
    log_rr: float
    variance: float
    visitors: int
    control_visitors: float  # after splitting a shared control
    control_share: int  # number of comparisons that share this control (1 = not split)
    zero_cell_correction: bool
    verdict: str
    shipped: bool
    trusted: bool
    failed_checks: list[str] = field(default_factory=list)
    rpv_log_ratio: float | None = None
    rpv_variance: float | None = None
    segment: str | None = None  # for segment-level effects: "dimension=value"
    double_zero: bool = False  # no conversions (or only conversions) in both arms: no information on the ratio
    sampling_variance: float | None = None  # of log_rr against the whole control (None: as ``variance``)
    # covariance of log_rr with each other comparison of the same test against the same (whole) control:
    # 1/x_c - 1/n_c (0 for a two-arm test); the pooling model uses it with ``sampling_variance``
    shared_variance: float = 0.0

    @property
    def lift(self) -> float:
        return math.exp(self.log_rr) - 1

    @property
    def se(self) -> float:
        return math.sqrt(self.variance)

    @property
    def year(self) -> str:
        return str(self.started.year) if self.started else "undated"


def log_rr_split(x_t: float, n_t: float, x_c: float, n_c: float) -> tuple[float, float, bool]:
    """log risk ratio and variance for possibly fractional counts (a split control); 0.5 added on a zero cell."""
    corrected = x_t == 0 or x_c == 0 or x_t == n_t or x_c == n_c
    if corrected:
        x_t, n_t, x_c, n_c = x_t + 0.5, n_t + 1.0, x_c + 0.5, n_c + 1.0
    return math.log((x_t / n_t) / (x_c / n_c)), 1 / x_t - 1 / n_t + 1 / x_c - 1 / n_c, corrected


def _rpv(
    revenue_t: float | None, ss_t: float | None, n_t: float, revenue_c: float | None, ss_c: float | None, n_c: float
) -> tuple[float | None, float | None]:
    """log(RPV_t / RPV_c) and its delta-method variance s_t^2/(n_t m_t^2) + s_c^2/(n_c m_c^2)."""
    if None in (revenue_t, ss_t, revenue_c, ss_c) or n_t < 2 or n_c < 2:
        return None, None
    assert revenue_t is not None and ss_t is not None and revenue_c is not None and ss_c is not None
    m_t, m_c = revenue_t / n_t, revenue_c / n_c
    if m_t <= 0 or m_c <= 0:
        return None, None
    var_t = max(0.0, (ss_t - n_t * m_t**2) / (n_t - 1))
    var_c = max(0.0, (ss_c - n_c * m_c**2) / (n_c - 1))
    variance = var_t / (n_t * m_t**2) + var_c / (n_c * m_c**2)
    return (math.log(m_t / m_c), variance) if variance > 0 else (None, None)


def record_effects(record: Record, orders: Orders | None = None, settings: Settings | None = None) -> list[Effect]:
    """The comparisons of one finished test (empty for a test without results)."""
    from archive.analysis import analyze

    try:
        analysis = analyze(record, orders, settings)
    except CannotAnalyze:
        return []
    return record_effects_from(record, analysis)


def record_effects_from(record: Record, analysis: Analysis) -> list[Effect]:
    """The comparisons of a test whose analysis is already at hand."""
    control = record.control_arm()
    treatments = [a for a in record.arms if not a.control]
    m = len(treatments)
    n_c, x_c = (control.visitors or 0) / m, (control.conversions or 0) / m
    failed = [c.name for c in analysis.checks if c.status == "failed"]
    verdicts = {c.arm: c.verdict for c in analysis.comparisons}
    decision = record.decision
    ss_c = control.revenue_sum_of_squares
    out: list[Effect] = []
    terms: list[float] = []
    for t in treatments:
        n_t, x_t = float(t.visitors or 0), float(t.conversions or 0)
        log_rr, var, corrected = log_rr_split(x_t, n_t, x_c, n_c)
        # the estimate's own variance uses the whole control: splitting it is for pooling only
        _, whole_var, whole_corrected = log_rr_split(x_t, n_t, x_c * m, n_c * m)
        terms.append(_control_term(x_c * m, n_c * m, whole_corrected))
        rpv, rpv_var = _rpv(
            t.revenue,
            t.revenue_sum_of_squares,
            n_t,
            None if control.revenue is None else control.revenue / m,
            None if ss_c is None else ss_c / m,
            n_c,
        )
        out.append(
            Effect(
                record_id=record.id,
                arm=t.name,
                title=record.title,
                themes=list(record.themes),
                page_area=record.page_area,
                tags=list(record.tags),
                started=record.started,
                log_rr=log_rr,
                variance=var,
                visitors=int(n_t),
                control_visitors=n_c,
                control_share=m,
                zero_cell_correction=corrected,
                verdict=verdicts[t.name],
                shipped=bool(decision and decision.outcome == "ship" and decision.arm == t.name),
                trusted=not failed,
                failed_checks=failed,
                rpv_log_ratio=rpv,
                rpv_variance=rpv_var,
                double_zero=_double_zero(x_t, n_t, x_c, n_c),
                sampling_variance=whole_var,
            )
        )
    _share_control(out, terms)
    return out


def _control_term(x_c: float, n_c: float, corrected: bool) -> float:
    """The control's part 1/x_c - 1/n_c of a log risk ratio's variance (with 0.5 added where the comparison was)."""
    return 1 / (x_c + 0.5) - 1 / (n_c + 1) if corrected else 1 / x_c - 1 / n_c


def _share_control(effects: list[Effect], terms: list[float]) -> None:
    """Comparisons against one control are correlated: cov(log RR_1, log RR_2) = var(log p_c) = 1/x_c - 1/n_c.
    The smallest control term of the test is used for all (they differ only where 0.5 was added to some)."""
    if len(effects) > 1:
        shared = min(terms)
        for e in effects:
            e.shared_variance = shared


def _double_zero(x_t: float, n_t: float, x_c: float, n_c: float) -> bool:
    return (x_t == 0 and x_c == 0) or (x_t == n_t and x_c == n_c)


def segment_effects(
    record: Record, dimension: str, settings: Settings | None = None, base_effects: list[Effect] | None = None
) -> list[Effect]:
    """One effect per segment value and treatment, from the record's segment counts (control split as above).
    ``base_effects`` are the record's whole-test effects when already at hand."""
    whole = record_effects(record, None, settings) if base_effects is None else base_effects
    base = {e.arm: e for e in whole}
    if not base or dimension not in record.segments:
        return []
    control = record.control_arm().name
    m = len(base)
    out: list[Effect] = []
    for value, cells in record.segments[dimension].items():
        c = cells.get(control)
        if c is None or c.visitors == 0:
            continue
        here: list[Effect] = []
        terms: list[float] = []
        for arm, parent in base.items():
            t = cells.get(arm)
            if t is None or t.visitors == 0:
                continue
            log_rr, var, corrected = log_rr_split(t.conversions, t.visitors, c.conversions / m, c.visitors / m)
            _, whole_var, whole_corrected = log_rr_split(t.conversions, t.visitors, c.conversions, c.visitors)
            terms.append(_control_term(c.conversions, c.visitors, whole_corrected))
            here.append(
                Effect(
                    **{
                        **parent.__dict__,
                        "log_rr": log_rr,
                        "variance": var,
                        "visitors": t.visitors,
                        "control_visitors": c.visitors / m,
                        "zero_cell_correction": corrected,
                        "rpv_log_ratio": None,
                        "rpv_variance": None,
                        "segment": f"{dimension}={value}",
                        "double_zero": _double_zero(t.conversions, t.visitors, c.conversions, c.visitors),
                        "sampling_variance": whole_var,
                        "shared_variance": 0.0,
                    }
                )
            )
        _share_control(here, terms)
        out += here
    return out


def archive_effects(
    records: Iterable[tuple[Record, Orders | None]], settings: Settings | None = None, segment: str | None = None
) -> list[Effect]:
    """Effects of every finished (or stopped-early) test, in record order."""
    out: list[Effect] = []
    for record, orders in records:
        if record.status not in ("finished", "stopped-early"):
            continue
        out += segment_effects(record, segment, settings) if segment else record_effects(record, orders, settings)
    return out


def load_archive_effects(
    records_dir: Path, settings: Settings | None = None, segment: str | None = None
) -> tuple[list[LoadedRecord], list[Effect]]:
    """Check the archive (refusing one with errors) and return its records and their effects."""
    report = check_archive(records_dir)
    failing = errors(report.problems)
    if failing:
        raise ArchiveInvalid(failing)
    effects = archive_effects(((lr.record, lr.orders) for lr in report.records), settings, segment)
    return report.records, effects
