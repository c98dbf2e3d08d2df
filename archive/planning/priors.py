"""From history to a prior: what the archive says about the true lift of the next test of a kind.

The prior for a new test's true relative lift comes from a three-level normal model of the archive's trusted
comparisons (a hierarchical normal model, Gelman et al., BDA3 ch. 5; in meta-analysis the three-level model of
Konstantopoulos 2011), on the log of (1 + lift):

* each comparison's estimate y_i ~ Normal(theta_i, v_i), v_i its variance with a shared control split evenly
  across the comparisons of its test (Cochrane Handbook), the comparisons taken as independent;
* a comparison's true effect theta_i ~ Normal(mu_j, tau^2) around the mean mu_j of its theme j (the theme asked
  about when the comparison carries it, else its first theme: each comparison counts once);
* theme means mu_j ~ Normal(M, omega^2) around the archive-wide mean M.

The hyperprior (:class:`archive.planning.hyperprior.Hyperprior`, stated with every prior; an archive may set it
under ``history_prior:`` in ``archive-settings.yaml``) is weakly informative on the scale of
conversion lifts: M ~ Normal(0, 0.03^2) (the average true lift over all kinds of change lies within about +/-6%),
omega ~ half-normal(0.02) (kinds of change differ in their average lift by a few percent), tau uniform on
[0, 0.3]. M and the theme means are integrated out in closed form; tau and omega on a grid (``GRID`` x ``GRID``
points, denser near zero, refined around the posterior mass when a large archive pins them down more finely than
that). The prior for a new test of theme j is the posterior predictive of a new comparison's
true effect in that theme: a mixture of normals over the grid, summarised by its mean and standard deviation
(:class:`LiftPrior`). A theme with few comparisons is pulled toward the archive mean by as much as the data say
themes differ; a theme with none gets the archive mean with the between-theme spread.

The baseline conversion rate of a page area gets a Beta prior fitted across that area's control arms
(beta-binomial maximum marginal likelihood).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import special, stats

from archive.planning.hyperprior import DEFAULT_HYPERPRIOR, Hyperprior
from archive.pooling.effects import Effect
from archive.pooling.groups import MIN_GROUP, beta_binomial_fit
from archive.records.model import Record

GRID = 48  # grid points for tau and for omega
REFINE_ABOVE = 0.05  # a grid point holding more posterior weight than this: refine the grid around the mass


@dataclass(frozen=True)
class LiftPrior:
    """Normal prior on the log of (1 + relative lift)."""

    source: str  # which comparisons it came from
    comparisons: int  # of the theme asked about
    mean: float
    sd: float
    tau2: float  # posterior mean of the within-theme variance of true effects
    warning: str | None = None
    archive_comparisons: int = 0  # all comparisons the model saw
    themes: int = 0  # themes among them
    omega: float = 0.0  # posterior mean of the between-theme sd
    weight_on_theme: float = 0.0  # how much of the mean comes from the theme's own tests (0..1)
    hyperprior: str = DEFAULT_HYPERPRIOR.label()

    @property
    def lift(self) -> float:
        return math.expm1(self.mean)

    def prob_above(self, lift: float) -> float:
        """P(true relative lift > lift)."""
        return float(stats.norm.sf((math.log1p(lift) - self.mean) / self.sd))

    def interval(self, level: float = 0.95) -> tuple[float, float]:
        z = float(stats.norm.ppf(0.5 + level / 2))
        return math.expm1(self.mean - z * self.sd), math.expm1(self.mean + z * self.sd)

    def label(self) -> str:
        low, high = self.interval()
        return (
            f"history prior from {self.source}: log(1 + lift) ~ Normal({self.mean:+.4f}, {self.sd:.4f}^2), i.e. lift "
            f"{self.lift:+.1%}, 95% [{low:+.1%}, {high:+.1%}]; {self.weight_on_theme:.0%} of its mean comes "
            "directly from the theme's own tests"
        )


@dataclass(frozen=True)
class ThemeSums:
    """Sufficient statistics of the history model: per grid value of tau^2 (rows) and theme (columns), the sums of
    w, w y, w y^2 and log w over the theme's comparisons, with w = 1 / (v + tau^2)."""

    tau2: np.ndarray  # (T,)
    w: np.ndarray  # (T, J)
    wy: np.ndarray
    wyy: np.ndarray
    log_w: np.ndarray
    counts: np.ndarray  # (J,) comparisons per theme

    @staticmethod
    def empty(tau2: np.ndarray, themes: int) -> ThemeSums:
        z = np.zeros((len(tau2), themes))
        return ThemeSums(tau2, z, z.copy(), z.copy(), z.copy(), np.zeros(themes, dtype=int))

    def add(self, y: np.ndarray, v: np.ndarray, theme: np.ndarray) -> None:
        """Add comparisons (log lifts ``y``, variances ``v``, theme indices) in place."""
        w = 1 / (v[None, :] + self.tau2[:, None])
        for total, values in ((self.w, w), (self.wy, w * y), (self.wyy, w * y * y), (self.log_w, np.log(w))):
            np.add.at(total.T, theme, values.T)  # rows of the transposed view are themes
        np.add.at(self.counts, theme, 1)


def history_grid(hyper: Hyperprior) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """tau^2 (T,), omega^2 (O,) and the log prior weight of each (tau, omega) pair (T, O): midpoints of equal
    slices of u in [0, 1] mapped to spread = spread_max u^2 (denser near zero), weighted by the prior density
    times the Jacobian 2 spread_max u."""
    u = (np.arange(GRID) + 0.5) / GRID
    spread = hyper.spread_max * u**2
    log_jacobian = np.log(u)
    log_tau = log_jacobian  # uniform density on tau
    log_omega = log_jacobian - spread**2 / (2 * hyper.between_themes_scale**2)
    return spread**2, spread**2, log_tau[:, None] + log_omega[None, :]


@dataclass(frozen=True)
class Predictive:
    """The posterior predictive of a new comparison's true effect: a normal mixture over the (tau, omega) grid."""

    weights: np.ndarray  # (T, O) posterior weight of each grid point
    means: np.ndarray  # (T, O) predictive mean at each grid point
    variances: np.ndarray  # (T, O) predictive variance at each grid point
    tau2: float  # posterior mean of tau^2
    omega: float  # posterior mean of omega
    weight_on_theme: float  # posterior mean of the weight of the theme's own comparisons in the mean

    @property
    def mean(self) -> float:
        return float(np.sum(self.weights * self.means))

    @property
    def sd(self) -> float:
        second = float(np.sum(self.weights * (self.variances + self.means**2)))
        return math.sqrt(max(second - self.mean**2, 0.0))

    def cdf(self, x: float) -> float:
        return float(np.sum(self.weights * special.ndtr((x - self.means) / np.sqrt(self.variances))))


@dataclass(frozen=True)
class HistoryPosterior:
    """The history model fitted on the (tau, omega) grid: the posterior weight of each grid point and, per point,
    what the themes' predictions need. Weights do not depend on the theme asked about, so one fit serves them all."""

    weights: np.ndarray  # (T, O)
    tau2: np.ndarray  # (T, 1)
    omega2: np.ndarray  # (1, O)
    theme_w: np.ndarray  # (T, J) sum of weights w of each theme present
    theme_mean: np.ndarray  # (T, J) weighted mean of each theme present, given tau^2
    archive_mean: np.ndarray  # (T, O) posterior mean of M
    archive_precision: np.ndarray  # (T, O) posterior precision of M
    column: np.ndarray  # (themes in the sums,) column of each theme among those present, -1 if absent

    def predict(self, theme: int | None) -> Predictive:
        """Posterior predictive of a new comparison's true effect in ``theme`` (an index into the sums' themes, or
        None for a theme with no comparisons yet)."""
        p, t2, o2, m_hat, total = self.weights, self.tau2, self.omega2, self.archive_mean, self.archive_precision
        j = -1 if theme is None else int(self.column[theme])
        if j >= 0:
            shrink = 1 / (1 + o2 * self.theme_w[:, j : j + 1])  # weight on the archive mean
            means = (1 - shrink) * self.theme_mean[:, j : j + 1] + shrink * m_hat
            variances = o2 * shrink + shrink**2 / total + t2
            own = float(np.sum(p * (1 - shrink)))
        else:
            means = m_hat
            variances = o2 + 1 / total + t2
            own = 0.0
        return Predictive(p, means, variances, float(np.sum(p * t2)), float(np.sum(p * np.sqrt(o2))), own)


def fit_history(sums: ThemeSums, omega2: np.ndarray, log_prior: np.ndarray, mean_sd: float) -> HistoryPosterior:
    """Posterior weights of the (tau^2, omega^2) grid (tau^2 in ``sums``) given the log prior weight of each pair.
    M and the theme means are integrated out in closed form (normal-normal algebra: with a_j = 1 / (omega^2 +
    1 / s_j), M's posterior precision is sum a_j + 1 / mean_sd^2)."""
    present = sums.counts > 0
    s, wy, wyy, log_w = (x[:, present] for x in (sums.w, sums.wy, sums.wyy, sums.log_w))
    ybar = wy / np.where(s > 0, s, 1.0)  # (T, J) theme means given tau^2
    within = np.sum(wyy - wy * ybar, axis=1)  # sum w (y - ybar_j)^2
    spread = 1 + s[:, :, None] * omega2[None, None, :]  # (T, J, O): 1 + s_j omega^2
    a = s[:, :, None] / spread  # 1 / (omega^2 + 1 / s_j)
    total = np.sum(a, axis=1) + 1 / mean_sd**2  # (T, O): posterior precision of M
    m_hat = np.matmul(ybar[:, None, :], a)[:, 0, :] / total
    log_lik = (
        0.5 * np.sum(log_w, axis=1)[:, None]
        - 0.5 * np.sum(np.log(spread), axis=1)
        - 0.5 * within[:, None]
        - 0.5 * (np.matmul((ybar * ybar)[:, None, :], a)[:, 0, :] - total * m_hat**2)
        - 0.5 * np.log(total)
        + log_prior
    )
    p = np.exp(log_lik - np.max(log_lik))
    p /= np.sum(p)
    column = np.where(present, np.cumsum(present) - 1, -1)
    return HistoryPosterior(p, sums.tau2[:, None], omega2[None, :], s, ybar, m_hat, total, column)


def fit_refined(
    y: np.ndarray, v: np.ndarray, theme: np.ndarray, themes: int, hyper: Hyperprior, coarse: HistoryPosterior
) -> HistoryPosterior:
    """``coarse`` again, on a finer grid where its posterior sits on few grid points (a large archive pins tau and
    omega down to less than the coarse spacing): ``GRID`` equal slices of each range that holds weight, one coarse
    point beyond it either side, with the prior density at their midpoints (tau uniform, omega half-normal); the
    sums are rebuilt from the comparisons (``y``, ``v``, theme indices)."""
    if float(np.max(coarse.weights)) <= REFINE_ABOVE:
        return coarse

    def finer(coarse_values: np.ndarray, marginal: np.ndarray) -> np.ndarray:
        held = np.nonzero(marginal > 1e-12)[0]
        low = 0.0 if held[0] == 0 else float(coarse_values[held[0] - 1])
        high = float(coarse_values[min(held[-1] + 1, len(coarse_values) - 1)])
        return low + (np.arange(GRID) + 0.5) / GRID * (high - low)

    tau = finer(np.sqrt(coarse.tau2[:, 0]), np.sum(coarse.weights, axis=1))
    omega = finer(np.sqrt(coarse.omega2[0]), np.sum(coarse.weights, axis=0))
    log_prior = np.broadcast_to(-(omega**2) / (2 * hyper.between_themes_scale**2), (GRID, GRID))
    sums = ThemeSums.empty(tau**2, themes)
    sums.add(y, v, theme)
    return fit_history(sums, omega**2, np.ascontiguousarray(log_prior), hyper.mean_sd)


def primary_themes(effects: Sequence[Effect], prefer: str | None = None) -> tuple[list[str], np.ndarray]:
    """Theme names and each comparison's theme index: its first theme, or ``prefer`` when it carries that one (so
    that every comparison of the theme asked about counts for it, and each comparison still counts once)."""
    chosen = [prefer if prefer is not None and prefer in e.themes else e.themes[0] for e in effects]
    names = sorted(set(chosen))
    index = {name: i for i, name in enumerate(names)}
    return names, np.array([index[c] for c in chosen], dtype=int)


def lift_prior(
    effects: list[Effect], theme: str, page_area: str | None = None, hyper: Hyperprior = DEFAULT_HYPERPRIOR
) -> LiftPrior:
    """The prior for a new test of ``theme`` from the archive's trusted comparisons (each counted once: in
    ``theme`` when it carries it, else in its first theme). ``page_area`` is accepted for the caller's convenience:
    the lift prior is by theme; the page area sets the baseline rate (:func:`baseline_prior`)."""
    trusted = [e for e in effects if e.trusted and not e.double_zero]
    if len(trusted) < 2:
        raise ValueError("the archive needs at least two trusted comparisons to build a prior")
    names, index = primary_themes(trusted, prefer=theme)
    y, v = np.array([e.log_rr for e in trusted]), np.array([e.variance for e in trusted])
    tau2, omega2, log_prior = history_grid(hyper)
    sums = ThemeSums.empty(tau2, len(names))
    sums.add(y, v, index)
    j = names.index(theme) if theme in names else None
    fitted = fit_refined(y, v, index, len(names), hyper, fit_history(sums, omega2, log_prior, hyper.mean_sd))
    post = fitted.predict(j)
    k = 0 if j is None else int(sums.counts[j])
    source = (
        f"theme {theme} ({k} comparisons) within the whole archive ({len(trusted)} comparisons, {len(names)} themes)"
    )
    warning = None
    if k < MIN_GROUP:
        warning = (
            f"only {k} comparison(s) of theme {theme}: {post.weight_on_theme:.0%} of the prior's mean comes directly "
            "from their average, the rest from the archive-wide average (which includes them) and the hyperprior"
            if k
            else f"no comparison of theme {theme} yet: the whole archive's prior, widened by how much themes differ"
        )
    return LiftPrior(
        source,
        k,
        post.mean,
        post.sd,
        post.tau2,
        warning,
        len(trusted),
        len(names),
        post.omega,
        post.weight_on_theme,
        hyper.label(),
    )


@dataclass(frozen=True)
class BaselinePrior:
    page_area: str
    controls: int
    alpha: float
    beta: float

    @property
    def mean(self) -> float:
        return self.alpha / (self.alpha + self.beta)

    def interval(self, level: float = 0.95) -> tuple[float, float]:
        tail = (1 - level) / 2
        low, high = stats.beta.ppf([tail, 1 - tail], self.alpha, self.beta)
        return float(low), float(high)


def baseline_prior(records: list[Record], page_area: str) -> BaselinePrior | None:
    """Beta prior of the control conversion rate on a page area, fitted across its control arms."""
    counts, totals = [], []
    for r in records:
        if r.page_area != page_area or r.status not in ("finished", "stopped-early"):
            continue
        control = r.control_arm()
        if control.visitors and control.conversions is not None:
            counts.append(control.conversions)
            totals.append(control.visitors)
    if len(counts) < 2:
        return None
    fit = beta_binomial_fit(counts, totals)
    if fit is None:
        return None
    return BaselinePrior(page_area, len(counts), fit[0], fit[1])


def prior_yaml(prior: LiftPrior, baseline: BaselinePrior | None) -> str:
    """Lines to paste under a record's ``plan:`` key."""
    lines = []
    if baseline is not None:
        b_low, b_high = baseline.interval()
        lines.append(
            f"  baseline_rate: {baseline.mean:.5f}  # page area {baseline.page_area}: 95% {b_low:.4f} to {b_high:.4f}"
        )
    low, high = prior.interval()
    lines += [
        f"  prior:  # expected lift {prior.lift:+.2%}, 95% {low:+.2%} to {high:+.2%}; "
        f"P(lift > 0) {prior.prob_above(0.0):.2f}",
        f"    source: {prior.source}",
        f"    mean_log_lift: {prior.mean:.6f}",
        f"    sd_log_lift: {prior.sd:.6f}",
    ]
    return "\n".join(lines) + "\n"


@dataclass(frozen=True)
class InformedLift:
    """One comparison's lift with the history prior combined with the test's normal likelihood on the log scale."""

    arm: str
    observed_lift: float | None
    shrunk_lift: float
    low: float
    high: float
    prob_positive: float
    prob_above_minimum: float | None
    minimum_lift: float | None
    weight_on_data: float  # how much of the estimate comes from this test (0..1)


def informed_lift(
    arm: str, log_rr: float, se: float, prior: LiftPrior, minimum_lift: float | None = None
) -> InformedLift:
    """Normal-normal update: posterior precision = 1/se^2 + 1/sd^2, mean weighted by precision."""
    if se <= 0:
        raise ValueError("the standard error must be > 0")
    precision = 1 / se**2 + 1 / prior.sd**2
    mean = (log_rr / se**2 + prior.mean / prior.sd**2) / precision
    sd = math.sqrt(1 / precision)
    z = float(stats.norm.ppf(0.975))
    above = None if minimum_lift is None else float(stats.norm.sf((math.log1p(minimum_lift) - mean) / sd))
    return InformedLift(
        arm,
        math.expm1(log_rr),
        math.expm1(mean),
        math.expm1(mean - z * sd),
        math.expm1(mean + z * sd),
        float(stats.norm.sf(-mean / sd)),
        above,
        minimum_lift,
        (1 / se**2) / precision,
    )


def prior_for_record(effects: list[Effect], record: Record, hyper: Hyperprior = DEFAULT_HYPERPRIOR) -> LiftPrior:
    """The history prior for a test (its first theme), built from the other tests only: the test's own data are
    the likelihood."""
    others = [e for e in effects if e.record_id != record.id]
    return lift_prior(others, record.themes[0], record.page_area, hyper)
