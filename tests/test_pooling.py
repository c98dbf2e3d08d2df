"""Pooling the archive: effects, splitting rule, programme formulas, shrinkage and recovery of known effects."""

from __future__ import annotations

import datetime as dt
import functools
import json
import math
import sys
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from scipy import stats
from typer.testing import CliRunner

from archive.analysis import Settings
from archive.cli.main import app
from archive.pooling.effects import Effect, log_rr_split, record_effects
from archive.pooling.groups import (
    beta_binomial_fit,
    egger_test,
    false_positive_risk,
    fpr_from_prior,
    jeffreys,
    lee_shen_bias,
    meta_regression_by_date,
    pool,
)
from archive.records.model import Record

ROOT = Path(__file__).resolve().parents[1]
runner = CliRunner()


def _record(arms: list[tuple[str, int, int]], **extra: Any) -> Record:
    return Record.model_validate(
        {
            "id": "multi",
            "title": "Three arms",
            "status": "finished",
            "started": dt.date(2024, 1, 8),
            "ended": dt.date(2024, 2, 4),
            "page_area": "basket",
            "themes": ["shipping-cost"],
            "hypothesis": "h",
            "arms": [{"name": n, "control": n == "control", "visitors": v, "conversions": c} for n, v, c in arms],
            **extra,
        }
    )


def test_shared_control_is_split_evenly() -> None:
    # Cochrane Handbook, studies with more than two intervention groups: split the shared control's counts
    r = _record([("control", 30_000, 900), ("b", 15_000, 480), ("c", 15_000, 420)])
    effects = record_effects(r)
    assert [e.control_share for e in effects] == [2, 2]
    assert sum(e.control_visitors for e in effects) == 30_000
    b = effects[0]
    # log RR and the metafor escalc "RR" variance with the halved control: 450 of 15,000
    assert b.log_rr == pytest.approx(math.log((480 / 15_000) / (450 / 15_000)), rel=1e-12)
    assert b.variance == pytest.approx(1 / 480 - 1 / 15_000 + 1 / 450 - 1 / 15_000, rel=1e-12)
    # the estimate's own sampling variance uses the whole control (Katz et al. 1978 log RR variance, 900 of 30,000):
    # the replay of calibrate forecasts with it, since the point estimate is the same either way
    assert b.sampling_variance == pytest.approx(1 / 480 - 1 / 15_000 + 1 / 900 - 1 / 30_000, rel=1e-12)
    # pooling uses the whole control and the two comparisons' covariance var(log p_c) = 1/x_c - 1/n_c
    assert [e.shared_variance for e in effects] == pytest.approx([1 / 900 - 1 / 30_000] * 2, rel=1e-12)


def test_shared_control_covariance_by_simulation() -> None:
    # seeded simulation with known truth: a control (30,000 visitors at 3%) and two treatments (15,000 each at 3.2%
    # and 2.8%), 40,000 replications; the empirical covariance of the two log risk ratios should match the delta
    # method's 1/x_c - 1/n_c at the expected counts, and each variance the whole-control sampling variance
    rng = np.random.default_rng(11)
    x_c = rng.binomial(30_000, 0.03, 40_000)
    x_b, x_c2 = rng.binomial(15_000, 0.032, 40_000), rng.binomial(15_000, 0.028, 40_000)
    log_b = np.log(x_b / 15_000) - np.log(x_c / 30_000)
    log_c = np.log(x_c2 / 15_000) - np.log(x_c / 30_000)
    empirical = np.cov(log_b, log_c)
    r = _record([("control", 30_000, 900), ("b", 15_000, 480), ("c", 15_000, 420)])
    b, c = record_effects(r)
    # sampling error of a covariance of 40,000 pairs: about 1% relative here
    assert empirical[0, 1] == pytest.approx(b.shared_variance, rel=0.03)
    assert empirical[0, 0] == pytest.approx(b.sampling_variance, rel=0.03)
    assert empirical[1, 1] == pytest.approx(c.sampling_variance, rel=0.03)
    assert c.shared_variance == b.shared_variance
    single = record_effects(_record([("control", 30_000, 900), ("b", 15_000, 480)]))
    assert single[0].shared_variance == 0.0


def test_zero_cell_gets_half_added() -> None:
    log_rr, var, corrected = log_rr_split(0, 200, 4, 210)
    assert corrected
    assert log_rr == pytest.approx(math.log((0.5 / 201) / (4.5 / 211)))
    assert var == pytest.approx(1 / 0.5 - 1 / 201 + 1 / 4.5 - 1 / 211)


@pytest.mark.parametrize(("pi", "expected"), [(0.20, 0.111), (0.15, 0.150), (0.10, 0.220)])
def test_false_positive_risk_from_prior(pi: float, expected: float) -> None:
    # Kohavi, Deng & Vermeer (2022) formula; values in check-values §11 (computed from it), alpha 0.05, power 0.8
    assert fpr_from_prior(pi, 0.05, 0.8) == pytest.approx(expected, abs=5e-4)


def test_kohavi_chen_worked_case() -> None:
    # Kohavi & Chen (2024): observed win rate 12% at alpha 0.10 and power 0.8 -> pi about 9.3%, FPR about 37.8%
    result = false_positive_risk(0.12, 0.10, 0.8)
    assert result is not None
    pi, fpr = result
    assert pi == pytest.approx(0.093, abs=5e-4)
    assert fpr == pytest.approx(0.378, abs=5e-4)
    assert false_positive_risk(0.0, 0.05, 0.8) is None


def test_jeffreys_matches_statsmodels() -> None:
    from statsmodels.stats.proportion import proportion_confint

    # statsmodels proportion_confint(method="jeffreys"): Beta(x + 1/2, n - x + 1/2) quantiles
    r = jeffreys(7, 40)
    assert (r.low, r.high) == pytest.approx(proportion_confint(7, 40, method="jeffreys"), rel=1e-10)
    assert jeffreys(0, 10).low == 0.0 and jeffreys(10, 10).high == 1.0
    assert jeffreys(0, 0).rate is None


def test_beta_binomial_shrinkage_recovers_spread() -> None:
    rng = np.random.default_rng(2)
    rates = rng.beta(4, 16, size=300)  # invented: true win rates around 20%
    totals = rng.integers(20, 60, size=300)
    counts = rng.binomial(totals, rates)
    fit = beta_binomial_fit(list(counts), list(totals))
    assert fit is not None
    a, b = fit
    assert a / (a + b) == pytest.approx(0.2, abs=0.02)
    assert a + b == pytest.approx(20, rel=0.5)  # prior strength, loosely (300 groups)
    assert beta_binomial_fit([0, 0], [10, 12]) is None


def test_lee_shen_bias_against_monte_carlo() -> None:
    # Lee & Shen (2018): E[sum X_i 1{X_i > b s_i}] - sum a_i P(X_i > b s_i) = sum s_i phi((s_i b - a_i) / s_i)
    a = np.array([0.01, 0.0, -0.01, 0.03, 0.02])
    s = np.array([0.02, 0.015, 0.03, 0.01, 0.025])
    rng = np.random.default_rng(8)
    x = rng.normal(a, s, size=(400_000, 5))
    shipped = x > 1.959963984540054 * s
    excess = np.mean(np.sum(np.where(shipped, x - a, 0.0), axis=1))
    assert lee_shen_bias(a, s) == pytest.approx(excess, rel=0.01)


def _effect(log_rr: float, variance: float, started: dt.date | None = None, **kw: Any) -> Effect:
    base: dict[str, Any] = dict(
        record_id="r",
        arm="b",
        title="t",
        themes=["x"],
        page_area="home",
        tags=[],
        started=started,
        log_rr=log_rr,
        variance=variance,
        visitors=1000,
        control_visitors=1000.0,
        control_share=1,
        zero_cell_correction=False,
        verdict="flat",
        shipped=False,
        trusted=True,
    )
    base.update(kw)
    return Effect(**base)


def test_egger_matches_ols() -> None:
    import statsmodels.api as sm

    rng = np.random.default_rng(5)
    se = rng.uniform(0.01, 0.08, 30)
    y = rng.normal(0.01 + 0.8 * se, se)  # invented small-study effect
    effects = [_effect(float(a), float(b**2), record_id=f"r{i}") for i, (a, b) in enumerate(zip(y, se, strict=True))]
    ours = egger_test(effects)
    # statsmodels OLS of y/se on 1/se: the intercept and its t-test p-value
    fit = sm.OLS(y / se, sm.add_constant(1 / se)).fit()
    assert ours is not None
    assert ours.intercept == pytest.approx(fit.params[0], rel=1e-10)
    assert ours.p_value == pytest.approx(fit.pvalues[0], rel=1e-8)


def test_meta_regression_slope_matches_weighted_least_squares_without_heterogeneity() -> None:
    import statsmodels.api as sm

    rng = np.random.default_rng(6)
    days = np.sort(rng.integers(0, 1000, 25))
    v = rng.uniform(0.0004, 0.001, 25)
    x = days / 365.25
    y = rng.normal(0.02 - 0.01 * x, np.sqrt(v))
    start = dt.date(2023, 1, 2)
    effects = [
        _effect(float(a), float(b), start + dt.timedelta(days=int(d)), record_id=f"r{i}")
        for i, (a, b, d) in enumerate(zip(y, v, days, strict=True))
    ]
    result = meta_regression_by_date(effects, permutations=199, seed=1)
    assert result is not None
    if result.tau2_residual == 0:
        # statsmodels WLS with weights 1/v gives the same slope; its SE is rescaled by the residual variance
        fit = sm.WLS(y, sm.add_constant(x), weights=1 / v).fit()
        assert result.slope == pytest.approx(fit.params[1], rel=1e-8)
        assert result.se == pytest.approx(fit.bse[1] / math.sqrt(fit.scale), rel=1e-8)
    assert result.permutation_p_value is not None and 0 < result.permutation_p_value <= 1


def test_groups_below_five_are_kept_with_a_warning() -> None:
    effects = [_effect(0.01 * i, 0.0004, record_id=f"r{i}", themes=["a"] if i < 6 else ["b"]) for i in range(9)]
    result = pool(effects, "theme", permutations=0)
    by_key = {g.key: g for g in result.groups}
    assert by_key["a"].warning is None and by_key["a"].comparisons == 6
    assert by_key["b"].comparisons == 3 and by_key["b"].warning is not None
    assert by_key["b"].prediction_low is not None  # k = 3: t with 1 df


def test_untrusted_tests_are_excluded_and_listed() -> None:
    effects = [_effect(0.02, 0.0004, record_id=f"r{i}") for i in range(5)]
    effects.append(_effect(0.5, 0.0004, record_id="broken", trusted=False))
    result = pool(effects, "theme", permutations=0)
    assert result.excluded == ["broken"] and result.groups[0].comparisons == 5
    assert pool(effects, "theme", include_untrusted=True, permutations=0).groups[0].comparisons == 6


def test_pooled_group_matches_statsmodels() -> None:
    from statsmodels.stats.meta_analysis import combine_effects

    rng = np.random.default_rng(3)
    y, v = rng.normal(0.02, 0.03, 12), rng.uniform(0.0003, 0.002, 12)
    effects = [_effect(float(a), float(b), record_id=f"r{i}") for i, (a, b) in enumerate(zip(y, v, strict=True))]
    (group,) = pool(effects, "theme", method="DL", permutations=0).groups
    # statsmodels.stats.meta_analysis.combine_effects(method_re="dl"): tau2 and the random-effects mean
    reference = combine_effects(y, v, method_re="dl")
    assert reference.tau2 > 0
    assert group.tau2 == pytest.approx(reference.tau2, rel=1e-8)
    assert group.lift == pytest.approx(math.expm1(reference.mean_effect_re), rel=1e-10)
    # HKSJ with the Knapp-Hartung floor: statsmodels' HKSJ SE (no floor) or its plain RE SE, whichever is larger,
    # times scipy.stats.t.ppf(0.975, 11)
    se = max(reference.sd_eff_w_re_hksj, reference.sd_eff_w_re)
    crit = stats.t.ppf(0.975, 11)
    assert group.lift_low == pytest.approx(math.expm1(reference.mean_effect_re - crit * se), rel=1e-9)
    assert group.lift_high == pytest.approx(math.expm1(reference.mean_effect_re + crit * se), rel=1e-9)


def test_recovers_known_theme_effects_over_seeds() -> None:
    """The demo generator's true theme effects land inside the pooled 95% intervals at about the stated rate."""
    sys.path.insert(0, str(ROOT / "scripts"))
    import make_demo  # the seeded demo generator: known true effects per theme

    covered_mean: list[bool] = []
    covered_tau2: list[bool] = []
    covered_next: list[float] = []
    for seed in range(1, 7):
        effects = []
        for t in make_demo.build_archive(seed):
            if t.status not in ("finished", "stopped-early") or t.idea.get("special"):
                continue  # planted flaws (SRM, device effects, mix shifts) do not follow the theme truth
            effects += record_effects(Record.model_validate(t.record), settings=Settings(bootstrap_replicates=20))
        result = pool(effects, keys=lambda e: [e.themes[0]], permutations=0)
        for g in result.groups:
            mean, tau = make_demo.TRUE_EFFECTS[g.key]
            covered_mean.append(g.lift_low <= math.expm1(mean) <= g.lift_high)
            covered_tau2.append((g.tau2_low or 0.0) <= tau**2 <= (g.tau2_high or 0.0))
            if g.prediction_low is not None and g.prediction_high is not None:
                # P(a new test's true log lift ~ N(mean, tau^2) falls inside the prediction interval), exactly
                low, high = math.log1p(g.prediction_low), math.log1p(g.prediction_high)
                covered_next.append(float(stats.norm.cdf((high - mean) / tau) - stats.norm.cdf((low - mean) / tau)))
    # nominal 95%; with 60 intervals, 85% is more than four binomial standard errors below
    assert np.mean(covered_mean) >= 0.85, np.mean(covered_mean)
    assert np.mean(covered_tau2) >= 0.85, np.mean(covered_tau2)
    # the prediction interval for the next test of the kind: about 95% on the demo generator (the plug-in
    # Higgins-Thompson-Spiegelhalter interval covered about 90% here)
    assert 0.93 <= np.mean(covered_next) <= 0.98, np.mean(covered_next)  # measured 96.95% (12 seeds: 96.0%)


def test_cli_pool_on_demo_archive(tmp_path: Path, demo_db: str) -> None:
    result = runner.invoke(app, ["pool", "--records", str(ROOT / "records"), "--format", "json"])
    assert result.exit_code == 0, result.output
    data = json.loads(result.stdout)
    assert data["by"] == "theme" and len(data["groups"]) >= 8
    lows = [g["lift_low"] for g in data["groups"]]
    assert lows == sorted(lows, reverse=True)  # ranked by the lower end of the interval
    assert data["programme"]["false_positive_risk"] is not None
    result = runner.invoke(
        app,
        [
            "pool",
            "--records",
            str(ROOT / "records"),
            "--by",
            "page_area",
            "--format",
            "markdown",
            "--plots",
            str(tmp_path),
        ],
    )
    assert result.exit_code == 0 and "## What tends to win" in result.stdout
    assert (tmp_path / "funnel.svg").exists() and any(tmp_path.glob("forest-*.svg"))
    result = runner.invoke(app, ["pool", "--records", str(ROOT / "records"), "--by", "segment:device", "-f", "json"])
    assert result.exit_code == 0 and {g["key"] for g in json.loads(result.stdout)["groups"]} >= {"device=mobile"}
    result = runner.invoke(app, ["pool", "--records", str(ROOT / "records"), "--by", "colour"])
    assert result.exit_code == 2 and "unknown grouping" in result.stderr


def test_prediction_interval_carries_tau2_uncertainty() -> None:
    # the pooled group's interval is the confidence-distribution interval: the vectorised code (Newton per slice,
    # bisection for the quantiles) against the scalar one (bisection per slice, Brent for the quantiles)
    y = np.array([0.0, 0.05, -0.03, 0.08, 0.01, 0.02])
    effects = [_effect(float(x), 0.0004, record_id=f"r{i}") for i, x in enumerate(y)]
    (g,) = pool(effects, "theme", permutations=0).groups
    from archive.stats.meta import cd_prediction_interval, random_effects

    scalar = cd_prediction_interval(y, np.full(6, 0.0004))  # the scalar implementation (root finding per slice)
    assert scalar is not None and g.prediction_low is not None and g.prediction_high is not None
    assert math.log1p(g.prediction_low) == pytest.approx(scalar[0], rel=1e-8)
    assert math.log1p(g.prediction_high) == pytest.approx(scalar[1], rel=1e-8)
    plain = random_effects(y, np.full(6, 0.0004), "REML", hksj=False)
    assert plain.prediction_low == pytest.approx(scalar[0], rel=1e-12)


def test_false_positive_risk_uses_the_rule_false_win_rate() -> None:
    # two-arm tests: the ship rule wins on the positive side of a two-sided test at 0.05, i.e. at
    # P(Z > 1.959964) = 0.025 (scipy.stats.norm.sf(1.959964)); the rate is measured on 200,000 seeded draws
    two_arm = [_effect(0.02, 0.0004, record_id=f"r{i}", verdict="winner" if i < 3 else "flat") for i in range(20)]
    prog = pool(two_arm, "theme", permutations=0).programme
    assert prog.false_win_rate == pytest.approx(stats.norm.sf(1.959964), abs=0.0015)
    expected = false_positive_risk(3 / 20, 0.05, 0.8)  # Kohavi & Chen's alpha/2 form: the same f here
    assert expected is not None and prog.false_positive_risk == pytest.approx(expected[1], abs=0.01)
    # four-arm tests: Holm's first step is Bonferroni, alpha / (2 x 3) per comparison, and its later steps add
    # little (Holm 1979); the programme uses that smaller rate, not alpha/2
    four_arm = [_effect(0.02, 0.0004, record_id=f"r{i // 3}", arm=f"t{i % 3}", control_share=3) for i in range(21)]
    f = pool(four_arm, "theme", permutations=0).programme.false_win_rate
    assert f is not None and 0.05 / 6 - 0.0015 <= f <= 0.05 / 6 + 0.003


def test_double_zero_comparisons_are_left_out_and_listed() -> None:
    r = _record([("control", 5000, 0), ("b", 5000, 0)], id="nobody", plan={"visitors_per_arm": 5000})
    (e,) = record_effects(r)
    assert e.double_zero
    others = [_effect(0.02, 0.0004, record_id=f"r{i}", themes=["shipping-cost"]) for i in range(5)]
    result = pool([*others, e], "theme", permutations=0)
    assert result.double_zero == ["nobody/b"] and result.groups[0].comparisons == 5


def test_between_group_test_counts_shared_tests_once() -> None:
    from statsmodels.stats.meta_analysis import combine_effects

    rng = np.random.default_rng(5)
    y, v = rng.normal(0.02, 0.05, 9), rng.uniform(0.0005, 0.002, 9)
    themes = [["a"]] * 4 + [["b"]] * 4 + [["a", "b"]]  # the last test carries both themes
    effects = [_effect(float(y[i]), float(v[i]), record_id=f"r{i}", themes=themes[i]) for i in range(9)]
    result = pool(effects, "theme", method="DL", permutations=0)
    assert {g.key: g.comparisons for g in result.groups} == {"a": 5, "b": 5}  # each group shows its own members
    # between-group Q with the shared test in its first theme only: DL random-effects means and SEs of the two
    # disjoint groups from statsmodels combine_effects(method_re="dl"), then Cochran's Q of the two means
    first = [0, 1, 2, 3, 8], [4, 5, 6, 7]
    fits = [combine_effects(y[list(ix)], v[list(ix)], method_re="dl") for ix in first]
    means = np.array([f.mean_effect_re for f in fits])
    w = 1 / np.array([f.sd_eff_w_re for f in fits]) ** 2
    q = float(np.sum(w * (means - np.sum(w * means) / np.sum(w)) ** 2))
    assert result.between_groups is not None and result.between_groups.df == 1
    assert result.between_groups.q == pytest.approx(q, rel=1e-8)


def test_hierarchical_win_rates_against_direct_integration() -> None:
    from scipy import integrate, special

    from archive.stats.beta_binomial import hierarchical_rates

    # BDA3 5.3: p(a/(a+b), (a+b)^(-1/2)) flat, i.e. p(a, b) ~ (a+b)^(-5/2). Independent check: the posterior mean
    # of group 1's rate by scipy.integrate.dblquad over u = a/(a+b) in (0, 1), t = (a+b)^(-1/2) in (0, 3.2)
    y = np.array([2, 1, 1, 2, 2, 0, 3, 0, 0, 1])
    n = np.array([10, 13, 6, 9, 10, 7, 9, 8, 6, 6])

    def likelihood(u: float, t: float) -> float:
        s = t**-2
        a, b = u * s, (1 - u) * s
        return float(np.exp(np.sum(special.betaln(a + y, b + n - y) - special.betaln(a, b))))

    opts = {"epsabs": 1e-13, "epsrel": 1e-9}
    z = integrate.dblquad(lambda t, u: likelihood(u, t), 0, 1, 0, 3.2, **opts)[0]
    m = integrate.dblquad(lambda t, u: likelihood(u, t) * (u * t**-2 + y[0]) / (t**-2 + n[0]), 0, 1, 0, 3.2, **opts)
    fit = hierarchical_rates(list(y), list(n))
    assert fit is not None
    assert fit.mean[0] == pytest.approx(m[0] / z, abs=5e-4)
    assert fit.low[0] < fit.mean[0] < fit.high[0]
    assert fit.no_difference  # ten small groups with similar counts: the data cannot tell them apart
    # clearly different groups: no longer "no difference", and the rates stay apart
    apart = hierarchical_rates([2, 40, 3, 38], [100, 100, 100, 100])
    assert apart is not None and not apart.no_difference and apart.mean[1] - apart.mean[0] > 0.2


def test_demo_win_rates_do_not_collapse_to_one_value() -> None:
    # the maximum-likelihood beta-binomial fit ran off to a + b -> infinity on the demo (every theme "16.7%");
    # the hierarchical posterior keeps the groups' own counts visible
    effects = [
        _effect(0.02, 0.0004, record_id=f"r{i}", themes=[t], verdict="winner" if i % k == 0 else "flat")
        for t, k in (("a", 2), ("b", 9))
        for i in range(18)
    ]
    result = pool(effects, "theme", permutations=0)
    shrunk = {g.key: g.wins.shrunk for g in result.groups}
    assert shrunk["a"] is not None and shrunk["b"] is not None and shrunk["a"] > shrunk["b"] + 0.1
    assert "hierarchical beta-binomial" in result.win_rates


@functools.cache
def _demo_comparisons(seeds: tuple[int, ...]) -> dict[str, list[list[Effect]]]:
    """Trusted comparisons of the demo generator per theme (all seeds together), as lists of one test's comparisons;
    left out: comparisons whose truth is set per device and the deliberate device-mix shift (they do not follow the
    theme's truth). Keys are made unique per seed."""
    sys.path.insert(0, str(ROOT / "scripts"))
    import make_demo  # the seeded demo generator: known true effects per theme

    by_theme: dict[str, list[list[Effect]]] = {}
    for seed in seeds:
        for t in make_demo.build_archive(seed):
            if t.status not in ("finished", "stopped-early"):
                continue
            if t.parent is None and t.idea["slug"] in make_demo.MIX_SHIFT:
                continue
            found = record_effects(Record.model_validate(t.record), settings=Settings(bootstrap_replicates=20))
            per_device = {arm for arm, x in t.truth["log_rr"].items() if isinstance(x, dict)}
            keep = [e for e in found if e.trusted and not e.double_zero and e.arm not in per_device]
            for e in keep:
                e.record_id = f"{seed}/{e.record_id}"
            if keep:
                by_theme.setdefault(t.idea["theme"], []).append(keep)
    return by_theme


DEMO_SEEDS = tuple(range(1, 9))


@pytest.mark.parametrize("k", [3, 5, 10, 30])
def test_prediction_interval_covers_on_the_demo_generator(k: int) -> None:
    # the demo generator's truth (scripts/make_demo.py, TRUE_EFFECTS: a variant's true log RR is mean + tau N(0, 1)
    # for its theme): groups of k comparisons of one theme, drawn as whole tests in random order from 8 seeded
    # archives (every arm of a multi-arm test together, as pool sees them; the last test cut at k), pooled as
    # pool does it (pooling_inputs: variances against the whole control, the shared control's covariance). The
    # chance that a new test's true effect ~ N(mean, tau^2) falls inside the 95% prediction interval, computed
    # exactly per interval, should average 93-97%. Measured here 0.974 / 0.964 / 0.953 / 0.958 at k = 3 / 5 / 10 /
    # 30 (with the control split evenly and comparisons independent, as before: 0.973 / 0.959 / 0.940 / 0.926);
    # with 40 seeds (scripts/check_coverage.py) 0.972 / 0.955 / 0.942 / 0.935 (split: 0.971 / 0.952 / 0.929 /
    # 0.897).
    from archive.pooling.groups import pooling_inputs
    from archive.stats.meta_groups import pool_groups

    sys.path.insert(0, str(ROOT / "scripts"))
    import make_demo

    rng = np.random.default_rng(500 + k)
    rows: list[Effect] = []
    index: list[int] = []
    truth: list[tuple[float, float]] = []
    for theme, tests in sorted(_demo_comparisons(DEMO_SEEDS).items()):
        for _ in range(120):
            group = [e for j in rng.permutation(len(tests)) for e in tests[j]][:k]
            index += [len(truth)] * k
            rows += group
            truth.append(make_demo.TRUE_EFFECTS[theme])
    y, v, clusters, shared = pooling_inputs(rows)
    pooled = pool_groups(y, v, np.array(index), len(truth), "REML", clusters=clusters, shared=shared)
    mean, tau = np.array(truth).T
    upper = (pooled.prediction_high - mean) / tau
    covered = float(np.mean(stats.norm.cdf(upper) - stats.norm.cdf((pooled.prediction_low - mean) / tau)))
    if k == 3:
        # known shortfall, on the safe side: with 3 comparisons the interval is a little too wide here (97.4%;
        # 97.2% with 40 seeds): tau is small against the tests' noise, and 2 degrees of freedom cannot rule out a
        # large tau. The aim of at most 97% is not met at k = 3 on the demo generator.
        assert 0.95 <= covered <= 0.98, covered
    else:
        assert 0.93 <= covered <= 0.97, covered
