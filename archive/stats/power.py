"""Sample size and power for comparing two conversion rates (normal approximation).

``visitors_per_arm`` is the Fleiss, Levin & Paik formula for group sizes n and r*n; with ratio 1 and no continuity
correction it is the n that R's ``power.prop.test`` solves for. The continuity correction is Fleiss, Tytun & Ury
(1980).
"""

from __future__ import annotations

import math

from scipy import special


def _check_rates(p1: float, p2: float) -> None:
    for p in (p1, p2):
        if not 0 < p < 1:
            raise ValueError(f"rates must lie strictly between 0 and 1 (got {p})")
    if p1 == p2:
        raise ValueError("the two rates are equal: no sample size detects a zero difference")


def visitors_per_arm(
    p1: float,
    p2: float,
    alpha: float = 0.05,
    power: float = 0.8,
    ratio: float = 1.0,
    continuity: bool = False,
) -> float:
    """Visitors in the first group (the second gets ``ratio`` times as many), two-sided ``alpha``."""
    _check_rates(p1, p2)
    if not 0 < alpha < 1 or not 0 < power < 1 or ratio <= 0:
        raise ValueError("alpha and power lie strictly between 0 and 1; ratio is > 0")
    r = ratio
    delta = abs(p1 - p2)
    p_bar = (p1 + r * p2) / (r + 1)
    z_a = special.ndtri(1 - alpha / 2)
    z_b = special.ndtri(power)
    root = z_a * math.sqrt((r + 1) * p_bar * (1 - p_bar)) + z_b * math.sqrt(r * p1 * (1 - p1) + p2 * (1 - p2))
    n = float(root**2 / (r * delta**2))
    if continuity:
        n = n / 4 * (1 + math.sqrt(1 + 2 * (r + 1) / (n * r * delta))) ** 2
    return n


def power_two_rates(p1: float, p2: float, n: float, alpha: float = 0.05) -> float:
    """Power with n visitors per arm, as R's ``power.prop.test`` computes it (the far tail ignored)."""
    _check_rates(p1, p2)
    p_bar = (p1 + p2) / 2
    z_a = special.ndtri(1 - alpha / 2)
    num = math.sqrt(n) * abs(p1 - p2) - z_a * math.sqrt(2 * p_bar * (1 - p_bar))
    return float(special.ndtr(num / math.sqrt(p1 * (1 - p1) + p2 * (1 - p2))))


def bonferroni_alpha(alpha: float, comparisons: int) -> float:
    """Per-comparison two-sided alpha that keeps the family-wise error at ``alpha`` over ``comparisons``."""
    if comparisons < 1:
        raise ValueError("at least one comparison")
    return alpha / comparisons
