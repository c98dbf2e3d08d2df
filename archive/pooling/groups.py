"""Pooling the archive: which kinds of changes tend to win, by how much, how often, and how sure we are.

``pool(effects, by)`` groups the comparisons (see :mod:`archive.pooling.effects`) and, per group, runs a random-effects
meta-analysis of the log risk ratios, the comparisons of one test correlated through their shared control
(covariance 1/x_c - 1/n_c, the delta-method variance of log p_c; Gleser & Olkin 2009, "Stochastically dependent
effect sizes", in the Handbook of Research Synthesis and Meta-Analysis): REML tau^2 with the
Hartung-Knapp-Sidik-Jonkman interval by default (Cochrane's current guidance; Knapp-Hartung floor max(1, q)),
DerSimonian-Laird shown as the classic comparison;
the prediction interval for the next test of that kind carries tau^2's uncertainty through its confidence
distribution (:func:`archive.stats.meta.cd_prediction_interval`). Groups with fewer than ``MIN_GROUP`` comparisons
are kept and flagged. Win rates get Jeffreys intervals and the posterior of a hierarchical beta-binomial model
across groups (:mod:`archive.stats.beta_binomial`); the programme's false positive risk follows Kohavi & Chen
(2024) with the false-win rate of the ship rule actually used.
"""

from __future__ import annotations

import dataclasses
import math
from collections import defaultdict
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any, cast

import numpy as np
from scipy import special

from archive.analysis.results import json_safe
from archive.analysis.verdict import VerdictRules, null_ship_rates
from archive.pooling.effects import Effect
from archive.stats.beta_binomial import hierarchical_rates
from archive.stats.meta import HKSJ_FLOOR_LABEL, TauMethod, heterogeneity
from archive.stats.meta_groups import GroupPooling, pool_groups

MIN_GROUP = 5  # fewer comparisons than this: shown with a warning (common practice for random-effects pooling)
GROUPINGS = ("theme", "page_area", "theme,page_area", "tag", "year", "segment")


def group_keys(effect: Effect, by: str) -> list[str]:
    """The groups an effect belongs to (a test with two themes counts in both theme groups)."""
    if by == "theme":
        return list(dict.fromkeys(effect.themes))
    if by == "page_area":
        return [effect.page_area]
    if by == "theme,page_area":
        return [f"{t} / {effect.page_area}" for t in dict.fromkeys(effect.themes)]
    if by == "tag":
        return list(dict.fromkeys(effect.tags))
    if by == "year":
        return [effect.year]
    if by == "segment":
        return [effect.segment] if effect.segment else []
    raise ValueError(f"unknown grouping {by!r}; use one of {', '.join(GROUPINGS)}")


@dataclass
class Rate:
    count: int
    total: int
    rate: float | None
    low: float | None  # Jeffreys interval
    high: float | None
    shrunk: float | None = None  # posterior mean under the hierarchical beta-binomial model across groups
    shrunk_low: float | None = None  # its 95% posterior interval
    shrunk_high: float | None = None


def jeffreys(count: int, total: int, level: float = 0.95) -> Rate:
    """Jeffreys interval: quantiles of Beta(x + 1/2, n - x + 1/2) (Brown, Cai & DasGupta 2001), with the usual
    convention of 0 / 1 at the ends."""
    if total == 0:
        return Rate(0, 0, None, None, None)
    tail = (1 - level) / 2
    low = 0.0 if count == 0 else float(special.betaincinv(count + 0.5, total - count + 0.5, tail))
    high = 1.0 if count == total else float(special.betaincinv(count + 0.5, total - count + 0.5, 1 - tail))
    return Rate(count, total, count / total, low, high)


def _betabinom_logpmf(x: np.ndarray, n: np.ndarray, a: float, b: float) -> np.ndarray:
    """log P(x | n, a, b) of the beta-binomial distribution (as scipy.stats.betabinom.logpmf)."""
    log_choose = special.gammaln(n + 1) - special.gammaln(x + 1) - special.gammaln(n - x + 1)
    return log_choose + special.betaln(x + a, n - x + b) - special.betaln(a, b)


def beta_binomial_fit(counts: list[int], totals: list[int]) -> tuple[float, float] | None:
    """Maximum marginal likelihood Beta(a, b) for rates x_g / n_g (empirical Bayes); None if it cannot be fitted."""
    x, n = np.asarray(counts, float), np.asarray(totals, float)
    keep = n > 0
    x, n = x[keep], n[keep]
    if len(x) < 2 or x.sum() == 0 or x.sum() == n.sum():
        return None

    def negative(params: np.ndarray) -> float:
        a, b = np.exp(params)
        return -float(np.sum(_betabinom_logpmf(x, n, a, b)))

    mean = x.sum() / n.sum()
    start = np.log([mean * 10, (1 - mean) * 10])
    from scipy import optimize

    result = optimize.minimize(negative, start, method="Nelder-Mead", options={"xatol": 1e-8, "fatol": 1e-10})
    a, b = np.exp(result.x)
    return (float(a), float(b)) if math.isfinite(a) and math.isfinite(b) else None


@dataclass
class Member:
    record_id: str
    arm: str
    lift: float
    low: float
    high: float
    shrunk_lift: float  # empirical-Bayes posterior mean, shrunk toward the group
    verdict: str
    shipped: bool


@dataclass
class GroupResult:
    key: str
    comparisons: int
    tests: int
    lift: float
    lift_low: float
    lift_high: float
    p_value: float
    log_se_plain: float  # random-effects SE of the log mean without the HKSJ factor
    tau2: float
    tau2_low: float | None
    tau2_high: float | None
    i_squared: float
    q: float
    q_p_value: float | None
    prediction_low: float | None
    prediction_high: float | None
    dl_lift: float
    dl_low: float
    dl_high: float
    dl_tau2: float
    wins: Rate
    shipped: Rate
    warning: str | None
    members: list[Member] = field(default_factory=list)


@dataclass
class Programme:
    comparisons: int
    win_rate: Rate
    alpha: float
    assumed_power: float
    true_success_rate: float | None  # Kohavi & Chen (2024): (w - f) / (power - f), f the rule's false-win rate
    false_positive_risk: float | None  # f (1 - pi) / w
    shipped: int
    shipped_mean_observed_lift: float | None
    shipped_mean_shrunk_lift: float | None
    overstatement: float | None  # observed / shrunk, mean over shipped comparisons
    lee_shen_bias: float | None  # expected excess of the summed shipped log-lifts (Lee & Shen 2018)
    summed_shipped_log_lift: float | None
    false_win_rate: float | None = None  # P(winner | no true effect) per comparison under the ship rule used
    false_win_rate_source: str = ""


@dataclass
class BetweenGroups:
    q: float
    df: int
    p_value: float | None


@dataclass
class MetaRegression:
    moderator: str
    slope: float
    se: float
    p_value: float
    permutation_p_value: float | None
    permutations: int
    tau2_residual: float
    k: int


@dataclass
class Egger:
    intercept: float
    se: float
    p_value: float
    k: int
    warning: str | None


@dataclass
class PoolResult:
    by: str
    method: str
    interval: str
    prediction_convention: str
    ranking: str
    groups: list[GroupResult]
    excluded: list[str]
    split_controls: list[str]  # tests whose comparisons share one control (pooled with their covariance)
    programme: Programme
    between_groups: BetweenGroups | None
    meta_regression: MetaRegression | None
    egger: Egger | None
    assumptions: list[str]
    double_zero: list[str] = field(default_factory=list)  # comparisons left out: no conversions in either arm
    win_rates: str = ""  # the win-rate model and what it says about differences between groups, in words

    def to_dict(self) -> dict[str, Any]:
        return json_safe(dataclasses.asdict(self))  # type: ignore[no-any-return]


def pool(
    effects: list[Effect],
    by: str = "theme",
    method: str = "REML",
    hksj: bool = True,
    include_untrusted: bool = False,
    alpha: float = 0.05,
    assumed_power: float = 0.8,
    keys: Callable[[Effect], list[str]] | None = None,
    permutations: int = 1000,
    seed: int = 0,
) -> PoolResult:
    """Pool effects by group. ``keys`` overrides the grouping (it must return the groups of an effect)."""
    if method not in ("REML", "DL", "PM"):
        raise ValueError("method is REML, PM or DL")
    key_of = keys or (lambda e: group_keys(e, by))
    excluded = sorted({e.record_id for e in effects if not e.trusted}) if not include_untrusted else []
    trusted = [e for e in effects if include_untrusted or e.trusted]
    double_zero = sorted(
        f"{e.record_id}/{e.arm}" + (f" ({e.segment})" if e.segment else "") for e in trusted if e.double_zero
    )
    used = [e for e in trusted if not e.double_zero]
    split = sorted({f"{e.record_id} ({e.control_share} comparisons)" for e in used if e.control_share > 1})
    members: dict[str, list[Effect]] = defaultdict(list)
    for e in used:
        for key in key_of(e):
            members[key].append(e)
    names = sorted(members)
    rows = [e for name in names for e in members[name]]
    y, v, clusters, shared = pooling_inputs(rows)
    index = np.repeat(np.arange(len(names)), [len(members[name]) for name in names])
    re = pool_groups(y, v, index, len(names), cast(TauMethod, method), hksj=hksj, clusters=clusters, shared=shared)
    dl = pool_groups(y, v, index, len(names), "DL", hksj=False, prediction=False, clusters=clusters, shared=shared)
    groups = [_group(name, members[name], re, dl, i) for i, name in enumerate(names)]
    primary = _primary_groups(used, key_of, names)
    win_rates = _shrink_rates(groups, used, primary)
    groups.sort(key=lambda g: (-g.lift_low, g.key))
    return PoolResult(
        by=by,
        method=f"{method} tau^2"
        + (f", {HKSJ_FLOOR_LABEL} (Hartung-Knapp-Sidik-Jonkman)" if hksj else ", normal interval"),
        interval="95% confidence interval of the mean relative lift of the group's tests",
        prediction_convention="95% prediction interval for the true lift of a new test of the kind, carrying the "
        "uncertainty of tau^2 through its Q-profile confidence distribution (after Nagashima, Noma & Furukawa "
        "2019); shown from 3 comparisons: with fewer the spread between tests cannot be estimated",
        ranking="ranked by the lower end of the 95% interval of the pooled lift, never by the point estimate alone",
        groups=groups,
        excluded=excluded,
        split_controls=split,
        programme=_programme(used, groups, alpha, assumed_power),
        between_groups=_between(used, primary, names, method),
        meta_regression=meta_regression_by_date(used, permutations, seed),
        egger=egger_test(used),
        double_zero=double_zero,
        win_rates=win_rates,
        assumptions=[
            "Tests are independent of each other: visitors are independent and each test ran to a fixed horizon.",
            "Comparisons against one shared control are correlated: each is pooled with its variance against the "
            "whole control and the covariance 1/x_c - 1/n_c with the other comparisons of its test (generalised "
            "least squares with a block-diagonal within-test covariance), so the control is neither counted twice "
            "nor split.",
            "Win rates count verdicts of the per-test analysis (its ship rule); the false positive risk uses that "
            f"rule's false-win rate per comparison at two-sided alpha {alpha:g} (Holm within each test) and assumes "
            f"power {assumed_power:.0%} at the true effects (an assumption, not a measurement).",
            "Comparisons with no conversions in either arm carry no information on the ratio and are left out "
            "(as metafor's default for risk ratios)."
            + (f" Here: {', '.join(double_zero)}." if double_zero else ""),
            "The between-group test and the fit of the win-rate spread count each comparison once, in the first "
            "of its groups (a test with two themes would otherwise count twice).",
            "Tests that failed a trust check are left out"
            + ("" if not include_untrusted else " (here: included)")
            + ".",
        ],
    )


def whole_variance(e: Effect) -> float:
    """The comparison's sampling variance against its whole control."""
    return e.variance if e.sampling_variance is None else e.sampling_variance


def pooling_inputs(effects: list[Effect]) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Log risk ratios, their variances against the whole control, a cluster number per test (per test and segment
    for segment effects) and the covariance shared with the other comparisons of that cluster."""
    numbers: dict[tuple[str, str | None], int] = {}
    clusters = [numbers.setdefault((e.record_id, e.segment), len(numbers)) for e in effects]
    return (
        np.array([e.log_rr for e in effects], dtype=float),
        np.array([whole_variance(e) for e in effects], dtype=float),
        np.array(clusters, dtype=np.int64),
        np.array([e.shared_variance for e in effects], dtype=float),
    )


def _w_times(x: np.ndarray, own: np.ndarray, c: np.ndarray, cluster: np.ndarray, tau2: float) -> np.ndarray:
    """(V + tau^2 I)^-1 x for one group, V block-diagonal by cluster (own variances plus c 11'), by
    Sherman-Morrison per cluster."""
    u = 1 / (own + tau2)
    size = np.bincount(cluster)
    c = np.where(size[cluster] > 1, c, 0.0)
    c_of = np.zeros(len(size))
    c_of[cluster] = c
    f = c_of / (1 + c_of * np.bincount(cluster, weights=u, minlength=len(size)))
    return u * x - u * f[cluster] * np.bincount(cluster, weights=u * x, minlength=len(size))[cluster]


def _value(array: np.ndarray, i: int) -> float | None:
    value = float(array[i])
    return value if math.isfinite(value) else None


def _group(key: str, items: list[Effect], re: GroupPooling, dl: GroupPooling, i: int) -> GroupResult:
    """One group's result from the vectorised pooling of all groups (row ``i``)."""
    tau2 = float(re.tau2[i])
    mean = float(re.mean[i])
    y, v, cluster, c = pooling_inputs(items)
    cluster = np.unique(cluster, return_inverse=True)[1]
    own = np.where(np.bincount(cluster)[cluster] > 1, v - c, v)
    se_plain = math.sqrt(1 / float(np.sum(_w_times(np.ones_like(y), own, c, cluster, tau2))))
    # empirical-Bayes posterior means (best linear unbiased predictions): mean + tau^2 (V + tau^2 I)^-1 (y - mean)
    posterior = mean + tau2 * _w_times(y - mean, own, c, cluster, tau2)
    z = float(special.ndtri(0.975))
    members = []
    for e, variance, shrunk in zip(items, v, posterior, strict=True):
        se = math.sqrt(variance)
        members.append(
            Member(
                e.record_id,
                e.arm,
                e.lift,
                math.exp(e.log_rr - z * se) - 1,
                math.exp(e.log_rr + z * se) - 1,
                math.exp(float(shrunk)) - 1,
                e.verdict,
                e.shipped,
            )
        )
    k = len(items)
    warning = None if k >= MIN_GROUP else f"only {k} comparison(s): the pooled figures are fragile"
    pred_low, pred_high = _value(re.prediction_low, i), _value(re.prediction_high, i)
    return GroupResult(
        key=key,
        comparisons=k,
        tests=len({e.record_id for e in items}),
        lift=math.expm1(mean),
        lift_low=math.expm1(float(re.low[i])),
        lift_high=math.expm1(float(re.high[i])),
        p_value=float(re.p_value[i]),
        log_se_plain=se_plain,
        tau2=tau2,
        tau2_low=_value(re.tau2_low, i),
        tau2_high=_value(re.tau2_high, i),
        i_squared=float(re.i_squared[i]),
        q=float(re.q[i]),
        q_p_value=_value(re.q_p_value, i),
        prediction_low=None if pred_low is None else math.expm1(pred_low),
        prediction_high=None if pred_high is None else math.expm1(pred_high),
        dl_lift=math.expm1(float(dl.mean[i])),
        dl_low=math.expm1(float(dl.low[i])),
        dl_high=math.expm1(float(dl.high[i])),
        dl_tau2=float(dl.tau2[i]),
        wins=jeffreys(sum(e.verdict == "winner" for e in items), k),
        shipped=jeffreys(sum(e.shipped for e in items), k),
        warning=warning,
        members=sorted(members, key=lambda m: (m.record_id, m.arm)),
    )


def _primary_groups(used: list[Effect], key_of: Callable[[Effect], list[str]], names: list[str]) -> list[int]:
    """Each comparison's first group (index into ``names``), -1 for none: one membership per comparison."""
    where = {name: i for i, name in enumerate(names)}
    return [where[keys[0]] if (keys := key_of(e)) else -1 for e in used]


def _shrink_rates(groups: list[GroupResult], used: list[Effect], primary: list[int]) -> str:
    """Each group's win (and ship) rate under the hierarchical beta-binomial model (BDA3 §5.3, hyperprior
    (a + b)^(-5/2)); the hyperparameters are learned with every comparison counted once (in its first group), and
    each group's posterior uses its own counts. Returns the statement about the win rates in words."""
    statement = ""
    for attribute in ("wins", "shipped"):
        counts, totals = [0] * len(groups), [0] * len(groups)
        for e, g in zip(used, primary, strict=True):
            if g >= 0:
                totals[g] += 1
                counts[g] += e.verdict == "winner" if attribute == "wins" else e.shipped
        rates: list[Rate] = [getattr(g, attribute) for g in groups]
        fit = hierarchical_rates([r.count for r in rates], [r.total for r in rates], counts, totals)
        for i, r in enumerate(rates):
            if fit is not None and r.total:
                r.shrunk, r.shrunk_low, r.shrunk_high = fit.mean[i], fit.low[i], fit.high[i]
            else:
                r.shrunk = r.rate
        if attribute == "wins" and fit is not None:
            statement = (
                f"Win rates: hierarchical beta-binomial model (Gelman et al. BDA3 5.3, hyperprior (a + b)^(-5/2)); "
                f"overall {fit.overall:.1%}, groups alike as if worth {fit.strength_median:,.0f} comparisons of "
                "prior (posterior median of a + b). "
                + (
                    "The data show no difference in win rate between the groups: the spread they allow is smaller "
                    "than the noise of any single group, so each group's rate is mostly the overall rate."
                    if fit.no_difference
                    else "The groups' win rates differ by more than their noise alone would give."
                )
            )
    return statement


def false_positive_risk(
    win_rate: float, alpha: float, power: float, false_win_rate: float | None = None
) -> tuple[float, float] | None:
    """Kohavi & Chen (2024): true success rate pi = (w - f) / (power - f), clipped to [0, 1], and the false positive
    risk of a winner FPR = f (1 - pi) / w, where f is the rate at which a comparison without a true effect is called
    a winner: alpha/2 for a single two-sided test read on its positive side (their formula), or the false-win rate
    of the ship rule actually used. None when w is 0."""
    if not 0 < alpha < 1 or not 0 < power <= 1:
        raise ValueError("alpha in (0, 1), power in (0, 1]")
    if win_rate <= 0:
        return None
    f = alpha / 2 if false_win_rate is None else false_win_rate
    pi = min(1.0, max(0.0, (win_rate - f) / (power - f)))
    return pi, min(1.0, f * (1 - pi) / win_rate)


def fpr_from_prior(pi: float, alpha: float, power: float, false_win_rate: float | None = None) -> float:
    """Kohavi, Deng & Vermeer (2022): FPR = f (1 - pi) / (f (1 - pi) + power pi), f = alpha/2 unless the rule's own
    false-win rate is given."""
    f = alpha / 2 if false_win_rate is None else false_win_rate
    return f * (1 - pi) / (f * (1 - pi) + power * pi)


def lee_shen_bias(true_effects: np.ndarray, ses: np.ndarray, z: float = 1.959963984540054) -> float:
    """Lee & Shen (2018): expected excess of the summed estimates of shipped changes over their true effects,
    sum_i sigma_i phi((sigma_i b - a_i) / sigma_i), for X_i ~ N(a_i, sigma_i^2) shipped when X_i > b sigma_i."""
    return float(np.sum(ses * np.exp(-0.5 * ((ses * z - true_effects) / ses) ** 2) / math.sqrt(2 * math.pi)))


def rule_false_win_rate(effects: list[Effect], alpha: float, rules: VerdictRules | None = None) -> float:
    """Mean over the comparisons of P(called a winner | no true effect) under the ship rule, each at its test's
    number of comparisons (:func:`archive.analysis.verdict.null_ship_rates`)."""
    r = rules or VerdictRules()
    rates = {m: null_ship_rates(m, alpha, r)[1] for m in {e.control_share for e in effects}}
    return float(np.mean([rates[e.control_share] for e in effects]))


def _programme(used: list[Effect], groups: list[GroupResult], alpha: float, power: float) -> Programme:
    wins = sum(e.verdict == "winner" for e in used)
    rate = jeffreys(wins, len(used))
    f = rule_false_win_rate(used, alpha) if used else None
    implied = false_positive_risk(rate.rate or 0.0, alpha, power, f) if used else None
    shrunk = {(m.record_id, m.arm): m.shrunk_lift for g in groups for m in g.members}
    shipped = [e for e in used if e.shipped]
    mean_obs = mean_shrunk = over = bias = summed = None
    if shipped:
        observed = np.array([e.lift for e in shipped])
        shrunk_lifts = np.array([shrunk.get((e.record_id, e.arm), e.lift) for e in shipped])
        mean_obs, mean_shrunk = float(observed.mean()), float(shrunk_lifts.mean())
        over = mean_obs / mean_shrunk if mean_shrunk > 0 else None
        bias = lee_shen_bias(np.log1p(shrunk_lifts), np.array([e.se for e in shipped]))
        summed = float(np.sum([e.log_rr for e in shipped]))
    return Programme(
        len(used),
        rate,
        alpha,
        power,
        implied[0] if implied else None,
        implied[1] if implied else None,
        len(shipped),
        mean_obs,
        mean_shrunk,
        over,
        bias,
        summed,
        f,
        "the ship rule's rate of winners among comparisons without a true effect (Holm at alpha "
        f"{alpha:g} within each test, positive side only; normal approximation, by the tests' numbers of arms)",
    )


def _between(used: list[Effect], primary: list[int], names: list[str], method: str) -> BetweenGroups | None:
    """Test for subgroup differences: Cochran's Q across the groups' pooled estimates (random-effects SEs), with
    each comparison counted once, in its first group, so that the groups compared share no test."""
    keep = [i for i, g in enumerate(primary) if g >= 0]
    if not keep:
        return None
    y, v, clusters, shared = pooling_inputs([used[i] for i in keep])
    index = np.array([primary[i] for i in keep])
    tau_method = cast(TauMethod, method)
    once = pool_groups(y, v, index, len(names), tau_method, False, prediction=False, clusters=clusters, shared=shared)
    usable = np.flatnonzero(once.k >= 2)
    if len(usable) < 2:
        return None
    het = heterogeneity(once.mean[usable], once.se[usable] ** 2)
    return BetweenGroups(het.q, het.df, het.p_value)


def meta_regression_by_date(effects: list[Effect], permutations: int = 1000, seed: int = 0) -> MetaRegression | None:
    """Random-effects meta-regression of log RR on start date (years), method-of-moments residual tau^2
    (DerSimonian-Laird extended to regression), z-test of the slope and a permutation p-value (Higgins &
    Thompson 2004 recommend permutation when k is small)."""
    dated = [e for e in effects if e.started is not None]
    if len(dated) < 4:
        return None
    first = min(e.started for e in dated if e.started)
    x = np.array([(e.started - first).days / 365.25 for e in dated if e.started])
    y = np.array([e.log_rr for e in dated])
    v = np.array([e.variance for e in dated])
    if np.ptp(x) == 0:
        return None
    slope, se, tau2 = _wls_slope(x, y, v)
    z = slope / se
    p = float(2 * special.ndtr(-abs(z)))
    perm_p = None
    if len(dated) > PERMUTATION_MAX_K:
        permutations = 0  # the z-test is accurate at this many comparisons; permutation is for small k
    if permutations:
        rng = np.random.default_rng(seed)
        hits = 0
        for start in range(0, permutations, _PERMUTATION_CHUNK):
            xs = np.stack([rng.permutation(x) for _ in range(min(_PERMUTATION_CHUNK, permutations - start))])
            s_p, se_p, _ = _wls_slopes(xs, y, v)
            hits += int(np.sum(np.abs(s_p / se_p) >= abs(z)))
        perm_p = (hits + 1) / (permutations + 1)
    return MetaRegression("start date (years)", slope, se, p, perm_p, permutations, tau2, len(dated))


_PERMUTATION_CHUNK = 100  # permutations computed together (rows of one array)
PERMUTATION_MAX_K = 500  # above this many dated comparisons the permutation p is not computed (z-test only)


def _wls_slope(x: np.ndarray, y: np.ndarray, v: np.ndarray) -> tuple[float, float, float]:
    slope, se, tau2 = _wls_slopes(x[None, :], y, v)
    return float(slope[0]), float(se[0]), float(tau2[0])


def _wls_slopes(xs: np.ndarray, y: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Slope of y on each row of ``xs`` by random-effects weighted least squares, written out for the 2x2 normal
    equations so that many permutations run as one array operation: the method-of-moments residual tau^2
    (DerSimonian-Laird extended to regression: (Q_E - (k - 2)) / (sum w - tr((X'WX)^-1 X'W^2X))), then the slope
    and its standard error with weights 1 / (v + tau^2)."""
    w = 1 / v
    s0, s1, s2 = np.sum(w), xs @ w, (xs**2) @ w
    sy, sxy = np.sum(w * y), xs @ (w * y)
    det = s0 * s2 - s1**2
    b1 = (s0 * sxy - s1 * sy) / det
    b0 = (s2 * sy - s1 * sxy) / det
    resid = y[None, :] - b0[:, None] - b1[:, None] * xs
    q_e = (resid**2) @ w
    w_sq = w**2
    t0, t1, t2 = np.sum(w_sq), xs @ w_sq, (xs**2) @ w_sq
    trace = s0 - (s2 * t0 - 2 * s1 * t1 + s0 * t2) / det
    tau2 = np.where(trace > 0, np.maximum(0.0, (q_e - (len(y) - 2)) / np.where(trace > 0, trace, 1.0)), 0.0)
    w2 = 1 / (v[None, :] + tau2[:, None])
    r0, r1, r2 = np.sum(w2, axis=1), np.sum(w2 * xs, axis=1), np.sum(w2 * xs**2, axis=1)
    ry, rxy = w2 @ y, np.sum(w2 * xs * y[None, :], axis=1)
    det2 = r0 * r2 - r1**2
    slope = (r0 * rxy - r1 * ry) / det2
    return slope, np.sqrt(r0 / det2), tau2


def egger_test(effects: list[Effect]) -> Egger | None:
    """Egger et al. (1997): regress y/se on 1/se; an intercept away from 0 signals small-study effects, e.g. an
    archive that files its winners and forgets its losers."""
    if len(effects) < 3:
        return None
    y = np.array([e.log_rr for e in effects])
    se = np.array([e.se for e in effects])
    if np.ptp(1 / se) <= 1e-12 * np.max(1 / se):
        return None  # every test equally precise: there is no small-study axis to regress on
    design = np.column_stack([np.ones_like(se), 1 / se])
    target = y / se
    beta, *_ = np.linalg.lstsq(design, target, rcond=None)
    resid = target - design @ beta
    df = len(y) - 2
    sigma2 = float(resid @ resid / df)
    cov = sigma2 * np.linalg.inv(design.T @ design)
    se_int = float(math.sqrt(cov[0, 0]))
    t = beta[0] / se_int
    p = float(2 * special.stdtr(df, -(abs(t))))
    warning = None
    if p < 0.10:  # common practice: Egger's test is read at 0.10 because it has little power
        warning = (
            "small tests show larger lifts than big ones (Egger p < 0.10): the archive may hold mostly the tests "
            "that won, or small tests were stopped when they looked good"
        )
    return Egger(float(beta[0]), se_int, p, len(y), warning)
