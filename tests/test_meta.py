"""Meta-analysis against metafor / R meta results (as stored in statsmodels' tests) and published tables."""

from __future__ import annotations

import math

import numpy as np
import pytest

from archive.stats.meta import heterogeneity, interaction_test, random_effects

# Kacker (2004) example, 9 studies: statsmodels stats/tests/results/results_meta.py (computed with R metafor)
KACKER_Y = [61.00, 61.40, 62.21, 62.30, 62.34, 62.60, 62.70, 62.84, 65.90]
KACKER_V = [0.2025, 1.2100, 0.0900, 0.2025, 0.3844, 0.5625, 0.0676, 0.0225, 1.8225]


def test_kacker_fixed_effect_and_q() -> None:
    # metafor rma(method="FE"): b 62.5833970939982, se 0.107845705498231; QE 24.801897741835, QEp 0.00167935146372742
    het = heterogeneity(KACKER_Y, KACKER_V)
    assert het.fixed_mean == pytest.approx(62.5833970939982, rel=1e-12)
    assert het.fixed_se == pytest.approx(0.107845705498231, rel=1e-10)
    assert het.q == pytest.approx(24.801897741835, rel=1e-10)
    assert het.p_value == pytest.approx(0.00167935146372742, rel=1e-8)


def test_kacker_dersimonian_laird() -> None:
    # metafor rma(method="DL"): b 62.3901386044504, se 0.245749668040304, tau2 0.288049246973751, I2 67.744403741711%
    r = random_effects(KACKER_Y, KACKER_V, "DL", hksj=False)
    assert r.tau2 == pytest.approx(0.288049246973751, rel=1e-10)
    assert r.mean == pytest.approx(62.3901386044504, rel=1e-12)
    assert r.se == pytest.approx(0.245749668040304, rel=1e-10)
    assert (r.low, r.high) == pytest.approx((61.9084781058787, 62.8717991030221), rel=1e-12)
    assert r.i_squared == pytest.approx(0.67744403741711, rel=1e-10)


def test_kacker_dl_hksj() -> None:
    # metafor rma(method="DL", test="knha"): se 0.29477605699879, CI [61.710383798052, 63.0698934108488],
    # p 2.77938607433693e-16 (t, df 8)
    r = random_effects(KACKER_Y, KACKER_V, "DL", hksj=True)
    assert r.se == pytest.approx(0.29477605699879, rel=1e-10)
    assert (r.low, r.high) == pytest.approx((61.710383798052, 63.0698934108488), rel=1e-12)
    assert r.p_value == pytest.approx(2.77938607433693e-16, rel=1e-6)


def test_kacker_paule_mandel() -> None:
    # metafor rma(method="PM"): b 62.4076199113286, tau2 0.705395309224248; with HKSJ q = 1, so se 0.338030602684471
    r = random_effects(KACKER_Y, KACKER_V, "PM", hksj=True)
    assert r.tau2 == pytest.approx(0.705395309224248, rel=1e-8)
    assert r.mean == pytest.approx(62.4076199113286, rel=1e-10)
    assert r.se == pytest.approx(0.338030602684471, rel=1e-8)


def test_kacker_reml_recomputed() -> None:
    # REML is not in the statsmodels file; check-values §1d recomputed: tau2 0.29434287, b 62.390065, se 0.24750809
    r = random_effects(KACKER_Y, KACKER_V, "REML", hksj=False)
    assert r.tau2 == pytest.approx(0.29434287, rel=1e-6)
    assert r.mean == pytest.approx(62.390065, rel=1e-7)
    assert r.se == pytest.approx(0.24750809, rel=1e-6)


# 17-study log odds ratios (statsmodels results_or_dl_hk, R meta metabin(..., method.tau="DL", hakn=TRUE))
EVENT_E = [18, 22, 21, 14, 42, 80, 13, 37, 23, 19, 106, 170, 34, 18, 13, 12, 42]
N_E = [19, 34, 72, 22, 70, 183, 26, 61, 36, 45, 246, 386, 59, 45, 14, 26, 74]
EVENT_C = [12, 12, 15, 5, 13, 33, 18, 30, 12, 14, 76, 46, 17, 3, 14, 10, 40]
N_C = [22, 35, 68, 20, 32, 94, 50, 55, 25, 35, 208, 141, 32, 15, 18, 19, 75]


def _log_or() -> tuple[np.ndarray, np.ndarray]:
    a, n1, c, n2 = (np.array(x, dtype=float) for x in (EVENT_E, N_E, EVENT_C, N_C))
    b, d = n1 - a, n2 - c
    return np.log(a * d / (b * c)), 1 / a + 1 / b + 1 / c + 1 / d


def test_seventeen_study_or_dl_hksj() -> None:
    y, v = _log_or()
    r = random_effects(y, v, "DL", hksj=True)
    assert r.tau2 == pytest.approx(0.0016783981912744, rel=1e-8)
    assert r.mean == pytest.approx(0.429520368698268, rel=1e-10)
    assert r.se == pytest.approx(0.0915952752397692, rel=1e-10)
    assert (r.low, r.high) == pytest.approx((0.235347059333852, 0.623693678062684), rel=1e-10)
    assert r.p_value == pytest.approx(0.000246175101510513, rel=1e-8)
    assert r.q == pytest.approx(16.181374262823, rel=1e-10)
    assert r.q_p_value == pytest.approx(0.440375456698129, rel=1e-8)
    # Higgins et al. (2009) convention uses the plain RE standard error (R meta's printed PI uses the HKSJ one)
    plain = random_effects(y, v, "DL", hksj=False)
    assert r.hts_low is not None and r.hts_high is not None
    half = (r.hts_high - r.hts_low) / 2
    from scipy import stats

    assert half == pytest.approx(stats.t.ppf(0.975, 15) * math.sqrt(r.tau2 + plain.se**2), rel=1e-12)


# CLASP trials, DerSimonian & Kacker (2007) Tables 3-4,
# via metafor tests/testthat/test_analysis_example_dersimonian2007.r
CLASP = dict(
    n1=[156, 303, 565, 1570, 103, 4659],
    n2=[74, 303, 477, 1565, 105, 4650],
    a=[5, 5, 12, 69, 9, 313],
    c=[8, 17, 9, 94, 11, 352],
)


@pytest.mark.parametrize(
    ("method", "tau", "mu", "se"),
    [("PM", 0.3681, -0.3811, 0.2060), ("DL", 0.2323, -0.3240, 0.1540), ("REML", 0.1843, -0.2980, 0.1343)],
)
def test_clasp_estimators(method: str, tau: float, mu: float, se: float) -> None:
    a, n1, c, n2 = (np.array(CLASP[k], dtype=float) for k in ("a", "n1", "c", "n2"))
    y = np.log(a * (n2 - c) / ((n1 - a) * c))
    v = 1 / a + 1 / (n1 - a) + 1 / c + 1 / (n2 - c)
    r = random_effects(y, v, method, hksj=False)  # type: ignore[arg-type]
    assert math.sqrt(r.tau2) == pytest.approx(tau, abs=5e-5)  # table printed to 4 decimals
    assert r.mean == pytest.approx(mu, abs=5e-5)
    assert r.se == pytest.approx(se, abs=5e-5)


def test_dl_truncates_negative_tau2_where_statsmodels_does_not() -> None:
    # check-values §12: statsmodels combine_effects(method_re="dl") can return tau2 < 0; DerSimonian & Laird
    # (1986) define tau2 = max(0, .)
    y, v = [0.10, 0.11, 0.09], [0.01, 0.01, 0.01]
    r = random_effects(y, v, "DL", hksj=False)
    assert r.tau2 == 0.0
    assert r.se == pytest.approx(heterogeneity(y, v).fixed_se)


def test_agrees_with_statsmodels_combine_effects_where_tau2_positive() -> None:
    from statsmodels.stats.meta_analysis import combine_effects

    y, v = _log_or()
    # statsmodels' Paule-Mandel iteration stops at its own tolerance: agreement to 1e-4 there
    for sm_method, ours, rel in (("dl", "DL", 1e-10), ("pm", "PM", 1e-4)):
        sm = combine_effects(y, v, method_re=sm_method, use_t=False)
        r = random_effects(y, v, ours, hksj=False)  # type: ignore[arg-type]
        assert sm.tau2 > 0
        assert r.tau2 == pytest.approx(sm.tau2, rel=rel)
        assert r.mean == pytest.approx(sm.mean_effect_re, rel=rel)


def test_altman_bland_interaction_example() -> None:
    # Altman & Bland (2003) BMJ 326:219 worked example: difference of log RR -0.2726, SE 0.2206 -> z -1.24, p 0.22
    # (given here as two estimates whose difference and combined SE are those figures)
    se1 = se2 = 0.2206 / math.sqrt(2)
    result = interaction_test(-0.2726, se1, 0.0, se2)
    assert result.z == pytest.approx(-1.24, abs=0.005)
    assert result.p_value == pytest.approx(0.22, abs=0.005)


def test_meta_rejects_bad_input() -> None:
    with pytest.raises(ValueError):
        heterogeneity([], [])
    with pytest.raises(ValueError):
        heterogeneity([0.1, 0.2], [0.01, 0.0])
    with pytest.raises(ValueError):
        random_effects([0.1], [0.01], "XX")  # type: ignore[arg-type]
