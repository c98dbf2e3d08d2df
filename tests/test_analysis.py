"""The per-test analysis on constructed records (invented numbers chosen to produce each situation)."""

from __future__ import annotations

import datetime as dt
import json
import math
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import yaml
from typer.testing import CliRunner

from archive.analysis import CannotAnalyze, Settings, analyze
from archive.analysis.verdict import VerdictRules, null_ship_rates
from archive.cli.main import app
from archive.records.load import load_record
from archive.records.model import Record
from archive.stats.power import visitors_per_arm

runner = CliRunner()


def record(arms: list[dict[str, Any]], **extra: Any) -> Record:
    data: dict[str, Any] = {
        "id": "t",
        "title": "Constructed test",
        "status": "finished",
        "started": dt.date(2025, 3, 3),
        "ended": dt.date(2025, 3, 30),
        "page_area": "checkout",
        "themes": ["checkout-friction"],
        "hypothesis": "h",
        "plan": {"visitors_per_arm": 1000, "minimum_lift": 0.05, "split": {a["name"]: 1.0 for a in arms}},
        "arms": arms,
    }
    data.update(extra)
    return Record.model_validate(data)


def arm(name: str, visitors: int, conversions: int, **extra: Any) -> dict[str, Any]:
    return {"name": name, "control": name == "control", "visitors": visitors, "conversions": conversions, **extra}


def test_clear_winner_is_shipped() -> None:
    r = record([arm("control", 50_000, 1500), arm("b", 50_000, 1700)], decision={"outcome": "ship", "arm": "b"})
    a = analyze(r)
    (c,) = a.comparisons
    assert c.verdict == "winner" and c.prob_beat_control > 0.999 and c.p_holm < 0.001
    assert a.recommendation.action == "ship" and a.recommendation.arm == "b"
    assert a.recommendation.agrees_with_record is True
    assert c.lift == pytest.approx(1700 / 1500 - 1)


def test_sample_ratio_mismatch_downgrades_every_verdict() -> None:
    # 51.5% / 48.5% of 100,000 visitors against a 50/50 plan: chi-square 36, p ~ 2e-9
    r = record([arm("control", 48_500, 1455), arm("b", 51_500, 1750)])
    a = analyze(r)
    srm = next(c for c in a.checks if c.name == "sample ratio")
    assert srm.status == "failed" and srm.p_value is not None and srm.p_value < 1e-6
    (c,) = a.comparisons
    assert c.verdict == "leaning-better" and c.downgraded_by == ["sample ratio"]
    assert not a.trusted


def test_planned_split_is_respected() -> None:
    arms = [arm("control", 8100, 243), arm("b", 1900, 57)]
    r = record(arms, plan={"visitors_per_arm": 1000, "split": {"control": 80, "b": 20}})
    srm = next(c for c in analyze(r).checks if c.name == "sample ratio")
    # 8100 / 1900 against 80/20: chi-square 6.25, p 0.0124193307 (check-values §5, recomputed): no alarm at 0.001
    assert srm.status == "ok" and srm.p_value == pytest.approx(0.0124193307, rel=1e-6)


def test_flat_multi_arm_keeps_control() -> None:
    arms = [arm("control", 400_000, 12_000), arm("b", 400_000, 12_010), arm("c", 400_000, 11_990)]
    a = analyze(record(arms, plan={"visitors_per_arm": 300_000, "minimum_lift": 0.05}))
    assert [c.verdict for c in a.comparisons] == ["flat", "flat"]
    assert a.recommendation.action == "keep-control"
    assert math.isclose(sum(x.prob_best for x in a.arms), 1.0, abs_tol=1e-9)


def test_early_analysis_fails_the_sample_check() -> None:
    r = record([arm("control", 500, 15), arm("b", 500, 30)], status="stopped-early")
    check = next(c for c in analyze(r).checks if c.name == "planned sample")
    assert check.status == "failed" and "did not run to a planned end" in check.detail


def test_iterate_with_the_arms_worth_keeping() -> None:
    arms = [arm("control", 20_000, 600), arm("b", 20_000, 640), arm("c", 20_000, 520), arm("d", 20_000, 610)]
    a = analyze(record(arms, plan={"visitors_per_arm": 20_000, "minimum_lift": 0.05, "alpha": 0.05, "power": 0.8}))
    verdicts = {c.arm: c.verdict for c in a.comparisons}
    assert verdicts["c"] == "loser"
    rec = a.recommendation
    assert rec.action == "iterate" and "c" not in rec.keep_arms and rec.keep_arms
    # the retest size is the two-proportion formula at the observed baseline, Bonferroni over the kept arms
    expected = math.ceil(visitors_per_arm(0.03, 0.03 * 1.05, alpha=0.05 / len(rec.keep_arms), power=0.8))
    assert rec.visitors_per_arm_needed == expected


def test_trade_off_between_conversion_and_revenue() -> None:
    # b converts more visitors but with much smaller baskets; sums of squares make the RPV noise known
    control = arm("control", 50_000, 1500, orders=1500, revenue=90_000.0, revenue_sum_of_squares=1500 * 60.0**2 * 1.2)
    b = arm("b", 50_000, 1750, orders=1750, revenue=61_250.0, revenue_sum_of_squares=1750 * 35.0**2 * 1.2)
    a = analyze(record([control, b]))
    (c,) = a.comparisons
    assert c.verdict == "trade-off" and c.revenue.method == "sum-of-squares"
    assert c.revenue.difference_high is not None and c.revenue.difference_high < 0


def test_revenue_missing_for_some_arms() -> None:
    a = analyze(record([arm("control", 10_000, 300, revenue=15_000.0), arm("b", 10_000, 320)]))
    assert a.comparisons[0].revenue.method == "missing"
    assert a.arms[1].revenue_per_visitor is None


def test_point_estimates_only_without_variance() -> None:
    a = analyze(record([arm("control", 10_000, 300, revenue=15_000.0), arm("b", 10_000, 320, revenue=16_000.0)]))
    rev = a.comparisons[0].revenue
    assert rev.method == "point-estimates-only" and rev.difference_low is None and "point estimates only" in rev.note


@pytest.mark.parametrize(
    ("control", "treatment"),
    [((5000, 0), (5000, 0)), ((5000, 0), (5000, 7)), ((40, 40), (40, 40)), ((12, 3), (9, 0))],
    ids=["nobody converts", "zero in control", "everybody converts", "tiny"],
)
def test_edge_counts_still_analyse(control: tuple[int, int], treatment: tuple[int, int]) -> None:
    a = analyze(record([arm("control", *control), arm("b", *treatment)]))
    c = a.comparisons[0]
    assert 0 <= c.p_value <= 1 and 0 <= c.prob_beat_control <= 1
    assert c.verdict in ("winner", "loser", "flat", "inconclusive", "leaning-better", "leaning-worse")
    json.dumps(a.to_dict())  # every figure is JSON-safe (no NaN or infinity)


def test_huge_counts_significant_but_too_small_is_not_a_win() -> None:
    # +0.1% at a billion visitors per arm: significant, but inside the +/-5% margin that matters
    a = analyze(record([arm("control", 10**9, 30_000_000), arm("b", 10**9, 30_030_000)]))
    c = a.comparisons[0]
    assert c.lift == pytest.approx(0.001) and c.significant and c.verdict == "flat"
    assert "too small to matter" in c.reason and a.recommendation.action == "keep-control"


def test_cannot_analyse_one_arm_or_no_visitors() -> None:
    with pytest.raises(CannotAnalyze, match="at least one other arm"):
        analyze(record([arm("control", 100, 3)]))
    with pytest.raises(CannotAnalyze, match="no visitors"):
        analyze(record([arm("control", 100, 3), arm("b", 0, 0)]))
    planned = record([{"name": "control", "control": True}, {"name": "b"}], status="planned")
    with pytest.raises(CannotAnalyze, match="no results yet"):
        analyze(planned)


def _write_orders_record(folder: Path, orders_t: np.ndarray, orders_c: np.ndarray, n: int) -> Path:
    rows = ["arm,order_id,value"]
    rows += [f"control,c{i},{v:.2f}" for i, v in enumerate(orders_c)]
    rows += [f"b,b{i},{v:.2f}" for i, v in enumerate(orders_t)]
    (folder / "t-orders.csv").write_text("\n".join(rows) + "\n")
    data = record(
        [
            arm("control", n, len(orders_c), orders=len(orders_c), revenue=float(np.round(orders_c, 2).sum())),
            arm("b", n, len(orders_t), orders=len(orders_t), revenue=float(np.round(orders_t, 2).sum())),
        ],
        orders_file="t-orders.csv",
    ).model_dump(exclude_none=True)
    path = folder / "t.yaml"
    path.write_text(yaml.safe_dump(data, sort_keys=False))
    return path


def test_extreme_orders_case(tmp_path: Path) -> None:
    rng = np.random.default_rng(4)
    orders_c = rng.lognormal(3.8, 0.5, 300)
    orders_t = np.concatenate([rng.lognormal(3.8, 0.5, 299), [4000.0]])  # one bulk order
    path = _write_orders_record(tmp_path, orders_t, orders_c, 10_000)
    loaded, problems = load_record(path)
    assert loaded is not None and loaded.orders is not None, problems
    a = analyze(loaded.record, loaded.orders, Settings(bootstrap_replicates=500))
    rev = a.comparisons[0].revenue
    assert rev.method == "orders-file" and rev.bootstrap is not None and rev.extreme_orders is not None
    assert rev.extreme_orders.top_share_of_difference is not None and rev.extreme_orders.top_share_of_difference > 0.5
    assert rev.capped_difference is not None and rev.difference is not None
    assert abs(rev.capped_difference) < abs(rev.difference)
    assert rev.bootstrap.difference_low < rev.difference < rev.bootstrap.difference_high


def test_cli_analyze_formats_and_plot(tmp_path: Path) -> None:
    rng = np.random.default_rng(4)
    path = _write_orders_record(tmp_path, rng.lognormal(3.8, 0.5, 320), rng.lognormal(3.8, 0.5, 300), 10_000)
    assert runner.invoke(app, ["index", "--records", str(tmp_path)]).exit_code == 0
    result = runner.invoke(app, ["analyze", "t", "--records", str(tmp_path), "--format", "json", "--replicates", "200"])
    assert result.exit_code == 0, result.output
    data = json.loads(result.stdout)
    assert set(data) == {
        "id",
        "title",
        "status",
        "control",
        "assumptions",
        "checks",
        "arms",
        "comparisons",
        "recommendation",
        "settings",
        "rule",
        "null_ship_rate",
        "segments",
        "history_prior",
    }
    assert data["segments"] is None and data["history_prior"] is None  # present, empty, unless asked for
    assert data["comparisons"][0]["revenue"]["bootstrap"]["replicates"] == 200
    plot = tmp_path / "lift.svg"
    result = runner.invoke(app, ["analyze", "--file", str(path), "--format", "markdown", "--plot", str(plot)])
    assert result.exit_code == 0 and result.stdout.startswith("# Constructed test")
    assert "## Assumptions" in result.stdout and "Fixed horizon" in result.stdout
    svg = plot.read_bytes()
    assert svg.startswith(b"<?xml") and b"<svg" in svg
    runner.invoke(app, ["analyze", "--file", str(path), "--format", "markdown", "--plot", str(plot)])
    assert plot.read_bytes() == svg  # deterministic plot
    result = runner.invoke(app, ["analyze", "t", "--records", str(tmp_path)])
    assert result.exit_code == 0 and "Trust checks" in result.stdout and "Recommendation:" in result.stdout


def test_cli_analyze_errors(tmp_path: Path) -> None:
    result = runner.invoke(app, ["analyze", "nope", "--records", str(tmp_path)])
    assert result.exit_code == 1 and "run `archive index` first" in result.stderr  # no store yet: none is made
    assert runner.invoke(app, ["index", "--records", str(tmp_path)]).exit_code == 0
    result = runner.invoke(app, ["analyze", "nope", "--records", str(tmp_path)])
    assert result.exit_code == 1 and "no test 'nope'" in result.stderr
    (tmp_path / "x.yaml").write_text("id: x\n")
    result = runner.invoke(app, ["analyze", "x", "--records", str(tmp_path)])
    assert result.exit_code == 1 and "required field is missing" in result.stdout
    result = runner.invoke(app, ["analyze", "--records", str(tmp_path)])
    assert result.exit_code == 2 and "either a test ID or --file" in result.stderr


def _keys(value: Any, prefix: str = "") -> set[str]:
    out: set[str] = set()
    if isinstance(value, dict):
        for k, v in value.items():
            out.add(k)
            out |= _keys(v, k)
    elif isinstance(value, list):
        for item in value:
            out |= _keys(item, prefix)
    return out


def test_every_json_key_is_documented(tmp_path: Path) -> None:
    rng = np.random.default_rng(4)
    path = _write_orders_record(tmp_path, rng.lognormal(3.8, 0.5, 320), rng.lognormal(3.8, 0.5, 300), 10_000)
    loaded, _ = load_record(path)
    assert loaded is not None
    data = analyze(loaded.record, loaded.orders, Settings(bootstrap_replicates=100)).to_dict()
    doc = (Path(__file__).resolve().parents[1] / "site" / "reference" / "analysis-json.md").read_text()
    documented = set(__import__("re").findall(r"`([a-z_]+)`", doc))
    assert _keys(data) - documented == set()


# --- the ship rule: issue examples, gates, guardrail, and its error rate by seeded simulation -------------------


def test_probability_alone_no_longer_ships_a_null_arm() -> None:
    # control 600/20000, b 662/20000 and three null arms: P(beats control) 0.962 but Holm p 0.305
    arms = [arm("control", 20_000, 600), arm("b", 20_000, 662)] + [arm(x, 20_000, 600) for x in "cde"]
    a = analyze(record(arms, plan={"visitors_per_arm": 20_000, "minimum_lift": 0.05}))
    b = a.comparisons[0]
    assert b.prob_beat_control > 0.95 and b.p_holm > 0.05 and not b.significant
    assert b.verdict == "leaning-better" and a.recommendation.action != "ship"
    # the opt-in probability rule ships it, and says what that costs in false wins
    opt_in = Settings(rules=VerdictRules(ship_on_probability=True))
    a = analyze(record(arms, plan={"visitors_per_arm": 20_000, "minimum_lift": 0.05}), settings=opt_in)
    assert a.comparisons[0].verdict == "winner" and "null ship rate" in a.comparisons[0].reason
    assert a.null_ship_rate is not None and a.null_ship_rate > 0.1 and "opt-in probability rule" in a.rule


def test_stopped_early_without_plan_does_not_ship() -> None:
    r = record([arm("control", 3000, 90), arm("b", 3000, 122)], status="stopped-early", plan=None)
    a = analyze(r)
    assert next(c for c in a.checks if c.name == "planned sample").status == "failed"
    assert a.recommendation.action != "ship"


def test_running_test_fails_the_planned_sample_check_even_past_its_size() -> None:
    r = record([arm("control", 50_000, 1500), arm("b", 50_000, 1700)], status="running")
    a = analyze(r)
    assert next(c for c in a.checks if c.name == "planned sample").status == "failed"
    assert a.comparisons[0].verdict == "leaning-better" and a.recommendation.action != "ship"


def test_without_plan_a_few_conversions_never_ship() -> None:
    # 2 vs 8 conversions of 20 visitors each: below the common-practice floor of conversions per arm
    a = analyze(record([arm("control", 20, 2), arm("b", 20, 8)], plan=None))
    check = next(c for c in a.checks if c.name == "planned sample")
    assert check.status == "warning" and "common practice" in check.detail
    assert a.comparisons[0].verdict != "winner" and a.recommendation.action != "ship"
    # enough conversions but no plan: only a warning, and the memo says the horizon cannot be verified
    a = analyze(record([arm("control", 50_000, 1500), arm("b", 50_000, 1700)], plan=None))
    check = next(c for c in a.checks if c.name == "planned sample")
    assert check.status == "warning" and "unverifiable" in check.detail
    assert a.recommendation.action == "ship"


def test_revenue_down_without_variance_blocks_the_ship() -> None:
    # conversion up clearly; revenue per visitor down 20% with no sums of squares
    control = arm("control", 50_000, 1500, revenue=90_000.0)
    b = arm("b", 50_000, 1700, revenue=72_000.0)
    a = analyze(record([control, b]))
    c = a.comparisons[0]
    assert c.significant and c.revenue_guardrail == "not-shown" and c.verdict == "leaning-better"
    assert a.recommendation.action == "iterate" and "revenue" in a.recommendation.explanation


def test_revenue_not_shown_non_inferior_blocks_the_ship() -> None:
    # RPV -8% with an interval spanning 0 (sums of squares known): not shown to be no worse than -5%
    control = arm("control", 50_000, 1500, revenue=90_000.0, revenue_sum_of_squares=1500 * 60.0**2 * 4)
    b = arm("b", 50_000, 1700, revenue=82_800.0, revenue_sum_of_squares=1700 * 48.7**2 * 4)
    a = analyze(record([control, b]))
    c = a.comparisons[0]
    assert c.revenue.lift == pytest.approx(-0.08)
    assert c.revenue.lift_low is not None and c.revenue.lift_high is not None
    assert c.revenue.lift_low < 0 < c.revenue.lift_high
    assert c.revenue_guardrail == "not-shown" and a.recommendation.action != "ship"


def test_revenue_unchecked_ship_is_marked_and_recommendation_mentions_revenue() -> None:
    a = analyze(record([arm("control", 50_000, 1500, revenue=90_000.0), arm("b", 50_000, 1700, revenue=95_000.0)]))
    assert a.recommendation.action == "ship" and "revenue unchecked" in a.recommendation.explanation
    flat = [arm("control", 400_000, 12_000), arm("b", 400_000, 12_010)]
    assert "revenue" in analyze(record(flat, plan={"visitors_per_arm": 300_000})).recommendation.explanation


def test_zero_cell_point_estimate_lies_inside_its_interval() -> None:
    # 0/500 against 12/500: the observed lift is -100%; its interval must contain it
    c = analyze(record([arm("control", 500, 12), arm("b", 500, 0)])).comparisons[0]
    assert c.lift == -1.0 and c.lift_low is not None and c.lift_high is not None
    assert c.lift_low <= c.lift <= c.lift_high


def test_memo_answers_first_then_states_the_rule() -> None:
    from archive.render.analysis import build_memo

    a = analyze(record([arm("control", 50_000, 1500), arm("b", 50_000, 1700)]))
    memo = build_memo(a)
    assert memo.lead[0].startswith("Ship b: +13.3% conversion [") and "Trust checks passed" in memo.lead[0]
    assert memo.lead[1].startswith("Ship rule:") and "Holm" in memo.lead[1] and "%" in memo.lead[1]
    assert any("guardrail" in x for x in a.assumptions)


def _simulate(m_arms: int, n: int, rates: list[float], sims: int, seed: int) -> tuple[float, int]:
    """Share of seeded simulated tests that `analyze` recommends shipping (and how many were run)."""
    rng = np.random.default_rng(seed)
    names = ["control"] + [f"t{i}" for i in range(1, m_arms)]
    counts = rng.binomial(n, np.asarray(rates), size=(sims, m_arms))
    plan = {"visitors_per_arm": n, "minimum_lift": 0.05, "alpha": 0.05, "split": {x: 1.0 for x in names}}
    ships = 0
    for row in counts:
        r = record([arm(x, n, int(c)) for x, c in zip(names, row, strict=True)], plan=plan)
        ships += analyze(r).recommendation.action == "ship"
    return ships / sims, sims


@pytest.mark.parametrize(("m_arms", "sims"), [(2, 1200), (3, 700), (5, 400), (10, 200)])
def test_all_null_ship_rate_holds_alpha(m_arms: int, sims: int) -> None:
    # every arm at 3% with 20,000 visitors: the stated rule ships in at most alpha/2 = 0.025 of tests (Holm keeps
    # the family-wise error at alpha; only the positive side ships). Allowance: 3 Monte-Carlo standard errors.
    rate, runs = _simulate(m_arms, 20_000, [0.03] * m_arms, sims, seed=m_arms)
    mc_se = math.sqrt(0.025 * 0.975 / runs)
    assert rate <= 0.025 + 3 * mc_se
    derived, _ = null_ship_rates(m_arms - 1, 0.05, VerdictRules())
    assert derived <= 0.025 + 0.001 and abs(rate - derived) <= 3 * math.sqrt(derived * (1 - derived) / runs) + 0.004


def test_power_at_the_planned_lift_is_the_plans_power() -> None:
    # a 2-arm test sized by the two-proportion formula (R power.prop.test convention) for +5% on 3% at power 0.8
    n = math.ceil(visitors_per_arm(0.03, 0.0315, alpha=0.05, power=0.8))
    rate, runs = _simulate(2, n, [0.03, 0.0315], 500, seed=11)
    assert abs(rate - 0.8) <= 3 * math.sqrt(0.8 * 0.2 / runs)
