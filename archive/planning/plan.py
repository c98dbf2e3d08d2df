"""Planning the next test honestly: sample size, duration in whole weeks, and the odds history gives it.

* Visitors per arm: the two-proportion formula (:mod:`archive.stats.power`) at the baseline rate and the smallest
  relative lift that matters, with the per-comparison alpha corrected for several treatments (Bonferroni by
  default; Dunnett's many-to-one critical value as an option), times 1 - rho^2 for a pre-period covariate
  (CUPED, Deng, Xu, Kohavi & Walker 2013).
* Days = total visitors / daily visitors, rounded up to whole weeks (common practice: cover weekly cycles).
* With a history prior (:mod:`archive.planning.priors`): the assurance, P(significant win and true lift > 0) averaged
  over the prior (O'Hagan, Stevens & Campbell 2005), never above its ceiling P(true lift > 0); P(any
  significant win), false ones included; the exaggeration expected of a winner's observed lift at the power the
  test has for the lift the prior expects (Gelman & Carlin 2014); the false positive risk implied by the
  theme's success rate (Kohavi, Deng & Vermeer 2022); and a warning when the hoped-for lift lies above the
  theme's prediction interval.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Literal

import numpy as np
from scipy import optimize, stats

from archive.planning.priors import LiftPrior
from archive.stats.power import visitors_per_arm

Correction = Literal["bonferroni", "dunnett"]
_Z_NODES, _Z_WEIGHTS = np.polynomial.hermite_e.hermegauss(80)  # Gauss-Hermite (probabilists') for N(0, 1)


def dunnett_critical(treatments: int, alpha: float = 0.05, control_share: float = 0.5) -> float:
    """Two-sided critical value c with P(max_i |Z_i| < c) = 1 - alpha for ``treatments`` z-statistics that share
    a control; with equal treatment arms the correlation between two of them is n_t / (n_t + n_c)."""
    if treatments < 1:
        raise ValueError("at least one treatment")
    if treatments == 1:
        return float(stats.norm.ppf(1 - alpha / 2))
    n_t = (1 - control_share) / treatments
    rho = n_t / (n_t + control_share)
    cov = np.full((treatments, treatments), rho)
    np.fill_diagonal(cov, 1.0)
    mvn = stats.multivariate_normal(mean=np.zeros(treatments), cov=cov)

    def coverage(c: float) -> float:
        return float(mvn.cdf(np.full(treatments, c), lower_limit=np.full(treatments, -c))) - (1 - alpha)

    return float(optimize.brentq(coverage, 1.0, 6.0, xtol=1e-7))


def exaggeration(power: float, alpha: float = 0.05) -> float:
    """Gelman & Carlin (2014) type M error of winners: E[estimate | significant and positive] / true effect, for a
    normal estimate whose two-sided design power at the true effect is ``power``."""
    if not alpha < power < 1:
        raise ValueError("power must lie between alpha and 1")
    z = float(stats.norm.ppf(1 - alpha / 2))

    def excess_power(d: float) -> float:
        return float(stats.norm.sf(z - d) + stats.norm.cdf(-z - d)) - power

    delta = float(optimize.brentq(excess_power, 0.0, 40.0, xtol=1e-12))  # true effect in standard errors
    c = z - delta
    return 1 + float(stats.norm.pdf(c) / (delta * stats.norm.sf(c)))


@dataclass
class TestPlan:
    baseline: float
    minimum_lift: float
    alpha: float
    power: float
    arms: int
    correction: str
    alpha_per_comparison: float
    critical_z: float
    variance_factor: float
    visitors_per_arm: int
    visitors_control: int
    visitors_total: int
    daily_visitors: float | None
    days: int | None
    weeks: int | None
    prior: str | None = None
    assurance: float | None = None
    assurance_ceiling: float | None = None
    any_significant_win: float | None = None
    power_at_expected_lift: float | None = None
    exaggeration_at_expected_lift: float | None = None
    theme_success_rate: float | None = None
    false_positive_risk: float | None = None
    false_win_rate: float | None = None  # P(winner | no true effect) per comparison under the analysis' ship rule
    warnings: list[str] = field(default_factory=list)
    assumptions: list[str] = field(default_factory=list)


def _log_rr_se(baseline: float, log_lift: np.ndarray, n_t: float, n_c: float) -> np.ndarray:
    p_t = np.clip(baseline * np.exp(log_lift), 1e-12, 1 - 1e-12)
    return np.sqrt((1 - p_t) / (n_t * p_t) + (1 - baseline) / (n_c * baseline))


def win_probability(
    baseline: float, log_lift: np.ndarray, n_t: float, n_c: float, z: float, factor: float
) -> np.ndarray:
    """P(z-statistic of the log risk ratio > z) at true log lifts, with n_t / n_c visitors."""
    se = _log_rr_se(baseline, log_lift, n_t, n_c) * math.sqrt(factor)
    return stats.norm.sf(z - log_lift / se)


def assurance(
    baseline: float, prior: LiftPrior, n_t: float, n_c: float, z: float, factor: float = 1.0
) -> tuple[float, float, float]:
    """(P(significant win and true lift > 0), its ceiling P(true lift > 0), P(any significant win)).

    The first integrates the prior density times the win probability over positive lifts only (Gauss-Legendre on
    [max(0, mu - 10 sd), mu + 10 sd]), so it can never exceed the ceiling; the last averages the win probability
    over the whole prior (Gauss-Hermite), false wins from negative true lifts included."""
    low, high = max(0.0, prior.mean - 10 * prior.sd), prior.mean + 10 * prior.sd
    real = 0.0
    if high > 0:
        nodes, w = np.polynomial.legendre.leggauss(400)
        t = low + (high - low) / 2 * (nodes + 1)
        density = stats.norm.pdf(t, prior.mean, prior.sd)
        real = float(np.sum(w * (high - low) / 2 * density * win_probability(baseline, t, n_t, n_c, z, factor)))
    theta = prior.mean + prior.sd * _Z_NODES
    any_win = float(np.sum(_Z_WEIGHTS * win_probability(baseline, theta, n_t, n_c, z, factor)) / _Z_WEIGHTS.sum())
    return min(real, prior.prob_above(0.0)), prior.prob_above(0.0), any_win


def plan_test(
    baseline: float,
    minimum_lift: float,
    alpha: float = 0.05,
    power: float = 0.8,
    arms: int = 2,
    split: list[float] | None = None,
    daily_visitors: float | None = None,
    rho: float = 0.0,
    correction: Correction = "bonferroni",
    prior: LiftPrior | None = None,
    theme_win_rate: float | None = None,
    theme_false_win_rate: float | None = None,
) -> TestPlan:
    if arms < 2:
        raise ValueError("a test needs at least two arms (control and one change)")
    if not 0 < baseline < 1 or minimum_lift <= 0 or baseline * (1 + minimum_lift) >= 1:
        raise ValueError("baseline must lie in (0, 1) and baseline x (1 + minimum lift) below 1")
    if not 0 <= rho < 1:
        raise ValueError("rho (correlation with the pre-period covariate) must lie in [0, 1)")
    weights = np.asarray(split if split is not None else [1.0] * arms, float)
    if len(weights) != arms or np.any(weights <= 0):
        raise ValueError("split needs one positive weight per arm (control first)")
    shares = weights / weights.sum()
    if not np.allclose(shares[1:], shares[1]):
        raise ValueError("treatment arms must get equal shares (the control may differ)")
    treatments = arms - 1
    if correction == "bonferroni":
        per_alpha = alpha / treatments
        z = float(stats.norm.ppf(1 - per_alpha / 2))
    elif correction == "dunnett":
        z = dunnett_critical(treatments, alpha, float(shares[0]))
        per_alpha = float(2 * stats.norm.sf(z))
    else:
        raise ValueError("correction is bonferroni or dunnett")
    ratio = float(shares[0] / shares[1])  # control visitors per treatment visitor
    factor = 1 - rho**2
    n_t = visitors_per_arm(baseline * (1 + minimum_lift), baseline, alpha=per_alpha, power=power, ratio=ratio)
    n_t = math.ceil(n_t * factor)
    n_c = math.ceil(n_t * ratio)
    total = n_t * treatments + n_c
    days = weeks = None
    if daily_visitors:
        if daily_visitors <= 0:
            raise ValueError("daily visitors must be > 0")
        weeks = math.ceil(total / daily_visitors / 7)
        days = weeks * 7
    result = TestPlan(
        baseline,
        minimum_lift,
        alpha,
        power,
        arms,
        correction,
        per_alpha,
        z,
        factor,
        n_t,
        n_c,
        total,
        daily_visitors,
        days,
        weeks,
    )
    result.assumptions = [
        "Visitors are independent and randomised by visitor; the test runs to its planned size, analysed once.",
        f"Two-sided alpha {alpha:g} over {treatments} comparison(s) with control ({correction}); "
        f"normal approximation of the two-proportion test.",
        "Duration rounded up to whole weeks (common practice).",
    ]
    if rho:
        result.assumptions.append(f"Variance reduced by the factor 1 - rho^2 = {factor:.3f} (CUPED).")
    if prior is not None:
        real, ceiling, any_win = assurance(baseline, prior, n_t, n_c, z, factor)
        result.prior = prior.label()
        result.assurance, result.assurance_ceiling, result.any_significant_win = real, ceiling, any_win
        if prior.mean > 0:
            p_exp = float(win_probability(baseline, np.array([prior.mean]), n_t, n_c, z, factor)[0])
            result.power_at_expected_lift = p_exp
            if p_exp > per_alpha:
                result.exaggeration_at_expected_lift = exaggeration(min(p_exp, 0.999999), per_alpha)
        if prior.warning:
            result.warnings.append(prior.warning)
        high = prior.interval()[1]
        if minimum_lift > high:
            result.warnings.append(
                f"tests of this kind rarely move conversion by that much here: the hoped-for +{minimum_lift:.1%} "
                f"lies above the 95% prediction interval (up to {high:+.1%})"
            )
        result.assumptions.append(f"Prior: {prior.label()}. {prior.hyperprior}")
    if theme_win_rate is not None:
        from archive.analysis.verdict import VerdictRules, null_ship_rates
        from archive.pooling.groups import false_positive_risk, fpr_from_prior

        # false-win rates of the ship rule (Holm, positive side): for the theme's past comparisons (two-arm tests
        # unless told) and for a comparison of this plan
        past = theme_false_win_rate
        if past is None:
            past = null_ship_rates(1, alpha, VerdictRules())[1]
        new = null_ship_rates(treatments, alpha, VerdictRules())[1]
        implied = false_positive_risk(theme_win_rate, alpha, power, past)
        if implied is not None:
            result.theme_success_rate, _ = implied
            pi = implied[0]
            result.false_positive_risk = fpr_from_prior(pi, alpha, power, new) if pi > 0 else 1.0
            result.false_win_rate = new
            result.assumptions.append(
                f"False positive risk: the analysis' ship rule calls a winner in {new:.2%} of comparisons without "
                f"a true effect here (Holm at alpha {alpha:g} over {treatments} comparison(s), positive side)."
            )
    return result
