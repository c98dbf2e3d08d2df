"""Hierarchical beta-binomial model of rates across groups (Gelman et al., Bayesian Data Analysis, 3rd ed., §5.3).

Group j has rate theta_j ~ Beta(a, b) and count y_j ~ Binomial(n_j, theta_j). The hyperprior p(a, b) ∝ (a + b)^(-5/2)
is flat on (a / (a + b), (a + b)^(-1/2)) and gives a proper posterior. The hyperparameters are integrated on a grid
in (log(a / b), log(a + b)), whose Jacobian is a b; each group's rate then has the posterior mixture of
Beta(a + y_j, b + n_j - y_j) over that grid. Unlike the maximum marginal likelihood fit, which runs off to
a + b -> infinity when the groups look alike (every group shrunk all the way to the mean), the posterior keeps
the uncertainty about how alike the groups are.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import special

_GRID = 60  # points per axis of the hyperparameter grid


@dataclass(frozen=True)
class GroupRates:
    mean: list[float]  # posterior mean of each group's rate
    low: list[float]  # equal-tailed 95% posterior interval
    high: list[float]
    overall: float  # posterior mean of a / (a + b)
    strength_median: float  # posterior median of a + b (prior worth a + b comparisons)
    no_difference: bool  # the data cannot tell the groups apart (see :func:`hierarchical_rates`)


def _log_posterior(x: np.ndarray, z: np.ndarray, y: np.ndarray, n: np.ndarray) -> np.ndarray:
    """log p(x, z | data) up to a constant, x = log(a / b), z = log(a + b)."""
    total = np.exp(z)
    a = total * special.expit(x)
    b = total - a
    a3, b3 = a[..., None], b[..., None]
    likelihood = np.sum(special.betaln(a3 + y, b3 + n - y) - special.betaln(a3, b3), axis=-1)
    return likelihood + np.log(a) + np.log(b) - 2.5 * np.log(total)


def hierarchical_rates(
    counts: Sequence[int],
    totals: Sequence[int],
    fit_counts: Sequence[int] | None = None,
    fit_totals: Sequence[int] | None = None,
    level: float = 0.95,
) -> GroupRates | None:
    """Posterior of each group's rate. The hyperparameters are learned from ``fit_counts`` / ``fit_totals``
    (default: the groups themselves; give disjoint counts when groups share members) and applied to every group.

    ``no_difference`` is true when the posterior median of a + b exceeds the largest group's size: the spread
    between groups the data allow is then smaller than the noise of any one group. None without usable groups."""
    y_all, n_all = np.asarray(counts, float), np.asarray(totals, float)
    y_fit = np.asarray(fit_counts if fit_counts is not None else counts, float)
    n_fit = np.asarray(fit_totals if fit_totals is not None else totals, float)
    keep = n_fit > 0
    y_fit, n_fit = y_fit[keep], n_fit[keep]
    if len(y_fit) < 2 or n_fit.sum() == 0:
        return None
    pooled = (y_fit.sum() + 0.5) / (n_fit.sum() + 1)
    centre = float(special.logit(pooled))
    xs = np.linspace(centre - 5, centre + 5, _GRID)
    zs = np.linspace(np.log(0.1), np.log(1e5 * max(1.0, float(n_fit.max()))), _GRID)
    x, z = np.meshgrid(xs, zs, indexing="ij")
    log_post = _log_posterior(x, z, y_fit, n_fit)
    weights = np.exp(log_post - log_post.max()).ravel()
    weights /= weights.sum()
    used = weights > 1e-9 * weights.max()
    w = weights[used] / weights[used].sum()
    total = np.exp(z.ravel()[used])
    a = total * special.expit(x.ravel()[used])
    b = total - a
    order = np.argsort(total)
    strength = float(total[order][np.searchsorted(np.cumsum(w[order]), 0.5)])
    tail = (1 - level) / 2
    pa = a[None, :] + y_all[:, None]
    pb = b[None, :] + (n_all - y_all)[:, None]
    means = np.sum(w * pa / (pa + pb), axis=1)
    lows, highs = _mixture_quantiles(pa, pb, w, tail), _mixture_quantiles(pa, pb, w, 1 - tail)
    return GroupRates(
        [float(m) for m in means],
        [float(x) for x in lows],
        [float(x) for x in highs],
        float(np.sum(w * a / total)),
        strength,
        strength > float(n_all.max()),
    )


def _mixture_quantiles(a: np.ndarray, b: np.ndarray, w: np.ndarray, p: float) -> np.ndarray:
    """Quantile p of each row's Beta mixture (rows: groups; columns: grid points with weights w), by bisection."""
    keep = w > w.max() * 1e-10  # grid points that carry no weight change no quantile: leave them out
    if not keep.all():
        a, b, w = a[:, keep], b[:, keep], w[keep]
    lo, hi = np.zeros(a.shape[0]), np.ones(a.shape[0])
    for _ in range(24):  # 2^-24: quantiles to 6e-8, far below the 0.1% they are shown to
        mid = 0.5 * (lo + hi)
        below = np.sum(w * special.betainc(a, b, mid[:, None]), axis=1) < p
        lo, hi = np.where(below, mid, lo), np.where(below, hi, mid)
    return 0.5 * (lo + hi)
