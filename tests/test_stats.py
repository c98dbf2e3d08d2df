"""Statistics against published values and reference libraries (each source named beside its check)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, special, stats

from archive.stats.bayes import (
    BetaPosterior,
    expected_loss,
    lift_cdf,
    lift_density,
    lift_interval,
    prob_best,
    prob_greater,
)
from archive.stats.power import power_two_rates, visitors_per_arm
from archive.stats.proportions import compare_rates, equivalence_test
from archive.stats.revenue import MeanSummary, extreme_order_check, poisson_bootstrap, welch
from archive.stats.srm import sample_ratio_test

# --- sample ratio mismatch ------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("observed", "weights", "chi2", "p"),
    [
        ([600, 400], [1, 1], 40.0, 2.5396285895e-10),  # Wikipedia "Sample ratio mismatch", Example
        ([20, 15, 25], [1, 1, 1], 2.5, 0.2865047969),  # R ?chisq.test example (stats-Ex.Rout.save)
        ([89, 37, 30, 28, 2], [40, 20, 20, 15, 5], 9.990143369, 0.0405940433),  # R ?chisq.test, rescale.p=TRUE
        ([16, 18, 16, 14, 12, 12], [1] * 6, 2.0, 0.84914503608460956),  # scipy.stats.chisquare docstring
        ([16, 18, 16, 14, 12, 12], [16, 16, 16, 16, 16, 8], 3.5, 0.62338762774958223),  # same docstring, f_exp
    ],
)
def test_sample_ratio(observed: list[int], weights: list[float], chi2: float, p: float) -> None:
    result = sample_ratio_test(observed, weights)
    assert result.chi_square == pytest.approx(chi2, rel=1e-8)
    assert result.p_value == pytest.approx(p, rel=1e-6)
    assert result.df == len(observed) - 1


def test_sample_ratio_rejects_bad_input() -> None:
    with pytest.raises(ValueError):
        sample_ratio_test([100], [1])
    with pytest.raises(ValueError):
        sample_ratio_test([0, 0], [1, 1])


# --- two rates ------------------------------------------------------------------------------------------


def test_katz_interval_fagerland_example() -> None:
    # Fagerland, Lydersen & Laake (2015), 7/34 vs 1/34; statsmodels test_proportion.py::test_confint_2indep prints
    # the Katz log interval [0.91, 54] and R PropCIs wald2ci [0.02916942, 0.32377176] for the difference.
    r = compare_rates(7, 34, 1, 34)
    assert 1 + r.lift_low == pytest.approx(0.9096055, rel=1e-6)  # recomputed from metafor's vi formula
    assert 1 + r.lift_high == pytest.approx(53.869506, rel=1e-6)
    assert round(1 + r.lift_low, 2) == 0.91 and round(1 + r.lift_high) == 54
    assert (r.difference_low, r.difference_high) == pytest.approx((0.02916942, 0.32377176), abs=1e-8)


def test_rates_100_vs_120_of_1000() -> None:
    # check-values §9 worked example; z^2 equals R prop.test(c(120,100), c(1000,1000), correct=FALSE) X^2 = 2.0429009
    r = compare_rates(120, 1000, 100, 1000)
    assert r.z == pytest.approx(1.4293008, rel=1e-7)
    assert r.z**2 == pytest.approx(2.0429009, rel=1e-7)
    assert r.p_value == pytest.approx(0.1529178, rel=1e-6)
    assert (1 + r.lift_low, 1 + r.lift_high) == pytest.approx((0.9341058, 1.5415813), rel=1e-6)
    assert r.lift == pytest.approx(0.2)


def test_rates_agree_with_statsmodels() -> None:
    from statsmodels.stats.proportion import confint_proportions_2indep, test_proportions_2indep

    # statsmodels: Katz log interval of the ratio and the pooled score z-test without correction
    low, high = confint_proportions_2indep(342, 10050, 310, 10000, method="log", compare="ratio")
    r = compare_rates(342, 10050, 310, 10000)
    assert (1 + r.lift_low, 1 + r.lift_high) == pytest.approx((low, high), rel=1e-10)
    sm = test_proportions_2indep(342, 10050, 310, 10000, method="score", compare="diff", correction=False)
    assert r.p_value == pytest.approx(sm.pvalue, rel=1e-6)


@pytest.mark.parametrize(
    ("x_t", "n_t", "x_c", "n_c"),
    [(0, 500, 0, 500), (500, 500, 500, 500), (0, 500, 12, 500), (7, 7, 3, 9), (1, 1, 0, 1)],
    ids=["no conversions", "everybody converts", "one arm zero", "one arm all", "tiny"],
)
def test_rates_edge_cases(x_t: int, n_t: int, x_c: int, n_c: int) -> None:
    r = compare_rates(x_t, n_t, x_c, n_c)
    assert 0 <= r.p_value <= 1
    if x_t + x_c in (0, n_t + n_c):
        assert r.lift is None and r.p_value == 1.0
    else:
        assert r.zero_cell_correction and math.isfinite(r.lift_low) and math.isfinite(r.lift_high)


def test_rates_huge_counts() -> None:
    r = compare_rates(30_300_000, 10**9, 30_000_000, 10**9)
    assert r.lift == pytest.approx(0.01) and r.p_value < 1e-100 and r.lift_low < 0.01 < r.lift_high


def test_rates_reject_no_visitors() -> None:
    with pytest.raises(ValueError, match="at least one visitor"):
        compare_rates(0, 0, 10, 100)
    with pytest.raises(ValueError, match="between 0 and visitors"):
        compare_rates(11, 10, 10, 100)


def test_equivalence_agrees_with_statsmodels() -> None:
    from statsmodels.stats.proportion import tost_proportions_2indep

    # statsmodels tost_proportions_2indep(compare="ratio", method="log"): TOST on the Katz log ratio
    for x_t, n_t, x_c, n_c, margin in [(3010, 100000, 3000, 100000, 0.05), (342, 10050, 310, 10000, 0.05)]:
        ours = equivalence_test(x_t, n_t, x_c, n_c, margin)
        sm = tost_proportions_2indep(x_t, n_t, x_c, n_c, 1 - margin, 1 + margin, method="log", compare="ratio")
        assert ours.p_value == pytest.approx(sm.pvalue, rel=1e-8)
    assert equivalence_test(3010, 100000, 3000, 100000, 0.05).equivalent
    assert not equivalence_test(342, 10050, 310, 10000, 0.05).equivalent


# --- Beta-Binomial --------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("b", "a", "expected"),
    [
        ((2, 1), (1, 1), 2 / 3),  # check-values §4 sanity case, exact
        ((8, 4), (4, 8), 56255 / 58786),  # A 3/10, B 7/10, uniform prior: exact fraction
        ((121, 881), (101, 901), 0.9231834390),  # A 100/1000, B 120/1000 (mpmath 30-digit quadrature)
        ((201, 1801), (201, 1801), 0.5),
        ((120.5, 880.5), (100.5, 900.5), 0.9236052321),  # Jeffreys prior: quadrature only
    ],
)
def test_prob_greater_reference_values(b: tuple[float, float], a: tuple[float, float], expected: float) -> None:
    # values from ../shared/reference/check-values.md §4 (Cook 2003 sum, scipy quad, mpmath), all recomputed
    assert prob_greater(BetaPosterior(*b), BetaPosterior(*a)) == pytest.approx(expected, abs=1e-9)
    assert prob_best([BetaPosterior(*a), BetaPosterior(*b)])[1] == pytest.approx(expected, abs=1e-7)


def _quad_best(posteriors: list[BetaPosterior], i: int) -> float:
    """Reference: scipy.integrate.quad of f_i * prod F_j over i's bulk (check-values §12: never over [0, 1])."""
    lo, hi = special.betaincinv(posteriors[i].alpha, posteriors[i].beta, [1e-13, 1 - 1e-13])

    def integrand(x: float) -> float:
        value = stats.beta.pdf(x, posteriors[i].alpha, posteriors[i].beta)
        for j, p in enumerate(posteriors):
            if j != i:
                value *= stats.beta.cdf(x, p.alpha, p.beta)
        return value

    return integrate.quad(integrand, lo, hi, epsabs=1e-12, epsrel=1e-10, limit=200)[0]


@pytest.mark.parametrize(
    "counts",
    [
        [(100, 1000), (120, 1000), (110, 1000)],
        [(3, 40), (0, 35), (9, 41), (5, 38), (1, 20)],  # tiny samples, a zero
        [(30_000 + 150 * i, 1_000_000) for i in range(20)],  # 20 arms, large counts
        [(10, 1000), (300, 1000), (305, 1000)],  # far-apart arms
    ],
    ids=["three arms", "tiny", "twenty arms", "far apart"],
)
def test_prob_best_against_quadrature(counts: list[tuple[int, int]]) -> None:
    posteriors = [BetaPosterior.from_counts(x, n) for x, n in counts]
    ours = prob_best(posteriors)
    reference = [_quad_best(posteriors, i) for i in range(len(posteriors))]
    assert ours == pytest.approx(reference, abs=1e-8)  # the rule is exact to about 1e-12 on this grid; quad to 1e-10
    assert ours.sum() == pytest.approx(1.0, abs=1e-9)


def test_prob_best_against_seeded_monte_carlo() -> None:
    posteriors = [BetaPosterior.from_counts(x, 2000) for x in (200, 215, 230, 190)]
    rng = np.random.default_rng(12)
    draws = np.stack([rng.beta(p.alpha, p.beta, 400_000) for p in posteriors])
    mc = np.bincount(draws.argmax(axis=0), minlength=4) / draws.shape[1]
    assert prob_best(posteriors) == pytest.approx(mc, abs=3e-3)  # MC error at 400k draws is about 1e-3


def test_expected_loss_and_lift_interval_against_monte_carlo() -> None:
    control, treatment = BetaPosterior(101, 901), BetaPosterior(121, 881)
    rng = np.random.default_rng(3)
    pc, pt = rng.beta(101, 901, 1_000_000), rng.beta(121, 881, 1_000_000)
    best = np.maximum(pc, pt)
    assert expected_loss([control, treatment]) == pytest.approx([np.mean(best - pc), np.mean(best - pt)], abs=5e-5)
    low, high = lift_interval(treatment, control)
    mc_low, mc_high = np.percentile(pt / pc - 1, [2.5, 97.5])
    assert (low, high) == pytest.approx((mc_low, mc_high), abs=5e-3)
    assert lift_cdf(treatment, control, 0.0) == pytest.approx(1 - 0.9231834390, abs=1e-7)  # = 1 - P(B > A), §4
    grid = np.linspace(-0.6, 1.5, 2001)
    assert np.trapezoid(lift_density(treatment, control, grid), grid) == pytest.approx(1.0, abs=1e-4)


def test_prob_greater_huge_counts_uses_quadrature() -> None:
    big_b = BetaPosterior.from_counts(10**8, 10**9)
    big_a = BetaPosterior.from_counts(10**8 - 10_000, 10**9)
    value = prob_greater(big_b, big_a)
    # normal approximation is excellent at this size (check-values §4 shows it is not at small sizes)
    m = [p.mean for p in (big_b, big_a)]
    v = [p.alpha * p.beta / ((p.alpha + p.beta) ** 2 * (p.alpha + p.beta + 1)) for p in (big_b, big_a)]
    assert value == pytest.approx(stats.norm.cdf((m[0] - m[1]) / math.sqrt(sum(v))), abs=1e-4)


def test_prior_must_be_positive() -> None:
    with pytest.raises(ValueError):
        BetaPosterior.from_counts(1, 10, prior=(0, 1))


# --- revenue --------------------------------------------------------------------------------------------


def _summary(values: list[float]) -> MeanSummary:
    return MeanSummary.of(np.array(values, dtype=float))


@pytest.mark.parametrize(
    ("x", "y", "low", "high", "df", "p"),
    [
        # R ?t.test example output (stats-Ex.Rout.save): t.test(1:10, y = c(7:20))
        (list(range(1, 11)), list(range(7, 21)), -11.052802, -4.947198, 21.98221234, 1.855e-05),
        # R: t.test(1:10, y = c(7:20, 200))
        (list(range(1, 11)), [*range(7, 21), 200], -47.242900, 6.376233, 14.165, 0.1245),
    ],
)
def test_welch_matches_r(x: list[float], y: list[float], low: float, high: float, df: float, p: float) -> None:
    result = welch(_summary(x), _summary(y))
    assert (result.difference_low, result.difference_high) == pytest.approx((low, high), abs=1e-6)
    assert result.df == pytest.approx(df, rel=1e-4)
    assert result.p_value == pytest.approx(p, rel=1e-3)


def test_welch_tost_clinic_data() -> None:
    # R equivalence::tost via statsmodels test_tost.py: Welch 90% CI [-0.2666862980722534, 0.596019631405587]
    g1 = [2.84, 2.51, 2.41, 2.95, 3.14, 3.79, 4.14, 3.85, 3.02, 3.45, 5.37, 3.81, 4.19, 3.16, 3.84]
    g2 = [2.60, 2.82, 2.18, 3.46, 4.01, 3.04, 3.47, 4.06, 2.91, 3.59, 4.51, 3.16, 3.86, 3.31, 3.02]
    result = welch(_summary(g1), _summary(g2), confidence=0.90)
    assert result.df == pytest.approx(26.7484787582315, rel=1e-10)
    assert (result.difference_low, result.difference_high) == pytest.approx(
        (-0.2666862980722534, 0.596019631405587), rel=1e-9
    )


def test_bootstrap_close_to_welch_on_large_sample() -> None:
    rng = np.random.default_rng(5)
    orders_t = rng.lognormal(3.9, 0.6, 3_000)
    orders_c = rng.lognormal(3.9, 0.6, 2_800)
    n_t = n_c = 100_000
    boot = poisson_bootstrap(orders_t, n_t, orders_c, n_c, replicates=2000, seed=1)
    w = welch(MeanSummary.of(orders_t, n_t), MeanSummary.of(orders_c, n_c))
    # the bootstrap and Welch intervals estimate the same sampling spread (tolerance: bootstrap noise, ~5%)
    width_boot = boot.difference_high - boot.difference_low
    width_welch = w.difference_high - w.difference_low
    assert width_boot == pytest.approx(width_welch, rel=0.08)
    assert boot.lift_low < w.lift < boot.lift_high


def test_extreme_orders() -> None:
    orders_c = np.full(100, 50.0)
    orders_t = np.concatenate([np.full(99, 50.0), [5000.0]])  # one bulk order makes the whole difference
    check = extreme_order_check(
        orders_t, 10_000, orders_c, 10_000, cap=float(np.percentile(np.r_[orders_t, orders_c], 99))
    )
    assert check.top_share_of_difference > 1  # all of the difference, and more: without it the sign flips
    assert not check.sign_survives  # without each arm's largest 1%, the treatment is behind
    assert check.capped_difference < 0.05


def test_mean_summary_needs_two_visitors() -> None:
    with pytest.raises(ValueError):
        _ = MeanSummary(1, 5.0, 25.0).variance


# --- sample size ----------------------------------------------------------------------------------------


def test_sample_size_matches_r_power_prop_test() -> None:
    # R stats-Ex.Rout.save: power.prop.test(p1=.50, p2=.75, power=.90) -> n = 76.70693
    assert visitors_per_arm(0.5, 0.75, power=0.9) == pytest.approx(76.70692845, rel=1e-7)
    # power.prop.test(n=50, p1=.50, p2=.75) -> power = 0.7401659
    assert power_two_rates(0.5, 0.75, 50) == pytest.approx(0.7401659013, rel=1e-8)


@pytest.mark.parametrize(
    ("p1", "p2", "power", "ratio", "plain", "corrected"),
    [
        (0.45, 0.25, 0.90, 1, 117.4307, 127.2343),  # Zar (1999) Example 24.26, corrected value printed
        (0.45, 0.25, 0.90, 3, 76.6197, 83.1527),  # same example with n2/n1 = 3
        (0.08, 0.06, 0.80, 1, 2553.63, 2652.69),  # JMP 13.2 Help "Two Sample Proportions" prints 2554
    ],
)
def test_sample_size_fleiss(p1: float, p2: float, power: float, ratio: float, plain: float, corrected: float) -> None:
    assert visitors_per_arm(p1, p2, power=power, ratio=ratio) == pytest.approx(plain, abs=1e-2)
    assert visitors_per_arm(p1, p2, power=power, ratio=ratio, continuity=True) == pytest.approx(corrected, abs=1e-2)


def test_sample_size_rejects_equal_rates() -> None:
    with pytest.raises(ValueError):
        visitors_per_arm(0.03, 0.03)


# --- multiple comparisons -------------------------------------------------------------------------------

MULTTEST1_RAW = [
    5.23656777208e-05,
    0.00028140506198,
    0.0149877310796,
    0.0202732688798,
    0.177096952723,
    0.642193923795,
    0.680845947633,
    0.71626938238,
    0.838541367553,
    0.967833824309,
]


def test_holm_matches_r_multtest() -> None:
    from archive.stats.multiple import holm

    # R multtest mt.rawp2adjp, statsmodels test_multi.py res_multtest1 (Holm column)
    expected = [5.2365677720800005e-04, 2.5326455578199999e-03, 1.1990184863680001e-01, 1.4191288215860001e-01]
    assert holm(MULTTEST1_RAW) == pytest.approx(expected + [1.0] * 6, rel=1e-12)
    # res_multtest3: Holm 0.01, 0.018, 0.024, 0.028, 0.03, 0.25 x5
    raw3 = [0.001, 0.002, 0.003, 0.004, 0.005, 0.05, 0.06, 0.07, 0.08, 0.09]
    assert holm(raw3) == pytest.approx([0.01, 0.018, 0.024, 0.028, 0.03] + [0.25] * 5, rel=1e-12)


def test_bh_matches_r_multtest_and_is_order_free() -> None:
    from archive.stats.multiple import benjamini_hochberg

    # R multtest via statsmodels res_multtest1 (BH column)
    expected = [
        5.2365677720800005e-04,
        1.4070253098999999e-03,
        4.9959103598666670e-02,
        5.0683172199499998e-02,
        3.5419390544599999e-01,
        8.9533672797500008e-01,
        8.9533672797500008e-01,
        8.9533672797500008e-01,
        9.3171263061444454e-01,
        9.6783382430900000e-01,
    ]
    assert benjamini_hochberg(MULTTEST1_RAW) == pytest.approx(expected, rel=1e-12)
    shuffled = [MULTTEST1_RAW[i] for i in (3, 0, 9, 5, 1, 8, 2, 7, 4, 6)]
    assert benjamini_hochberg(shuffled) == pytest.approx([expected[i] for i in (3, 0, 9, 5, 1, 8, 2, 7, 4, 6)])


def test_adjustments_agree_with_statsmodels() -> None:
    from statsmodels.stats.multitest import multipletests

    from archive.stats.multiple import benjamini_hochberg, holm

    p = np.random.default_rng(9).uniform(size=40) ** 3
    assert holm(p) == pytest.approx(multipletests(p, method="holm")[1], rel=1e-12)
    assert benjamini_hochberg(p) == pytest.approx(multipletests(p, method="fdr_bh")[1], rel=1e-12)
    with pytest.raises(ValueError):
        holm([0.2, 1.5])


@pytest.mark.parametrize(
    "table",
    [
        [[12_000, 8_000], [11_800, 8_300]],
        [[500, 300, 200], [480, 330, 190]],
        [[3, 9], [7, 2]],
    ],
)
def test_contingency_p_matches_scipy(table: list[list[int]]) -> None:
    from scipy.stats import chi2_contingency

    from archive.stats.srm import contingency_p

    # scipy.stats.chi2_contingency(table, correction=False): Pearson's chi-square from the margins
    assert contingency_p(table) == pytest.approx(chi2_contingency(table, correction=False)[1], rel=1e-10)
