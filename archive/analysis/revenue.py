"""Revenue per visitor of each treatment against control: Welch/delta from sums of squares, or the
orders file (Poisson bootstrap, capped revenue, extreme-order check)."""

from __future__ import annotations

from typing import Any

import numpy as np

from archive.analysis.results import RevenueResult, Settings, known
from archive.records.model import Arm
from archive.records.orders import Orders
from archive.stats.revenue import (
    MeanComparison,
    MeanSummary,
    bootstrap_interval,
    bootstrap_means,
    extreme_order_check,
    per_visitor_values,
    welch,
)


def revenue_results(
    control: Arm, treatments: list[Arm], orders: Orders | None, s: Settings
) -> dict[str, RevenueResult]:
    out: dict[str, RevenueResult] = {}
    if orders is not None:
        return _revenue_from_orders(control, treatments, orders, s)
    for t in treatments:
        if t.revenue is None or control.revenue is None:
            out[t.name] = RevenueResult(
                "missing", None, None, None, note="revenue not recorded for this arm or the control"
            )
            continue
        rpv_t, rpv_c = t.revenue / known(t.visitors), control.revenue / known(control.visitors)
        if (
            t.revenue_sum_of_squares is not None
            and control.revenue_sum_of_squares is not None
            and min(known(t.visitors), known(control.visitors)) > 1
        ):
            w = welch(
                MeanSummary(known(t.visitors), t.revenue, t.revenue_sum_of_squares),
                MeanSummary(known(control.visitors), control.revenue, control.revenue_sum_of_squares),
                s.confidence,
            )
            out[t.name] = _welch_result(
                "sum-of-squares",
                rpv_c,
                rpv_t,
                w,
                note="Welch interval of the RPV difference; delta-method interval of its relative lift",
            )
        else:
            out[t.name] = RevenueResult(
                "point-estimates-only",
                rpv_c,
                rpv_t,
                rpv_t - rpv_c,
                lift=rpv_t / rpv_c - 1 if rpv_c else None,
                note="point estimates only: without sums of squares or an orders file the noise of revenue is unknown",
            )
    return out


def _welch_result(method: str, rpv_c: float, rpv_t: float, w: MeanComparison, **extra: Any) -> RevenueResult:
    return RevenueResult(
        method,  # type: ignore[arg-type]
        rpv_c,
        rpv_t,
        w.difference,
        w.difference_low,
        w.difference_high,
        w.lift,
        w.lift_low,
        w.lift_high,
        w.p_value,
        **extra,
    )


def _revenue_from_orders(control: Arm, treatments: list[Arm], orders: Orders, s: Settings) -> dict[str, RevenueResult]:
    rng = np.random.default_rng(s.seed)
    by_visitor = orders.id_column == "visitor_id"
    values = {
        name: per_visitor_values(np.asarray(v, float), np.asarray(orders.ids[name]) if by_visitor else None)
        for name, v in orders.values.items()
    }
    raw = {name: np.asarray(v, float) for name, v in orders.values.items()}
    everything = (
        np.concatenate([v for v in raw.values() if len(v)]) if any(len(v) for v in raw.values()) else np.zeros(1)
    )
    cap = float(np.percentile(everything, s.cap_percentile))
    arms = [control, *treatments]
    boot = {a.name: bootstrap_means(values[a.name], known(a.visitors), s.bootstrap_replicates, rng) for a in arms}
    note = "per-visitor revenue from the orders file" + ("" if by_visitor else " (each order counted as its own buyer)")
    out = {}
    c_vals, n_c = values[control.name], known(control.visitors)
    for t in treatments:
        t_vals, n_t = values[t.name], known(t.visitors)
        w = welch(MeanSummary.of(t_vals, n_t), MeanSummary.of(c_vals, n_c), s.confidence)
        capped_w = welch(
            MeanSummary.of(np.minimum(t_vals, cap), n_t), MeanSummary.of(np.minimum(c_vals, cap), n_c), s.confidence
        )
        extreme = extreme_order_check(raw[t.name], n_t, raw[control.name], n_c, cap, s.top_fraction)
        out[t.name] = _welch_result(
            "orders-file",
            float(c_vals.sum() / n_c),
            float(t_vals.sum() / n_t),
            w,
            bootstrap=bootstrap_interval(boot[t.name], boot[control.name], s.confidence, s.seed),
            capped_rpv_control=float(np.minimum(c_vals, cap).sum() / n_c),
            capped_rpv_arm=float(np.minimum(t_vals, cap).sum() / n_t),
            capped_difference=capped_w.difference,
            capped_difference_low=capped_w.difference_low,
            capped_difference_high=capped_w.difference_high,
            extreme_orders=extreme,
            note=f"{note}; orders capped at {cap:.2f} (the {s.cap_percentile:g}th percentile of all orders)",
        )
    return out
