"""Comparing two conversion rates: difference, relative lift (log risk ratio, Katz), two-proportion z-test."""

from __future__ import annotations

import math
from dataclasses import dataclass

from scipy import special


@dataclass(frozen=True)
class RateComparison:
    """Treatment against control. Lifts are fractions (0.05 = +5%)."""

    rate_control: float
    rate_treatment: float
    difference: float
    difference_low: float
    difference_high: float
    lift: float | None
    lift_low: float | None
    lift_high: float | None
    log_rr: float | None
    log_rr_se: float | None
    z: float | None
    p_value: float
    zero_cell_correction: bool
    confidence: float


def _check(conversions: int, visitors: int, name: str) -> None:
    if visitors <= 0:
        raise ValueError(f"{name}: needs at least one visitor (got {visitors})")
    if conversions < 0 or conversions > visitors:
        raise ValueError(f"{name}: conversions must lie between 0 and visitors ({conversions} of {visitors})")


def log_risk_ratio(x_t: int, n_t: int, x_c: int, n_c: int) -> tuple[float, float, bool]:
    """log(p_t / p_c) and its variance 1/x_t - 1/n_t + 1/x_c - 1/n_c (Katz et al. 1978; metafor escalc "RR").

    With a zero cell, 1/2 is added to every cell of the 2x2 table (the usual correction); the third value says
    whether that happened.
    """
    corrected = x_t == 0 or x_c == 0 or x_t == n_t or x_c == n_c
    if corrected:
        a, n1, c, n2 = x_t + 0.5, n_t + 1.0, x_c + 0.5, n_c + 1.0
    else:
        a, n1, c, n2 = float(x_t), float(n_t), float(x_c), float(n_c)
    return math.log((a / n1) / (c / n2)), 1 / a - 1 / n1 + 1 / c - 1 / n2, corrected


def compare_rates(x_t: int, n_t: int, x_c: int, n_c: int, confidence: float = 0.95) -> RateComparison:
    """Rates, Wald interval of the difference, Katz log-RR interval of the relative lift, pooled z-test."""
    _check(x_t, n_t, "treatment")
    _check(x_c, n_c, "control")
    if not 0 < confidence < 1:
        raise ValueError("confidence must lie strictly between 0 and 1")
    z_crit = float(special.ndtri(0.5 + confidence / 2))
    p_t, p_c = x_t / n_t, x_c / n_c
    diff = p_t - p_c
    se_diff = math.sqrt(p_t * (1 - p_t) / n_t + p_c * (1 - p_c) / n_c)
    pooled = (x_t + x_c) / (n_t + n_c)
    se_pooled = math.sqrt(pooled * (1 - pooled) * (1 / n_t + 1 / n_c))
    z: float | None = None
    if se_pooled > 0:
        z = diff / se_pooled
        p_value = float(2 * special.ndtr(-abs(z)))
    else:  # nobody or everybody converted in both arms: the data carry no evidence of a difference
        p_value = 1.0
    if x_t == 0 and x_c == 0 or x_t == n_t and x_c == n_c:
        lift = low = high = log_rr = se_log = None
        corrected = True
    else:
        log_rr, var, corrected = log_risk_ratio(x_t, n_t, x_c, n_c)
        se_log = math.sqrt(var)
        lift = math.exp(log_rr) - 1 if not corrected else p_t / p_c - 1 if p_c > 0 else None
        low = math.exp(log_rr - z_crit * se_log) - 1
        high = math.exp(log_rr + z_crit * se_log) - 1
        if corrected and lift is not None:
            # the 0.5-corrected interval is centred on the corrected ratio; the observed lift (-100% for no
            # conversions in the treatment) must still lie inside its own interval
            low, high = min(low, lift), max(high, lift)
    return RateComparison(
        rate_control=p_c,
        rate_treatment=p_t,
        difference=diff,
        difference_low=diff - z_crit * se_diff,
        difference_high=diff + z_crit * se_diff,
        lift=lift,
        lift_low=low,
        lift_high=high,
        log_rr=log_rr,
        log_rr_se=se_log,
        z=z,
        p_value=p_value,
        zero_cell_correction=corrected,
        confidence=confidence,
    )


@dataclass(frozen=True)
class Equivalence:
    """Two one-sided tests on the log risk ratio against the margin (-margin, +margin) of relative lift."""

    margin: float
    p_value: float
    equivalent: bool
    alpha: float


def equivalence_test(x_t: int, n_t: int, x_c: int, n_c: int, margin: float, alpha: float = 0.05) -> Equivalence:
    """TOST (Schuirmann 1987) with the Katz log-RR standard error: equivalent when both one-sided tests reject,
    i.e. when the (1 - 2 alpha) interval of the relative lift lies inside (-margin, +margin)."""
    if not 0 < margin < 1:
        raise ValueError("the equivalence margin is a relative lift between 0 and 1 (e.g. 0.05)")
    _check(x_t, n_t, "treatment")
    _check(x_c, n_c, "control")
    if x_t == 0 and x_c == 0 or x_t == n_t and x_c == n_c:
        return Equivalence(margin, 1.0, False, alpha)
    log_rr, var, _ = log_risk_ratio(x_t, n_t, x_c, n_c)
    se = math.sqrt(var)
    p_low = float(special.ndtr(-(log_rr - math.log(1 - margin)) / se))
    p_high = float(special.ndtr((log_rr - math.log(1 + margin)) / se))
    p = max(p_low, p_high)
    return Equivalence(margin, p, p < alpha, alpha)


@dataclass(frozen=True)
class PooledRiskRatio:
    """Mantel-Haenszel risk ratio over strata, with the Greenland & Robins (1985) variance of its log."""

    lift: float
    lift_low: float
    lift_high: float
    log_rr: float
    log_rr_se: float


def mantel_haenszel_rr(strata: list[tuple[int, int, int, int]], confidence: float = 0.95) -> PooledRiskRatio | None:
    """Strata as (x_t, n_t, x_c, n_c). RR_MH = sum(x_t n_c / N) / sum(x_c n_t / N); None when undefined.

    Var(log RR_MH) = sum((n_t n_c (x_t + x_c) - x_t x_c N) / N^2) / (sum(x_t n_c / N) sum(x_c n_t / N))
    (Greenland & Robins 1985, Biometrics 41:55-68; with one stratum it equals the Katz variance)."""
    num = den = var_num = 0.0
    for x_t, n_t, x_c, n_c in strata:
        _check(x_t, n_t, "treatment")
        _check(x_c, n_c, "control")
        total = n_t + n_c
        num += x_t * n_c / total
        den += x_c * n_t / total
        var_num += (n_t * n_c * (x_t + x_c) - x_t * x_c * total) / total**2
    if num <= 0 or den <= 0:
        return None
    log_rr = math.log(num / den)
    se = math.sqrt(var_num / (num * den))
    z = float(special.ndtri(0.5 + confidence / 2))
    return PooledRiskRatio(
        math.exp(log_rr) - 1, math.exp(log_rr - z * se) - 1, math.exp(log_rr + z * se) - 1, log_rr, se
    )
