"""Vectorised pooling of many groups: published and metafor values, and agreement with the scalar random_effects."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from archive.stats.meta import (
    RandomEffects,
    _negative_restricted_loglik,
    _reml_score,
    heterogeneity,
    random_effects,
    reml_grid,
)
from archive.stats.meta_groups import GroupPooling, pool_groups

from .test_meta import CLASP, KACKER_V, KACKER_Y, _log_or

FIELDS = (
    "tau2",
    "tau2_low",
    "tau2_high",
    "mean",
    "se",
    "low",
    "high",
    "p_value",
    "prediction_low",
    "prediction_high",
    "q",
    "q_p_value",
    "i_squared",
)
TAU2_FIELDS = ("tau2", "tau2_low", "tau2_high")


def _clasp() -> tuple[np.ndarray, np.ndarray]:
    a, n1, c, n2 = (np.array(CLASP[k], dtype=float) for k in ("a", "n1", "c", "n2"))
    return np.log(a * (n2 - c) / ((n1 - a) * c)), 1 / a + 1 / (n1 - a) + 1 / c + 1 / (n2 - c)


def _stack(*groups: tuple[np.ndarray, np.ndarray]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    y = np.concatenate([np.asarray(g[0], dtype=float) for g in groups])
    v = np.concatenate([np.asarray(g[1], dtype=float) for g in groups])
    index = np.concatenate([np.full(len(g[0]), i) for i, g in enumerate(groups)])
    return y, v, index


def _kacker_and_seventeen(method: str, hksj: bool) -> GroupPooling:
    y, v, index = _stack((np.array(KACKER_Y), np.array(KACKER_V)), _log_or())
    return pool_groups(y, v, index, 2, method, hksj=hksj)  # type: ignore[arg-type]


# (a) Kacker (2004) and the 17-study log OR set as two groups of one call


def test_two_published_sets_fixed_effect_and_q() -> None:
    r = _kacker_and_seventeen("DL", hksj=False)
    # Kacker: metafor rma(method="FE"): b 62.5833970939982, se 0.107845705498231; QE 24.801897741835,
    # QEp 0.00167935146372742 (statsmodels stats/tests/results/results_meta.py, computed with R metafor)
    assert r.fixed_mean[0] == pytest.approx(62.5833970939982, rel=1e-12)
    assert r.fixed_se[0] == pytest.approx(0.107845705498231, rel=1e-10)
    assert r.q[0] == pytest.approx(24.801897741835, rel=1e-10)
    assert r.q_p_value[0] == pytest.approx(0.00167935146372742, rel=1e-8)
    # 17 studies: R meta metabin(..., method.tau="DL", hakn=TRUE), statsmodels results_or_dl_hk:
    # TE_fixed 0.428036725396544, seTE_fixed 0.0902874968199668, Q 16.181374262823 (df 16), p 0.440375456698129,
    # I2 0.0112088293538659
    assert r.fixed_mean[1] == pytest.approx(0.428036725396544, rel=1e-10)
    assert r.fixed_se[1] == pytest.approx(0.0902874968199668, rel=1e-10)
    assert r.q[1] == pytest.approx(16.181374262823, rel=1e-10)
    assert r.df[1] == 16
    assert r.q_p_value[1] == pytest.approx(0.440375456698129, rel=1e-8)
    assert r.i_squared[1] == pytest.approx(0.0112088293538659, rel=1e-8)
    assert list(r.k) == [9, 17]


def test_two_published_sets_dersimonian_laird() -> None:
    r = _kacker_and_seventeen("DL", hksj=False)
    # Kacker: metafor rma(method="DL"): b 62.3901386044504, se 0.245749668040304, tau2 0.288049246973751,
    # CI [61.9084781058787, 62.8717991030221], I2 67.744403741711% (statsmodels results_meta.py)
    assert r.tau2[0] == pytest.approx(0.288049246973751, rel=1e-10)
    assert r.mean[0] == pytest.approx(62.3901386044504, rel=1e-12)
    assert r.se[0] == pytest.approx(0.245749668040304, rel=1e-10)
    assert (r.low[0], r.high[0]) == pytest.approx((61.9084781058787, 62.8717991030221), rel=1e-12)
    assert r.i_squared[0] == pytest.approx(0.67744403741711, rel=1e-10)
    # 17 studies: tau2 (DL) 0.0016783981912744, TE_random 0.429520368698268 (R meta, results_or_dl_hk)
    assert r.tau2[1] == pytest.approx(0.0016783981912744, rel=1e-8)
    assert r.mean[1] == pytest.approx(0.429520368698268, rel=1e-10)
    assert r.interval_kind == "normal"


def test_two_published_sets_dl_hksj() -> None:
    r = _kacker_and_seventeen("DL", hksj=True)
    # Kacker: metafor rma(method="DL", test="knha"): se 0.29477605699879, CI [61.710383798052, 63.0698934108488],
    # p 2.77938607433693e-16 (t, df 8) (statsmodels results_meta.py)
    assert r.se[0] == pytest.approx(0.29477605699879, rel=1e-10)
    assert (r.low[0], r.high[0]) == pytest.approx((61.710383798052, 63.0698934108488), rel=1e-12)
    assert r.p_value[0] == pytest.approx(2.77938607433693e-16, rel=1e-6)
    # 17 studies: R meta hakn=TRUE: seTE_random 0.0915952752397692, CI [0.235347059333852, 0.623693678062684],
    # p 0.000246175101510513 (t, df 16) (statsmodels results_or_dl_hk)
    assert r.se[1] == pytest.approx(0.0915952752397692, rel=1e-10)
    assert (r.low[1], r.high[1]) == pytest.approx((0.235347059333852, 0.623693678062684), rel=1e-10)
    assert r.p_value[1] == pytest.approx(0.000246175101510513, rel=1e-8)
    # prediction interval, Higgins et al. (2009) convention with the plain RE SE (R meta's PI uses the HKSJ SE
    # instead): half-width scipy stats.t.ppf(0.975, k - 2) * sqrt(tau2 + SE_RE^2)
    plain = _kacker_and_seventeen("DL", hksj=False)
    for i, k in enumerate((9, 17)):
        assert r.hts_low is not None and r.hts_high is not None
        half = (r.hts_high[i] - r.hts_low[i]) / 2
        assert half == pytest.approx(stats.t.ppf(0.975, k - 2) * math.sqrt(r.tau2[i] + plain.se[i] ** 2), rel=1e-12)


def test_two_published_sets_paule_mandel() -> None:
    # Kacker: metafor rma(method="PM"): b 62.4076199113286, se 0.338030602684471, tau2 0.705395309224248,
    # CI [61.7450921043947, 63.0701477182625] (z) (statsmodels results_meta.py); with HKSJ q = 1, so the same se
    plain = _kacker_and_seventeen("PM", hksj=False)
    assert plain.tau2[0] == pytest.approx(0.705395309224248, rel=1e-8)
    assert plain.mean[0] == pytest.approx(62.4076199113286, rel=1e-10)
    assert plain.se[0] == pytest.approx(0.338030602684471, rel=1e-8)
    assert (plain.low[0], plain.high[0]) == pytest.approx((61.7450921043947, 63.0701477182625), rel=1e-10)
    hk = _kacker_and_seventeen("PM", hksj=True)
    assert hk.se[0] == pytest.approx(0.338030602684471, rel=1e-8)


def test_two_published_sets_reml() -> None:
    # Kacker REML is not in the statsmodels file; check-values §1d recomputed: tau2 0.29434287, b 62.390065,
    # se 0.24750809 (the same values as tests/test_meta.py)
    r = _kacker_and_seventeen("REML", hksj=False)
    assert r.tau2[0] == pytest.approx(0.29434287, rel=1e-6)
    assert r.mean[0] == pytest.approx(62.390065, rel=1e-7)
    assert r.se[0] == pytest.approx(0.24750809, rel=1e-6)


# (b) CLASP, DerSimonian & Kacker (2007) Tables 3-4, via metafor tests/testthat/test_analysis_example_dersimonian2007.r


@pytest.mark.parametrize(
    ("method", "tau", "mu", "se"),
    [("PM", 0.3681, -0.3811, 0.2060), ("DL", 0.2323, -0.3240, 0.1540), ("REML", 0.1843, -0.2980, 0.1343)],
)
def test_clasp_estimators_among_other_groups(method: str, tau: float, mu: float, se: float) -> None:
    y, v, index = _stack((np.array(KACKER_Y), np.array(KACKER_V)), _clasp(), _log_or())
    r = pool_groups(y, v, index, 3, method, hksj=False)  # type: ignore[arg-type]
    assert math.sqrt(r.tau2[1]) == pytest.approx(tau, abs=5e-5)  # table printed to 4 decimals
    assert r.mean[1] == pytest.approx(mu, abs=5e-5)
    assert r.se[1] == pytest.approx(se, abs=5e-5)


# (c) random groups against the scalar random_effects (itself checked against metafor in tests/test_meta.py)


def _random_groups(seed: int = 2024, n_groups: int = 200) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Invented sets: sizes 1..30, true tau 0 to 1, variances up to 100-fold apart, every tenth set identical
    effects, every seventh tightly clustered (DL tau^2 truncated at 0), and some estimates repeated in a second
    group (as when a test belongs to two themes)."""
    rng = np.random.default_rng(seed)
    ys, vs, gs = [], [], []
    for j in range(n_groups):
        k = int(rng.integers(1, 31))
        v = rng.uniform(0.001, 0.05, k) * rng.choice([1.0, 10.0, 100.0], k)
        if j % 10 == 0:
            y = np.full(k, 0.05)
        elif j % 7 == 0:
            y = 0.02 + rng.normal(0, 0.2, k) * np.sqrt(v)
        else:
            y = rng.normal(0.1, np.sqrt(v + rng.choice([0.0, 0.02, 0.05, 0.2, 1.0]) ** 2))
        ys.append(y)
        vs.append(v)
        gs.append(np.full(k, j))
        if j % 5 == 1 and j + 1 < n_groups:  # a few of these estimates also belong to the next group
            take = rng.choice(k, size=min(k, 3), replace=False)
            ys.append(y[take])
            vs.append(v[take])
            gs.append(np.full(len(take), j + 1))
    order = rng.permutation(sum(len(g) for g in gs))  # input order must not matter
    return np.concatenate(ys)[order], np.concatenate(vs)[order], np.concatenate(gs)[order]


def _scalar_value(r: RandomEffects, field: str) -> float:
    value = getattr(r, field)
    return math.nan if value is None else float(value)


def _assert_matches_scalar(pooled: GroupPooling, j: int, r: RandomEffects, prediction: bool = True) -> None:
    assert pooled.k[j] == r.k
    for field in FIELDS:
        if not prediction and field.startswith("prediction"):
            continue
        expected, got = _scalar_value(r, field), float(getattr(pooled, field)[j])
        if math.isnan(expected):
            assert math.isnan(got), (j, field)
        elif field in TAU2_FIELDS:
            assert got == pytest.approx(expected, rel=1e-6, abs=1e-10), (j, field)
        else:
            assert got == pytest.approx(expected, rel=1e-8, abs=1e-12), (j, field)


@pytest.mark.parametrize("hksj", [True, False])
@pytest.mark.parametrize("method", ["DL", "PM", "REML"])
def test_random_groups_agree_with_scalar(method: str, hksj: bool) -> None:
    y, v, index = _random_groups()
    pooled = pool_groups(y, v, index, 200, method, hksj=hksj)  # type: ignore[arg-type]
    zero_tau = 0
    # the prediction interval does not depend on the tau^2 estimator or the mean's interval: checked once
    prediction = method == "REML" and hksj
    for j in range(200):
        mask = index == j
        r = random_effects(y[mask], v[mask], method, hksj=hksj, prediction=prediction)  # type: ignore[arg-type]
        _assert_matches_scalar(pooled, j, r, prediction)
        het = heterogeneity(y[mask], v[mask])
        assert pooled.fixed_mean[j] == pytest.approx(het.fixed_mean, rel=1e-10, abs=1e-14)
        assert pooled.fixed_se[j] == pytest.approx(het.fixed_se, rel=1e-10)
        assert pooled.df[j] == het.df
        zero_tau += int(r.k >= 2 and r.tau2 == 0)
    assert zero_tau >= 20  # the set includes many groups without heterogeneity
    assert set(pooled.k) >= {1, 30}


def _clustered(y: np.ndarray, v: np.ndarray, index: np.ndarray, seed: int = 7) -> tuple[np.ndarray, np.ndarray]:
    """Clusters of 1-4 estimates within each group (tests with several arms against one control) and a covariance
    per cluster below every variance in it; a few clusters with covariance 0."""
    rng = np.random.default_rng(seed)
    clusters = np.zeros(len(y), dtype=np.int64)
    shared = np.zeros(len(y))
    next_id = 0
    for j in np.unique(index):
        where = np.flatnonzero(index == j)
        sizes = rng.integers(1, 5, len(where))
        ids = np.repeat(np.arange(len(sizes)), sizes)[: len(where)] + next_id
        next_id = int(ids.max()) + 1
        clusters[where] = ids
        for c in np.unique(ids):
            members = where[ids == c]
            shared[members] = 0.0 if c % 6 == 0 else 0.8 * rng.uniform(0.1, 1.0) * float(v[members].min())
    return clusters, shared


@pytest.mark.parametrize("method", ["DL", "PM", "REML"])
def test_random_groups_with_shared_controls_agree_with_scalar(method: str) -> None:
    # the vectorised code (Sherman-Morrison per cluster) against the scalar one (the dense covariance matrix,
    # numpy.linalg.inv): same estimates, intervals and prediction intervals
    y, v, index = _random_groups(2025, 60)
    clusters, shared = _clustered(y, v, index)
    pooled = pool_groups(y, v, index, 60, method, clusters=clusters, shared=shared)  # type: ignore[arg-type]
    plain = pool_groups(y, v, index, 60, method)  # type: ignore[arg-type]
    moved = 0
    prediction = method == "REML"  # the prediction interval does not depend on the tau^2 estimator: checked once
    for j in range(60):
        mask = index == j
        r = random_effects(
            y[mask], v[mask], method, prediction=prediction, clusters=clusters[mask], shared=shared[mask]  # type: ignore[arg-type]
        )
        _assert_matches_scalar(pooled, j, r, prediction)
        het = heterogeneity(y[mask], v[mask], clusters[mask], shared[mask])
        assert pooled.fixed_mean[j] == pytest.approx(het.fixed_mean, rel=1e-10, abs=1e-14)
        moved += int(abs(pooled.mean[j] - plain.mean[j]) > 1e-9)
    assert moved >= 20  # the covariance changes most groups' estimates


def test_shared_control_reml_against_error_contrasts() -> None:
    # REML is maximum likelihood of error contrasts (Patterson & Thompson 1971; Harville 1977): the log-likelihood
    # of K'y ~ N(0, K'(V + tau^2 I)K), K an orthonormal basis of the complement of 1 (scipy.linalg.null_space),
    # maximised by scipy.optimize.minimize_scalar; the fixed-effect mean and SE against statsmodels GLS with the
    # within-test covariance (invented data: a 3-arm, a 2-arm pair and four single comparisons)
    import statsmodels.api as sm
    from scipy import linalg, optimize

    y = np.array([0.031, 0.052, -0.012, 0.064, 0.02, -0.035, 0.09, 0.041, 0.004])
    v = np.array([0.0009, 0.0011, 0.0010, 0.0006, 0.0008, 0.0004, 0.0012, 0.0007, 0.0005])
    clusters = np.array([0, 0, 0, 1, 1, 2, 3, 4, 5])
    shared = np.array([0.0004, 0.0004, 0.0004, 0.00025, 0.00025, 0.0, 0.0, 0.0, 0.0])
    cov = np.diag(v) + np.where(
        (clusters[:, None] == clusters[None, :]) & ~np.eye(9, dtype=bool), shared[:, None], 0.0
    )
    basis = linalg.null_space(np.ones((1, 9)))

    def negative(tau2: float) -> float:
        c = basis.T @ (cov + tau2 * np.eye(9)) @ basis
        return -float(stats.multivariate_normal(np.zeros(8), c).logpdf(basis.T @ y))

    best = optimize.minimize_scalar(negative, bounds=(0.0, 0.05), method="bounded", options={"xatol": 1e-12})
    pooled = pool_groups(y, v, np.zeros(9, dtype=int), 1, "REML", clusters=clusters, shared=shared)
    assert best.x > 1e-4  # heterogeneity present: an interior maximum
    assert pooled.tau2[0] == pytest.approx(best.x, rel=1e-5)
    gls = sm.GLS(y, np.ones(9), sigma=cov).fit()
    assert pooled.fixed_mean[0] == pytest.approx(gls.params[0], rel=1e-10)
    assert pooled.fixed_se[0] == pytest.approx(math.sqrt(gls.normalized_cov_params[0, 0]), rel=1e-10)
    # generalised least squares at the REML tau^2: the random-effects mean
    at_tau = sm.GLS(y, np.ones(9), sigma=cov + pooled.tau2[0] * np.eye(9)).fit()
    assert pooled.mean[0] == pytest.approx(at_tau.params[0], rel=1e-10)


def test_shared_covariance_arguments_are_checked() -> None:
    y, v, g = [0.1, 0.2, 0.0], [0.01, 0.01, 0.02], [0, 0, 0]
    with pytest.raises(ValueError, match="go together"):
        pool_groups(y, v, g, 1, clusters=[0, 0, 1])
    with pytest.raises(ValueError, match="below the effect's variance"):
        pool_groups(y, v, g, 1, clusters=[0, 0, 1], shared=[0.01, 0.01, 0.0])
    with pytest.raises(ValueError, match="equal for every effect"):
        pool_groups(y, v, g, 1, clusters=[0, 0, 1], shared=[0.001, 0.002, 0.0])
    with pytest.raises(ValueError, match="equal for every effect"):
        random_effects(y, v, clusters=[0, 0, 1], shared=[0.001, 0.002, 0.0])
    # a covariance on a cluster of one changes nothing
    one = pool_groups(y, v, g, 1, clusters=[0, 1, 2], shared=[0.005, 0.0, 0.0])
    assert one.mean[0] == pool_groups(y, v, g, 1).mean[0]


def test_reml_takes_the_higher_of_two_likelihood_maxima() -> None:
    # No outside value: the property checked is that of the definition (the maximiser of the restricted
    # likelihood on tau^2 >= 0). Here the score is negative at 0 (a local maximum on the boundary) and also has an
    # interior root whose likelihood is higher.
    y, v = np.array([0.189, 0.066, -0.559, 0.211]), np.array([0.0011, 0.0265, 0.047, 0.0024])
    assert _reml_score(0.0, y, v) < 0
    pooled = pool_groups(y, v, [0, 0, 0, 0], 1, "REML")
    tau2 = float(pooled.tau2[0])
    assert tau2 > 0.01
    assert abs(_reml_score(tau2, y, v)) < 1e-9 * abs(_reml_score(0.0, y, v))
    assert _negative_restricted_loglik(tau2, y, v) < _negative_restricted_loglik(0.0, y, v)
    assert random_effects(y, v, "REML").tau2 == pytest.approx(tau2, rel=1e-10)


def test_reml_grid_ends_where_the_score_is_negative() -> None:
    # The bound in reml_grid's docstring, checked on the random sets: the score is < 0 at the top grid point
    y, v, index = _random_groups(seed=7)
    for j in range(200):
        mask = index == j
        if mask.sum() >= 2:
            top = reml_grid(v[mask].min(), v[mask].max(), np.var(y[mask]))[-1]
            assert _reml_score(float(top), y[mask], v[mask]) < 0


# (d) statsmodels combine_effects as a second opinion where its tau2 > 0 (check-values §12: its DL does not truncate)


def test_statsmodels_second_opinion() -> None:
    from statsmodels.stats.meta_analysis import combine_effects

    y, v, index = _random_groups(seed=99)
    # statsmodels' sd_eff_w_re_hksj is the HKSJ SE without the max(1, q) floor
    dl = pool_groups(y, v, index, 200, "DL", hksj=True, hksj_floor=False)
    pm = pool_groups(y, v, index, 200, "PM", hksj=True, hksj_floor=False)
    compared = negative_seen = 0
    for j in range(200):
        mask = index == j
        if mask.sum() < 2:
            continue
        # statsmodels warns where its tau2 < 0 makes a variance negative, and where Q = 0 (identical effects)
        with np.errstate(invalid="ignore", divide="ignore"):
            sm = combine_effects(y[mask], v[mask], method_re="dl")
            sm_pm = combine_effects(y[mask], v[mask], method_re="pm", atol=1e-12, maxiter=200)
        if sm.tau2 <= 0:
            negative_seen += int(sm.tau2 < 0)
            assert dl.tau2[j] == 0.0  # DerSimonian & Laird (1986): tau2 = max(0, .)
            continue
        compared += 1
        # statsmodels.stats.meta_analysis.combine_effects(method_re="dl"): tau2, mean_effect_re, sd_eff_w_re_hksj
        assert dl.tau2[j] == pytest.approx(sm.tau2, rel=1e-8)
        assert dl.mean[j] == pytest.approx(sm.mean_effect_re, rel=1e-9, abs=1e-12)
        assert dl.se[j] == pytest.approx(sm.sd_eff_w_re_hksj, rel=1e-9)
        assert dl.fixed_mean[j] == pytest.approx(sm.mean_effect_fe, rel=1e-9, abs=1e-12)
        assert dl.fixed_se[j] == pytest.approx(sm.sd_eff_w_fe, rel=1e-10)
        assert dl.q[j] == pytest.approx(sm.q, rel=1e-8)
        # combine_effects(method_re="pm", atol=1e-12, maxiter=200): Paule-Mandel iterated to a tight tolerance
        if sm_pm.tau2 > 0:
            assert pm.tau2[j] == pytest.approx(sm_pm.tau2, rel=1e-7)
            assert pm.mean[j] == pytest.approx(sm_pm.mean_effect_re, rel=1e-9, abs=1e-12)
    assert compared >= 50
    assert negative_seen >= 5  # the trap of check-values §12 is exercised


# (e) edge cases


def test_empty_and_single_estimate_groups() -> None:
    # groups 0 and 2 empty; group 1 a single estimate; group 3 two estimates (no prediction interval)
    pooled = pool_groups([0.3, 0.1, 0.2], [0.04, 0.01, 0.02], [1, 3, 3], 4, "REML", hksj=True)
    assert list(pooled.k) == [0, 1, 0, 2]
    for field in (*FIELDS, "df", "fixed_mean", "fixed_se"):
        values = getattr(pooled, field)
        assert math.isnan(values[0]) and math.isnan(values[2]), field
    # k = 1: mean y, SE sqrt(v), normal interval with scipy stats.norm.ppf(0.975), p = 2 stats.norm.sf(0.3 / 0.2)
    assert pooled.tau2[1] == 0.0
    assert pooled.mean[1] == pytest.approx(0.3, rel=1e-15)
    assert pooled.se[1] == pytest.approx(0.2, rel=1e-15)
    z = stats.norm.ppf(0.975)
    assert (pooled.low[1], pooled.high[1]) == pytest.approx((0.3 - z * 0.2, 0.3 + z * 0.2), rel=1e-14)
    assert pooled.p_value[1] == pytest.approx(2 * stats.norm.sf(1.5), rel=1e-12)
    assert pooled.df[1] == 0 and pooled.i_squared[1] == 0.0
    for field in ("tau2_low", "tau2_high", "prediction_low", "prediction_high", "q_p_value"):
        assert math.isnan(getattr(pooled, field)[1]), field
    assert math.isnan(pooled.prediction_low[3]) and not math.isnan(pooled.tau2_high[3])
    _assert_matches_scalar(pooled, 1, random_effects([0.3], [0.04]))
    _assert_matches_scalar(pooled, 3, random_effects([0.1, 0.2], [0.01, 0.02]))


def test_no_estimates_at_all() -> None:
    pooled = pool_groups([], [], [], 3)
    assert list(pooled.k) == [0, 0, 0]
    assert np.isnan(pooled.mean).all() and np.isnan(pooled.tau2_high).all()
    assert pool_groups([], [], [], 0).n_groups == 0


def test_single_estimate_i_squared_is_zero() -> None:
    # Q of one estimate is 0 up to rounding; I^2 = (Q - df) / Q with df = 0 must not turn that into 100%
    rng = np.random.default_rng(3)
    y, v = rng.normal(size=300), rng.uniform(0.001, 1, 300)
    pooled = pool_groups(y, v, np.arange(300), 300)
    assert (pooled.i_squared == 0).all()
    assert all(heterogeneity([a], [b]).i_squared == 0 for a, b in zip(y, v, strict=True))


@pytest.mark.parametrize("method", ["DL", "PM", "REML"])
def test_identical_effects(method: str) -> None:
    y = np.full(6, 0.12)
    v = np.array([0.01, 0.02, 0.005, 0.03, 0.01, 0.015])
    pooled = pool_groups(y, v, np.zeros(6, dtype=int), 1, method)  # type: ignore[arg-type]
    assert pooled.tau2[0] == 0.0
    assert pooled.tau2_low[0] == 0.0 and pooled.tau2_high[0] == 0.0
    assert pooled.mean[0] == pytest.approx(0.12, rel=1e-14)
    # HKSJ without its floor: no spread around the mean gives a zero-width interval; the Knapp-Hartung floor
    # max(1, q) keeps the plain inverse-variance SE sqrt(1 / sum(1/v)) (tau2 = 0), computed here independently
    assert pooled.se[0] == pytest.approx(math.sqrt(1 / np.sum(1 / v)), rel=1e-12)
    bare = pool_groups(y, v, np.zeros(6, dtype=int), 1, method, hksj_floor=False)  # type: ignore[arg-type]
    assert bare.se[0] == pytest.approx(0.0, abs=1e-12)
    assert pooled.i_squared[0] == 0.0 and pooled.q[0] == pytest.approx(0.0, abs=1e-25)
    _assert_matches_scalar(pooled, 0, random_effects(y, v, method))  # type: ignore[arg-type]


@pytest.mark.parametrize("method", ["DL", "PM", "REML"])
def test_huge_variance_spread(method: str) -> None:
    rng = np.random.default_rng(8)
    v = 10.0 ** rng.uniform(-8, 8, 25)
    y = rng.normal(0, np.sqrt(v + 0.5))
    v2 = np.array([1e-8, 1.0, 1e8, 3e-5, 4e4])
    y2 = np.array([0.1, -2.0, 50.0, 0.1001, 3.0])
    yy, vv, index = _stack((y, v), (y2, v2))
    pooled = pool_groups(yy, vv, index, 2, method)  # type: ignore[arg-type]
    for j, (a, b) in enumerate(((y, v), (y2, v2))):
        r = random_effects(a, b, method)  # type: ignore[arg-type]
        _assert_matches_scalar(pooled, j, r)
        assert np.isfinite([getattr(pooled, f)[j] for f in FIELDS]).all()


def test_repeated_group_and_order_do_not_matter() -> None:
    y, v = _log_or()
    yy, vv, index = _stack((y, v), (y[::-1], v[::-1]), (y, v))
    pooled = pool_groups(yy, vv, index, 3)
    for field in FIELDS:
        values = getattr(pooled, field)
        assert values[0] == values[2], field
        assert values[1] == pytest.approx(values[0], rel=1e-12), field


def test_confidence_level_is_used() -> None:
    y, v = _log_or()
    pooled = pool_groups(y, v, np.zeros(len(y), dtype=int), 1, "DL", confidence=0.9)
    r = random_effects(y, v, "DL", confidence=0.9)
    _assert_matches_scalar(pooled, 0, r)


def test_bad_arguments() -> None:
    good = ([0.1, 0.2], [0.01, 0.02], [0, 1])
    with pytest.raises(ValueError):
        pool_groups([0.1, 0.2], [0.01], [0, 1], 2)
    with pytest.raises(ValueError):
        pool_groups([0.1, 0.2], [0.01, 0.02], [0], 2)
    with pytest.raises(ValueError):
        pool_groups(*good, 1)  # index 1 out of range
    with pytest.raises(ValueError):
        pool_groups([0.1, 0.2], [0.01, 0.02], [0, -1], 2)
    with pytest.raises(ValueError):
        pool_groups([0.1, 0.2], [0.01, 0.02], [0.0, 1.0], 2)
    with pytest.raises(ValueError):
        pool_groups(*good, -1)
    with pytest.raises(ValueError):
        pool_groups(*good, 2.5)  # type: ignore[arg-type]
    with pytest.raises(ValueError):
        pool_groups([0.1, 0.2], [0.01, 0.0], [0, 1], 2)
    with pytest.raises(ValueError):
        pool_groups([0.1, math.nan], [0.01, 0.02], [0, 1], 2)
    with pytest.raises(ValueError):
        pool_groups(*good, 2, "XX")  # type: ignore[arg-type]
    with pytest.raises(ValueError):
        pool_groups(*good, 2, confidence=1.0)
    with pytest.raises(ValueError):
        pool_groups([[0.1, 0.2]], [[0.01, 0.02]], [[0, 1]], 2)


def test_two_agreeing_tests_do_not_pool_to_a_zero_width_interval() -> None:
    # two non-significant +5% tests (log RR 0.0488, SE 0.04 each): without the floor HKSJ gives a zero-width
    # interval and p 0; with max(1, q) the interval is mean +/- t(0.975, 1 df) * sqrt(1 / sum(1/v)), where
    # t(0.975, 1) = 12.7062047361747 (scipy.stats.t.ppf(0.975, 1); the Cauchy quantile tan(0.475 pi))
    y, v = np.full(2, math.log(1.05)), np.full(2, 0.04**2)
    pooled = pool_groups(y, v, np.zeros(2, dtype=int), 1, "REML")
    half = 12.7062047361747 * 0.04 / math.sqrt(2)
    assert pooled.low[0] == pytest.approx(math.log(1.05) - half, rel=1e-9)
    assert pooled.high[0] == pytest.approx(math.log(1.05) + half, rel=1e-9)
    assert pooled.p_value[0] > 0.05 and "max(1, q)" in pooled.interval_kind


REGIMES = {
    # true effects N(0, tau^2), within-study variances U(0.005, 0.02): I^2 about 75%
    "high": (0.2, lambda rng, shape: rng.uniform(0.005, 0.02, shape)),
    # tau 0.025, within-study SE U(0.015, 0.05): I^2 about 40%, like the demo archive's themes
    "moderate": (0.025, lambda rng, shape: rng.uniform(0.015, 0.05, shape) ** 2),
}


@pytest.mark.parametrize("regime", sorted(REGIMES))
@pytest.mark.parametrize("k", [3, 5, 10, 30])
def test_prediction_interval_covers_a_new_true_effect(regime: str, k: int) -> None:
    # seeded normal-normal simulation (known truth): a new study's true effect ~ N(0, tau^2) should fall inside
    # the 95% interval 93-97% of the time. Coverage is computed exactly for each interval, Phi(high / tau) -
    # Phi(low / tau), so the Monte-Carlo error is that of the 5,000 meta-analyses only (SE at most 0.3 points).
    # Measured here: high 0.946 / 0.941 / 0.945 / 0.948, moderate 0.968 / 0.954 / 0.940 / 0.939 at k = 3 / 5 / 10 /
    # 30 (moderate with 20,000 meta-analyses: 0.969 at k = 3, 0.937 at k = 30, both near the edges). The plug-in
    # Higgins-Thompson-Spiegelhalter interval is kept for comparison only (Partlett & Riley 2017 report its
    # under-coverage at small k).
    tau, variances = REGIMES[regime]
    sims = 5000
    rng = np.random.default_rng([1000 + k, len(regime)])
    v = variances(rng, (sims, k))
    y = rng.normal(0, tau, (sims, k)) + rng.normal(0, np.sqrt(v))
    pooled = pool_groups(y.ravel(), v.ravel(), np.repeat(np.arange(sims), k), sims, "REML")
    covered = stats.norm.cdf(pooled.prediction_high / tau) - stats.norm.cdf(pooled.prediction_low / tau)
    assert 0.93 <= float(np.mean(covered)) <= 0.97, np.mean(covered)


def test_no_prediction_interval_below_three_comparisons() -> None:
    pooled = pool_groups([0.1, 0.2, 0.0], [0.01, 0.01, 0.02], [0, 0, 1], 2, "REML")
    assert np.isnan(pooled.prediction_low).all() and np.isnan(pooled.prediction_high).all()
