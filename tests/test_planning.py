"""Priors, plans and calibration against published values, re-derived tables and seeded simulations."""

from __future__ import annotations

import dataclasses
import json
import math
import shutil
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from archive.cli.main import app
from archive.planning.plan import assurance, dunnett_critical, exaggeration, plan_test
from archive.planning.priors import LiftPrior, ThemeSums, fit_history, informed_lift, lift_prior
from archive.pooling.effects import Effect, load_archive_effects

ROOT = Path(__file__).resolve().parents[1]
runner = CliRunner()


def test_plan_matches_r_power_prop_test() -> None:
    # R power.prop.test(p1=.50, p2=.75, power=.90) -> n = 76.70693 per group (stats-Ex.Rout.save)
    plan = plan_test(0.5, 0.5, power=0.9)
    assert plan.visitors_per_arm == 77 and plan.visitors_total == 154


def test_bonferroni_for_several_arms() -> None:
    # three arms: two comparisons at alpha/2 each; n from the same formula at alpha 0.025
    from archive.stats.power import visitors_per_arm

    plan = plan_test(0.03, 0.05, arms=3)
    assert plan.alpha_per_comparison == 0.025
    assert plan.visitors_per_arm == math.ceil(visitors_per_arm(0.0315, 0.03, alpha=0.025, power=0.8))
    assert plan.visitors_total == 3 * plan.visitors_per_arm


@pytest.mark.parametrize(("treatments", "table"), [(2, 2.21), (3, 2.35), (4, 2.44)])
def test_dunnett_critical_values(treatments: int, table: float) -> None:
    # Dunnett (1955) two-sided many-to-one critical values for infinite df, equal groups (from memory: 2.21,
    # 2.35, 2.44); checked below by a seeded simulation of the correlated z-statistics
    share = 1 / (treatments + 1)
    c = dunnett_critical(treatments, 0.05, share)
    assert c == pytest.approx(table, abs=0.006)
    rng = np.random.default_rng(treatments)
    control = rng.standard_normal(400_000)
    arms = rng.standard_normal((400_000, treatments))
    z = (arms - control[:, None]) / math.sqrt(2)  # equal groups: correlation 1/2
    assert np.mean(np.abs(z).max(axis=1) > c) == pytest.approx(0.05, abs=0.0015)


def test_dunnett_plan_needs_fewer_visitors_than_bonferroni() -> None:
    bonferroni = plan_test(0.03, 0.05, arms=4)
    dunnett = plan_test(0.03, 0.05, arms=4, correction="dunnett")
    assert dunnett.visitors_per_arm < bonferroni.visitors_per_arm
    assert dunnett.alpha_per_comparison > bonferroni.alpha_per_comparison


@pytest.mark.parametrize(("power", "expected"), [(0.8, 1.13), (0.5, 1.41), (0.3, 1.81), (0.2, 2.26), (0.1, 3.72)])
def test_exaggeration_table(power: float, expected: float) -> None:
    # Gelman & Carlin (2014) design analysis: E[estimate | significant, positive] / true effect;
    # check-values §11 table (re-derived from the truncated normal)
    assert exaggeration(power) == pytest.approx(expected, abs=0.006)  # table printed to two decimals


def test_variance_reduction_and_whole_weeks() -> None:
    plain = plan_test(0.03, 0.05, daily_visitors=10_000)
    reduced = plan_test(0.03, 0.05, daily_visitors=10_000, rho=0.5)
    assert reduced.visitors_per_arm == math.ceil(plain.visitors_per_arm * 0.75) or (
        abs(reduced.visitors_per_arm - plain.visitors_per_arm * 0.75) <= 1
    )
    assert plain.days is not None and plain.days % 7 == 0
    assert plain.days >= plain.visitors_total / 10_000


def test_assurance_against_simulated_tests() -> None:
    prior = LiftPrior("invented", 20, 0.02, 0.04, 0.0012)
    baseline, n = 0.05, 40_000
    z = 1.959963984540054
    real, ceiling, any_win = assurance(baseline, prior, n, n, z)
    # seeded Monte Carlo of whole tests: true lift from the prior, binomial counts, z-test of the log risk ratio
    rng = np.random.default_rng(17)
    theta = rng.normal(prior.mean, prior.sd, 300_000)
    x_c = rng.binomial(n, baseline, size=theta.size)
    x_t = rng.binomial(n, np.clip(baseline * np.exp(theta), 0, 1))
    log_rr = np.log((x_t / n) / (x_c / n))
    se = np.sqrt(1 / x_t - 1 / n + 1 / x_c - 1 / n)
    win = log_rr / se > z
    assert real == pytest.approx(np.mean(win & (theta > 0)), abs=0.004)
    assert any_win == pytest.approx(np.mean(win), abs=0.004)
    assert ceiling == pytest.approx(np.mean(theta > 0), abs=0.003)


@pytest.mark.parametrize("n", [50, 1_000, 30_000, 1_000_000, 100_000_000])
def test_assurance_never_exceeds_its_ceiling(n: int) -> None:
    # O'Hagan, Stevens & Campbell (2005): assurance cannot exceed P(effect > 0)
    for prior in (LiftPrior("a", 9, 0.02, 0.03, 0.0), LiftPrior("b", 9, -0.05, 0.01, 0.0)):
        real, ceiling, _ = assurance(0.03, prior, n, n, 1.96)
        assert real <= ceiling + 1e-12
    real, ceiling, _ = assurance(0.03, LiftPrior("c", 9, 0.02, 0.03, 0.0), 10**14, 10**14, 1.96)
    assert real == pytest.approx(ceiling, abs=1e-4)  # an enormous test finds (almost) every real gain


def test_warning_when_hoped_lift_is_beyond_history() -> None:
    prior = LiftPrior("theme x", 12, 0.01, 0.015, 0.0001)
    plan = plan_test(0.03, 0.15, prior=prior)
    assert any("rarely move conversion by that much" in w for w in plan.warnings)
    assert not any("rarely" in w for w in plan_test(0.03, 0.02, prior=prior).warnings)


def test_informed_lift_is_the_normal_normal_update() -> None:
    prior = LiftPrior("x", 10, 0.01, 0.02, 0.0)
    result = informed_lift("b", math.log(1.15), 0.05, prior, minimum_lift=0.05)
    weight = (1 / 0.05**2) / (1 / 0.05**2 + 1 / 0.02**2)
    assert result.weight_on_data == pytest.approx(weight)
    assert math.log1p(result.shrunk_lift) == pytest.approx(weight * math.log(1.15) + (1 - weight) * 0.01)
    assert result.shrunk_lift < 0.05 < 0.15  # a surprising +15% on a theme that rarely exceeds +2% shrinks hard


def test_prior_for_a_tested_and_an_untested_theme() -> None:
    _, effects = load_archive_effects(ROOT / "records")
    direct = lift_prior(effects, "social-proof")
    assert direct.warning is None and direct.comparisons >= 5 and 0 < direct.weight_on_theme < 1
    whole = lift_prior(effects, "no-such-theme")
    assert whole.comparisons == 0 and whole.weight_on_theme == 0 and "no comparison" in (whole.warning or "")
    assert whole.sd > direct.sd  # a theme never tested gets the archive mean widened by the between-theme spread
    assert "half-normal" in direct.hyperprior  # the prior used is stated


def test_history_grid_integrates_the_stated_hyperprior() -> None:
    # With no information in the data (variances of 1e6) the posterior is the hyperprior: E[tau^2] under tau uniform
    # on [0, 0.3] is 0.3^2 / 3 = 0.03, E[omega] under omega half-normal(0.02) truncated at 0.3 is 0.02 sqrt(2 / pi)
    # to 1e-100 (scipy.stats.halfnorm(scale=0.02).mean()); the 48-point grid integrates both to about 1e-3.
    from scipy.stats import halfnorm

    from archive.planning.priors import DEFAULT_HYPERPRIOR, history_grid

    tau2, omega2, log_prior = history_grid(DEFAULT_HYPERPRIOR)
    sums = ThemeSums.empty(tau2, 3)
    sums.add(np.array([0.1, -0.2, 0.05]), np.full(3, 1e6), np.array([0, 1, 2]))
    post = fit_history(sums, omega2, log_prior, DEFAULT_HYPERPRIOR.mean_sd).predict(0)
    assert post.tau2 == pytest.approx(0.3**2 / 3, rel=2e-3)
    assert post.omega == pytest.approx(halfnorm(scale=0.02).mean(), rel=2e-3)


def test_refined_grid_agrees_with_a_fine_grid_on_a_large_archive() -> None:
    # 3,000 invented comparisons of large tests (v 1e-5 to 1e-4) pin tau down far below the coarse spacing: the
    # refined answer must match a brute-force 1,200 x 1,200 grid (same model, same prior) to 1e-3 of the sd.
    import archive.planning.priors as priors

    rng = np.random.default_rng(5)
    theme = rng.integers(0, 12, 3000)
    v = rng.uniform(1e-5, 1e-4, 3000)
    y = rng.normal(0.01, 0.015, 12)[theme] + rng.normal(0, np.sqrt(v + 0.0004))
    hyper = priors.DEFAULT_HYPERPRIOR
    coarse_grid = priors.history_grid(hyper)
    sums = ThemeSums.empty(coarse_grid[0], 12)
    sums.add(y, v, theme)
    coarse = priors.fit_history(sums, coarse_grid[1], coarse_grid[2], hyper.mean_sd)
    assert coarse.weights.max() > priors.REFINE_ABOVE  # the case the refinement is for
    refined = priors.fit_refined(y, v, theme, 12, hyper, coarse).predict(3)
    u = (np.arange(1200) + 0.5) / 1200
    spread = hyper.spread_max * u**2
    log_prior = np.log(u)[:, None] + (np.log(u) - spread**2 / (2 * hyper.between_themes_scale**2))[None, :]
    fine_sums = ThemeSums.empty(spread**2, 12)
    fine_sums.add(y, v, theme)
    fine = priors.fit_history(fine_sums, spread**2, log_prior, hyper.mean_sd).predict(3)
    assert refined.sd == pytest.approx(fine.sd, rel=1e-3) and refined.mean == pytest.approx(fine.mean, abs=1e-6)
    assert abs(coarse.predict(3).sd - fine.sd) > abs(refined.sd - fine.sd)


def test_a_secondary_theme_counts_its_comparisons() -> None:
    _, effects = load_archive_effects(ROOT / "records")
    tagged = [
        dataclasses.replace(e, themes=[*e.themes, "free-returns"]) if e.themes[0] == "shipping-cost" else e
        for e in effects
    ]
    prior = lift_prior(tagged, "free-returns")
    shipping = lift_prior(effects, "shipping-cost")
    assert prior.comparisons == shipping.comparisons > 0 and prior.warning is None
    assert prior.mean == pytest.approx(shipping.mean, rel=1e-12) and prior.sd == pytest.approx(shipping.sd, rel=1e-12)


def _history_sums(rng: np.random.Generator) -> tuple[ThemeSums, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    y = rng.normal(0.02, 0.04, 14)
    v = rng.uniform(0.0004, 0.003, 14)
    theme = np.array([0, 0, 0, 0, 0, 1, 1, 1, 2, 2, 2, 2, 2, 2])
    tau2 = np.array([0.0, 0.0004, 0.002])
    sums = ThemeSums.empty(tau2, 4)  # theme 3 has no comparisons
    sums.add(y, v, theme)
    return sums, y, v, theme, tau2


@pytest.mark.parametrize("target", [0, 1, 3])
def test_history_model_matches_gaussian_conditioning(target: int) -> None:
    # Independent implementation: for each (tau^2, omega^2) grid point, the joint normal of the estimates and a
    # new comparison's true effect in the target theme (M ~ N(0, s^2), theme means ~ N(M, omega^2), true effects
    # ~ N(theme mean, tau^2)), conditioned with numpy.linalg; grid weights from scipy.stats.multivariate_normal
    # times the prior weight. The closed forms of archive.planning.priors.predictive must agree to rounding.
    from scipy.stats import multivariate_normal

    rng = np.random.default_rng(11)
    sums, y, v, theme, tau2 = _history_sums(rng)
    omega2 = np.array([1e-4, 6e-4])
    log_prior = np.log(rng.uniform(0.2, 1.0, (3, 2)))
    mean_sd = 0.03
    post = fit_history(sums, omega2, log_prior, mean_sd).predict(target)
    same = (theme[:, None] == theme[None, :]).astype(float)
    log_w, means, variances = np.zeros((3, 2)), np.zeros((3, 2)), np.zeros((3, 2))
    for i, t2 in enumerate(tau2):
        for j, o2 in enumerate(omega2):
            cov = mean_sd**2 + o2 * same + np.diag(t2 + v)
            cross = mean_sd**2 + o2 * (theme == target)  # Cov(y_i, new true effect)
            log_w[i, j] = multivariate_normal(np.zeros(len(y)), cov).logpdf(y) + log_prior[i, j]
            means[i, j] = cross @ np.linalg.solve(cov, y)
            variances[i, j] = mean_sd**2 + o2 + t2 - cross @ np.linalg.solve(cov, cross)
    weights = np.exp(log_w - log_w.max())
    weights /= weights.sum()
    np.testing.assert_allclose(post.weights, weights, rtol=1e-9)
    np.testing.assert_allclose(post.means, means, rtol=1e-9, atol=1e-14)
    np.testing.assert_allclose(post.variances, variances, rtol=1e-9)


def test_history_model_on_the_eight_schools() -> None:
    # Gelman et al., BDA3 section 5.5, Table 5.3: the eight schools (Rubin 1981) under the hierarchical normal model
    # with a uniform prior on the mean and on the between-school sd. Our model with each school a theme of one
    # comparison, tau = 0, a flat prior on M and omega on a fine uniform grid is that model. The table's quantiles
    # come from 200 simulation draws and are rounded to whole points (values from memory), hence the tolerances.
    from scipy import optimize

    y = np.array([28.0, 8, -3, 7, -1, 1, 18, 12])
    sigma = np.array([15.0, 10, 16, 11, 9, 11, 10, 18])
    table = {0: (-2, 7, 10, 16, 31), 2: (-11, 2, 7, 11, 19), 6: (-1, 7, 10, 15, 26)}  # schools A, C, G
    sums = ThemeSums.empty(np.array([0.0]), 8)
    sums.add(y, sigma**2, np.arange(8))
    omega = np.linspace(0.005, 79.995, 8000)
    for school, expected in table.items():
        post = fit_history(sums, omega**2, np.zeros((1, len(omega))), 1e8).predict(school)
        got = [optimize.brentq(lambda x, p=p, f=post.cdf: f(x) - p, -200, 200) for p in (0.025, 0.25, 0.5, 0.75, 0.975)]
        for value, published, tolerance in zip(got, expected, (4, 2, 1.5, 2, 4), strict=True):
            assert abs(value - published) <= tolerance, (school, got)


@pytest.fixture(scope="module")
def generator_archives() -> list[list[Effect]]:
    """The effects of ten seeded demo-generator archives (scripts/make_demo.py: known true effects)."""
    import sys

    sys.path.insert(0, str(ROOT / "scripts"))
    import make_demo

    from archive.analysis.settings import Settings
    from archive.pooling.effects import archive_effects
    from archive.records.model import Record

    out = []
    for seed in range(1, 11):
        records = ((Record.model_validate(t.record), None) for t in make_demo.build_archive(seed))
        out.append(archive_effects(records, Settings(bootstrap_replicates=20)))
    return out


def test_history_forecasts_are_calibrated_on_the_demo_generator(generator_archives: list[list[Effect]]) -> None:
    # Seeded simulation with known truth (scripts/make_demo.py, seeds 1-10, about 700 forecasts): in every
    # reliability bin with at least 20 forecasts the mean forecast P(significant win) lies inside the 99% Jeffreys
    # interval of the observed share (99% per bin keeps the chance of a false alarm over five bins near 5%).
    # The earlier prior (each theme's own REML fit, the whole archive below five comparisons) failed this on these
    # seeds: forecasts under 5% averaged 2.4% against 6.3% observed. scripts/check_calibration.py runs 40 seeds.
    from scipy import stats

    from archive.planning.calibration import reliability_table, replay, scores

    replays = [replay(effects) for effects in generator_archives]
    rows = [row for done in replays for row in done.forecasts()]
    assert len(rows) > 600
    checked = 0
    for b in reliability_table(rows):
        if b.forecasts < 20:
            continue
        wins = round((b.observed or 0.0) * b.forecasts)
        low, high = stats.beta.ppf([0.005, 0.995], wins + 0.5, b.forecasts - wins + 0.5)
        assert low <= (b.mean_forecast or 0.0) <= high, b
        checked += 1
    assert checked >= 4
    history = [scores(done) for done in replays]
    pooled = {
        name: np.mean([getattr(c, name).brier for c in history if getattr(c, name)]) for name in ("history", "flat")
    }
    running = np.mean([c.running.brier for c in history if c.running])
    assert pooled["history"] < running < pooled["flat"]


def test_calibration_on_demo_archive_beats_a_flat_prior() -> None:
    from archive.planning.calibration import calibrate

    _, effects = load_archive_effects(ROOT / "records")
    result = calibrate(effects)
    assert result.history.forecasts > 40
    assert result.history.brier is not None and result.flat.brier is not None
    assert result.history.brier < result.flat.brier
    assert result.history.coverage is not None and 0.85 <= result.history.coverage <= 1.0


def test_cli_prior_plan_calibrate(tmp_path: Path) -> None:
    records = tmp_path / "records"
    shutil.copytree(ROOT / "records", records)
    assert runner.invoke(app, ["index", "--records", str(records)]).exit_code == 0
    result = runner.invoke(app, ["prior", "--theme", "social-proof", "--records", str(records), "-f", "json"])
    assert result.exit_code == 0, result.output
    assert 0 < json.loads(result.stdout)["prob_positive"] < 1
    result = runner.invoke(
        app,
        ["prior", "--theme", "social-proof", "--page-area", "product-page", "--records", str(records), "-f", "yaml"],
    )
    assert result.exit_code == 0 and "  prior:" in result.stdout and "mean_log_lift" in result.stdout
    args = [
        "plan",
        "--minimum-lift",
        "0.05",
        "--page-area",
        "product-page",
        "--theme",
        "social-proof",
        "--daily-visitors",
        "9000",
        "--records",
        str(records),
        "--write",
        "2026-03-bundle-badge",
        "--title",
        "X",
    ]
    result = runner.invoke(app, args)
    assert result.exit_code == 0, result.output
    assert "assurance" in result.stdout and "ceiling" in result.stdout and "whole weeks" in result.stdout
    written = records / "2026-03-bundle-badge.yaml"
    assert "status: planned" in written.read_text()
    assert runner.invoke(app, ["check", "--records", str(records)]).exit_code == 0
    before = written.read_bytes()
    assert runner.invoke(app, args).exit_code == 1 and written.read_bytes() == before  # never overwrites
    result = runner.invoke(app, ["calibrate", "--records", str(records), "-f", "json"])
    assert result.exit_code == 0 and json.loads(result.stdout)["history"]["forecasts"] > 0
    result = runner.invoke(
        app, ["analyze", "2024-11-gift-wrap-checkbox", "--records", str(records), "--prior", "history", "-f", "json"]
    )
    data = json.loads(result.stdout)
    (item,) = data["history_prior"]["comparisons"]
    assert item["shrunk_lift"] < item["observed_lift"]


def test_calibration_running_baseline_and_reliability_table() -> None:
    import datetime as dt

    from statsmodels.stats.proportion import proportion_confint

    from archive.planning.calibration import calibrate
    from archive.pooling.effects import Effect

    def effect(i: int, log_rr: float) -> Effect:
        return Effect(
            record_id=f"r{i:02d}",
            arm="b",
            title="t",
            themes=["x"],
            page_area="home",
            tags=[],
            started=dt.date(2024, 1, 1) + dt.timedelta(days=7 * i),
            log_rr=log_rr,
            variance=0.0004,
            visitors=1000,
            control_visitors=1000.0,
            control_share=1,
            zero_cell_correction=False,
            verdict="flat",
            shipped=False,
            trusted=True,
        )

    # se 0.02: a significant win needs log_rr > 1.96 x 0.02; three wins among the first ten, then one of two
    lifts = [0.06, 0.0, 0.01, 0.05, -0.02, 0.0, 0.07, 0.01, -0.01, 0.02, 0.08, 0.0]
    result = calibrate([effect(i, x) for i, x in enumerate(lifts)])
    assert result.history.forecasts == 2 and result.running is not None
    # running win rate, by hand: (3 + 1/2) / (10 + 1) before the 11th test, (4 + 1/2) / (11 + 1) before the 12th;
    # the 11th won, the 12th did not
    f11, f12 = 3.5 / 11, 4.5 / 12
    assert result.running.brier == pytest.approx(((f11 - 1) ** 2 + f12**2) / 2, rel=1e-12)
    assert sum(b.forecasts for b in result.reliability) == 2
    for b in result.reliability:
        if b.forecasts:
            wins = round((b.observed or 0.0) * b.forecasts)
            # statsmodels proportion_confint(method="jeffreys") for the bin's observed share
            low, high = proportion_confint(wins, b.forecasts, method="jeffreys")
            assert b.observed_high == pytest.approx(1.0 if wins == b.forecasts else high, rel=1e-9)
            assert b.observed_low == pytest.approx(0.0 if wins == 0 else low, abs=1e-12)


def test_plan_false_positive_risk_uses_the_ship_rule() -> None:
    # two arms: the ship rule's false-win rate is the positive side of a two-sided 0.05 test, 0.025; a theme win
    # rate of 0.025 + 0.1 x (0.8 - 0.025) then implies pi = 0.10, and Kohavi, Deng & Vermeer (2022) give FPR 22.0%
    # at alpha 0.05 and power 0.8 (check-values §11)
    plan = plan_test(0.03, 0.05, theme_win_rate=0.025 + 0.1 * 0.775)
    assert plan.false_win_rate == pytest.approx(0.025, abs=0.0015)
    assert plan.theme_success_rate == pytest.approx(0.10, abs=0.005)
    assert plan.false_positive_risk == pytest.approx(0.220, abs=0.005)
    # four arms: Holm over three comparisons wins a null comparison far less often (about 0.05 / 6), so the same
    # theme history gives a smaller risk per winner
    four = plan_test(0.03, 0.05, arms=4, theme_win_rate=0.025 + 0.1 * 0.775)
    assert four.false_win_rate is not None and four.false_win_rate < 0.012
    assert four.false_positive_risk is not None and four.false_positive_risk < 0.12
