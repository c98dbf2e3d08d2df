"""Sample ratio mismatch: does the observed split of visitors fit the planned one? (chi-square goodness of fit)"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import special


@dataclass(frozen=True)
class SampleRatio:
    chi_square: float
    df: int
    p_value: float
    expected: tuple[float, ...]
    observed_shares: tuple[float, ...]
    planned_shares: tuple[float, ...]


def sample_ratio_test(visitors: Sequence[int], planned_weights: Sequence[float]) -> SampleRatio:
    """Pearson's chi-square of the visitor counts against the planned shares (weights are normalised)."""
    observed = np.asarray(visitors, dtype=float)
    weights = np.asarray(planned_weights, dtype=float)
    if len(observed) != len(weights) or len(observed) < 2:
        raise ValueError("needs one planned weight per arm and at least two arms")
    if np.any(weights <= 0) or np.any(observed < 0):
        raise ValueError("weights must be > 0 and visitor counts >= 0")
    total = observed.sum()
    if total <= 0:
        raise ValueError("no visitors")
    shares = weights / weights.sum()
    expected = total * shares
    # Pearson's statistic written out (scipy.stats.chisquare gives the same; its wrapper costs ~1 ms a call)
    statistic = float(np.sum((observed - expected) ** 2 / expected))
    df = len(observed) - 1
    return SampleRatio(
        statistic,
        df,
        float(special.chdtrc(df, statistic)),
        tuple(float(e) for e in expected),
        tuple(float(o) for o in observed / total),
        tuple(float(s) for s in shares),
    )


def contingency_p(table: list[list[int]] | list[list[float]]) -> float:
    """p-value of Pearson's chi-square test of independence of a contingency table, without continuity correction
    (as ``scipy.stats.chi2_contingency(table, correction=False)``); expected counts from the margins."""
    observed = np.asarray(table, dtype=float)
    if observed.ndim != 2 or min(observed.shape) < 2:
        raise ValueError("a contingency table needs at least two rows and two columns")
    total = observed.sum()
    expected = np.outer(observed.sum(axis=1), observed.sum(axis=0)) / total
    if np.any(expected == 0):
        raise ValueError("a row or column of the table is all zero")
    chi_square = float(np.sum((observed - expected) ** 2 / expected))
    df = (observed.shape[0] - 1) * (observed.shape[1] - 1)
    return float(special.chdtrc(df, chi_square))
