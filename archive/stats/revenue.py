"""Revenue per visitor: Welch and delta-method intervals from sums of squares, and, with order-level data,
a Poisson bootstrap, a capped estimate and a check of how much a few large orders drive the difference."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import special


@dataclass(frozen=True)
class MeanSummary:
    """Per-visitor revenue of one arm, from its count, sum and sum of squares."""

    n: int
    total: float
    sum_of_squares: float

    @property
    def mean(self) -> float:
        return self.total / self.n

    @property
    def variance(self) -> float:
        if self.n < 2:
            raise ValueError("a variance needs at least two visitors")
        return max(0.0, (self.sum_of_squares - self.n * self.mean**2) / (self.n - 1))

    @classmethod
    def of(cls, values: np.ndarray, n: int | None = None) -> MeanSummary:
        """From per-visitor values; ``n`` larger than ``len(values)`` adds visitors with 0 revenue."""
        count = len(values) if n is None else n
        return cls(count, float(values.sum()), float(np.square(values).sum()))


@dataclass(frozen=True)
class MeanComparison:
    difference: float
    difference_low: float
    difference_high: float
    df: float
    p_value: float
    lift: float | None
    lift_low: float | None
    lift_high: float | None
    confidence: float


def welch(treatment: MeanSummary, control: MeanSummary, confidence: float = 0.95) -> MeanComparison:
    """Welch's t interval of the difference of means and a delta-method interval of the relative difference
    (Var(m_t)/m_c^2 + m_t^2 Var(m_c)/m_c^4, independent arms)."""
    v_t = treatment.variance / treatment.n
    v_c = control.variance / control.n
    se = math.sqrt(v_t + v_c)
    diff = treatment.mean - control.mean
    if se == 0:
        df, p, half = math.inf, (1.0 if diff == 0 else 0.0), 0.0
    else:
        df = (v_t + v_c) ** 2 / (v_t**2 / (treatment.n - 1) + v_c**2 / (control.n - 1))
        t_crit = float(special.stdtrit(df, 0.5 + confidence / 2))
        p = float(2 * special.stdtr(df, -abs(diff / se)))
        half = t_crit * se
    lift = low = high = None
    if control.mean > 0:
        z = float(special.ndtri(0.5 + confidence / 2))
        lift = treatment.mean / control.mean - 1
        ratio = treatment.mean / control.mean  # delta method, written so that tiny means cannot underflow
        se_lift = math.sqrt(v_t + ratio**2 * v_c) / control.mean
        low, high = lift - z * se_lift, lift + z * se_lift
    return MeanComparison(diff, diff - half, diff + half, df, p, lift, low, high, confidence)


def per_visitor_values(order_values: np.ndarray, visitor_ids: np.ndarray | None) -> np.ndarray:
    """Revenue of each buying visitor: orders summed by visitor id, or each order on its own without ids."""
    if visitor_ids is None:
        return np.asarray(order_values, dtype=float)
    _, inverse = np.unique(visitor_ids, return_inverse=True)
    return np.bincount(inverse, weights=order_values).astype(float)


@dataclass(frozen=True)
class BootstrapInterval:
    difference_low: float
    difference_high: float
    lift_low: float | None
    lift_high: float | None
    replicates: int
    seed: int


_POISSON_BITS = 16


def _poisson_one_table() -> np.ndarray:
    """Inverse-CDF lookup: a uniform 16-bit integer -> a Poisson(1) draw (tail beyond 1 - 2^-16 folded in)."""
    pmf = np.array([math.exp(-1) / math.factorial(k) for k in range(16)])
    thresholds = np.cumsum(pmf) * 2**_POISSON_BITS
    return np.searchsorted(thresholds, np.arange(2**_POISSON_BITS), side="right").astype(np.float32)


_POISSON_ONE = _poisson_one_table()


def bootstrap_means(values: np.ndarray, n: int, replicates: int, rng: np.random.Generator) -> np.ndarray:
    """Poisson-bootstrap replicates of the mean revenue per visitor of one arm.

    Each buyer gets a Poisson(1) weight; the ``n - len(values)`` visitors without revenue together get a
    Poisson(n - buyers) weight, which is the sum of their Poisson(1) weights."""
    values = np.asarray(values, dtype=np.float32)
    totals = np.zeros(replicates)
    counts = np.zeros(replicates)
    rows = max(1, 2_000_000 // max(1, len(values)))
    for start in range(0, replicates, rows):
        stop = min(replicates, start + rows)
        draws = rng.integers(0, 2**_POISSON_BITS, size=(stop - start, len(values)), dtype=np.uint16)
        weights = _POISSON_ONE[draws]
        totals[start:stop] = (weights @ values).astype(np.float64)
        counts[start:stop] = weights.sum(axis=1, dtype=np.float64)
    counts += rng.poisson(max(0, n - len(values)), size=replicates)
    return totals / np.maximum(counts, 1)


def bootstrap_interval(
    means_t: np.ndarray, means_c: np.ndarray, confidence: float = 0.95, seed: int = 0
) -> BootstrapInterval:
    """Percentile intervals of the RPV difference and relative lift from paired-up replicate means."""
    tail = (1 - confidence) / 2 * 100
    d_low, d_high = np.percentile(means_t - means_c, [tail, 100 - tail])
    lift_low = lift_high = None
    if np.all(means_c > 0):
        lift_low, lift_high = (float(v) for v in np.percentile(means_t / means_c - 1, [tail, 100 - tail]))
    return BootstrapInterval(float(d_low), float(d_high), lift_low, lift_high, len(means_t), seed)


def poisson_bootstrap(
    buyers_t: np.ndarray,
    n_t: int,
    buyers_c: np.ndarray,
    n_c: int,
    replicates: int = 1000,
    confidence: float = 0.95,
    seed: int = 0,
) -> BootstrapInterval:
    """Percentile interval of the RPV difference and lift of two arms (see :func:`bootstrap_means`)."""
    rng = np.random.default_rng(seed)
    m_t = bootstrap_means(buyers_t, n_t, replicates, rng)
    m_c = bootstrap_means(buyers_c, n_c, replicates, rng)
    return bootstrap_interval(m_t, m_c, confidence, seed)


@dataclass(frozen=True)
class ExtremeOrders:
    """How much the largest orders drive the RPV difference between a treatment and the control."""

    cap: float
    capped_difference: float
    top_share_of_difference: float | None
    difference_without_top: float
    sign_survives: bool


def extreme_order_check(
    orders_t: np.ndarray, n_t: int, orders_c: np.ndarray, n_c: int, cap: float, top_fraction: float = 0.01
) -> ExtremeOrders:
    """``cap``: order value at the capping percentile of all arms' orders. The top-orders share compares the
    difference with and without the orders above that cap; the sign check drops each arm's own largest
    ``top_fraction`` of orders and asks whether the difference keeps its sign."""
    diff = orders_t.sum() / n_t - orders_c.sum() / n_c
    capped = np.minimum(orders_t, cap).sum() / n_t - np.minimum(orders_c, cap).sum() / n_c
    without_big = orders_t[orders_t <= cap].sum() / n_t - orders_c[orders_c <= cap].sum() / n_c
    share = None if diff == 0 else float((diff - without_big) / diff)

    def drop_top(values: np.ndarray) -> np.ndarray:
        k = int(math.ceil(top_fraction * len(values)))
        return np.sort(values)[: len(values) - k] if k else values

    trimmed = drop_top(orders_t).sum() / n_t - drop_top(orders_c).sum() / n_c
    survives = bool(np.sign(trimmed) == np.sign(diff)) if diff != 0 else trimmed == 0
    return ExtremeOrders(float(cap), float(capped), share, float(trimmed), survives)
