"""Beta-Binomial posteriors of conversion rates: P(beat control), P(best), expected loss, lift intervals.

Each arm's rate has the posterior Beta(a0 + conversions, b0 + visitors - conversions) under a Beta(a0, b0) prior
(default uniform, Beta(1, 1)); arms are independent. Nothing here is Monte Carlo:

* P(B > A) uses the exact finite sum that follows from the recurrence in Cook (2003), "Exact calculation of beta
  inequalities", when one of the shape parameters it iterates over is a whole number and the sum is short enough;
  otherwise a fixed Gauss-Legendre rule over breakpoints at each posterior's quantiles.
* P(best) and the expected maximum use the same rule on a grid shared by all arms.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import special

#: the longest exact sum computed before switching to quadrature
MAX_EXACT_TERMS = 2_000_000
_BREAK_PROBS = np.array(
    [1e-12, 1e-8, 1e-5, 1e-3, 0.01, 0.05, 0.15, 0.3, 0.5, 0.7, 0.85, 0.95, 0.99, 0.999, 1 - 1e-5, 1 - 1e-8, 1 - 1e-12]
)
_ORDER = 12
_NODES, _WEIGHTS = np.polynomial.legendre.leggauss(_ORDER)


def _cumulative_matrix() -> np.ndarray:
    """M[j, k]: integral from -1 to node j of the k-th Lagrange polynomial through the Gauss-Legendre nodes, so
    that M @ f(nodes) integrates the interpolant of f from -1 up to each node (spectral integration)."""
    leg = np.polynomial.legendre
    vander = leg.legvander(_NODES, _ORDER - 1)
    antiderivatives = np.stack(
        [leg.legval(_NODES, leg.legint(np.eye(_ORDER)[m], lbnd=-1)) for m in range(_ORDER)], axis=1
    )
    return antiderivatives @ np.linalg.inv(vander)


_CUMULATIVE = _cumulative_matrix()


@dataclass(frozen=True)
class BetaPosterior:
    alpha: float
    beta: float

    @classmethod
    def from_counts(cls, conversions: int, visitors: int, prior: tuple[float, float] = (1.0, 1.0)) -> BetaPosterior:
        a0, b0 = prior
        if a0 <= 0 or b0 <= 0:
            raise ValueError(f"prior shape parameters must be > 0 (got {prior})")
        if visitors < 0 or conversions < 0 or conversions > visitors:
            raise ValueError(f"conversions must lie between 0 and visitors ({conversions} of {visitors})")
        return cls(a0 + conversions, b0 + visitors - conversions)

    @property
    def mean(self) -> float:
        return self.alpha / (self.alpha + self.beta)

    def interval(self, level: float = 0.95) -> tuple[float, float]:
        tail = (1 - level) / 2
        low, high = special.betaincinv(self.alpha, self.beta, [tail, 1 - tail])
        return float(low), float(high)


def _exact_sum(a: float, b: float, c: float, d: float) -> float:
    """P(X > Y), X ~ Beta(a, b), Y ~ Beta(c, d), a a positive whole number:
    sum_{i=0}^{a-1} B(c+i, b+d) / ((b+i) B(1+i, b) B(c, d))."""
    i = np.arange(int(a), dtype=float)
    log_terms = special.betaln(c + i, b + d) - np.log(b + i) - special.betaln(1 + i, b) - special.betaln(c, d)
    return float(np.exp(special.logsumexp(log_terms)))


def _is_whole(x: float) -> bool:
    return float(x).is_integer() and x >= 1


def prob_greater(x: BetaPosterior, y: BetaPosterior) -> float:
    """P(X > Y) for independent Beta variables, exact where a short finite sum exists."""
    a, b, c, d = x.alpha, x.beta, y.alpha, y.beta
    # equivalent forms (Thompson 1933; Cook 2003): g(a,b,c,d) = 1 - g(c,d,a,b) = g(d,b,c,a) = g(d,c,b,a)
    options = []
    if _is_whole(a):
        options.append((a, lambda: _exact_sum(a, b, c, d)))
    if _is_whole(c):
        options.append((c, lambda: 1.0 - _exact_sum(c, d, a, b)))
    if _is_whole(d):
        options.append((d, lambda: _exact_sum(d, b, c, a)))
    if _is_whole(b):
        options.append((b, lambda: 1.0 - _exact_sum(b, a, d, c)))
    if options:
        terms, compute = min(options, key=lambda o: o[0])
        if terms <= MAX_EXACT_TERMS:
            return min(1.0, max(0.0, compute()))
    return float(prob_best([y, x])[1])


def _grid(posteriors: Sequence[BetaPosterior]) -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Legendre nodes and weights over [0, 1], in intervals between the posteriors' quantiles: dense
    where any posterior has mass, so each interval is at most about 1.5 posterior sd wide there."""
    alphas = np.array([p.alpha for p in posteriors])[:, None]
    betas = np.array([p.beta for p in posteriors])[:, None]
    cuts = special.betaincinv(alphas, betas, _BREAK_PROBS[None, :]).ravel()
    edges = np.unique(np.concatenate([[0.0, 1.0], np.clip(cuts, 0.0, 1.0)]))
    lo, hi = edges[:-1], edges[1:]
    half = (hi - lo)[:, None] / 2
    nodes = (lo[:, None] + half * (1 + _NODES[None, :])).ravel()
    weights = (half * _WEIGHTS[None, :]).ravel()
    return nodes, weights


def _cdfs_on_grid(pdf: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """CDFs at the grid nodes by integrating the densities (rows of ``pdf``) from 0: each interval's
    Gauss-Legendre sum, accumulated, plus the spectral integral inside the interval. Much faster than the
    incomplete beta function at every node, and as accurate on this grid (the rule is exact to ~1e-12)."""
    k, n = pdf.shape
    blocks = pdf.reshape(k, n // _ORDER, _ORDER)
    half = weights.reshape(-1, _ORDER)[:, :1] / _WEIGHTS[0]  # (interval width) / 2
    inside = np.einsum("aij,lj->ail", blocks, _CUMULATIVE) * half[None, :, :]
    totals = (blocks @ _WEIGHTS) * half[None, :, 0]
    before = np.cumsum(totals, axis=1) - totals
    cdf = (before[:, :, None] + inside).reshape(k, n)
    return np.clip(cdf / totals.sum(axis=1, keepdims=True), 0.0, 1.0)


def _pdfs(posteriors: Sequence[BetaPosterior], nodes: np.ndarray) -> np.ndarray:
    alphas = np.array([p.alpha for p in posteriors])[:, None]
    betas = np.array([p.beta for p in posteriors])[:, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        log_pdf = special.xlogy(alphas - 1, nodes) + special.xlog1py(betas - 1, -nodes) - special.betaln(alphas, betas)
    return np.nan_to_num(np.exp(log_pdf), nan=0.0, posinf=0.0)


def prob_best(posteriors: Sequence[BetaPosterior]) -> np.ndarray:
    """P(arm i has the highest rate) = integral of f_i(x) prod_{j != i} F_j(x) dx, for each arm."""
    if len(posteriors) < 1:
        raise ValueError("needs at least one arm")
    if len(posteriors) == 1:
        return np.ones(1)
    nodes, weights = _grid(posteriors)
    pdf = _pdfs(posteriors, nodes)
    cdf = _cdfs_on_grid(pdf, weights)
    k = len(posteriors)
    # product of the other arms' CDFs without dividing by a CDF that may underflow to 0
    left = np.ones_like(cdf)
    right = np.ones_like(cdf)
    for i in range(1, k):
        left[i] = left[i - 1] * cdf[i - 1]
        right[k - 1 - i] = right[k - i] * cdf[k - i]
    probs = (pdf * left * right) @ weights
    return np.clip(probs / probs.sum(), 0.0, 1.0)


def expected_max(posteriors: Sequence[BetaPosterior]) -> float:
    """E[max_i p_i] = integral over [0, 1] of 1 - prod_i F_i(x)."""
    nodes, weights = _grid(posteriors)
    product = np.prod(_cdfs_on_grid(_pdfs(posteriors, nodes), weights), axis=0)
    return float((1 - product) @ weights)


def expected_loss(posteriors: Sequence[BetaPosterior]) -> np.ndarray:
    """E[max_j p_j - p_i] for each arm i: the conversion rate given up, on average, by choosing it."""
    best = expected_max(posteriors)
    return np.maximum(0.0, best - np.array([p.mean for p in posteriors]))


def _lift_cdf_function(treatment: BetaPosterior, control: BetaPosterior):  # type: ignore[no-untyped-def]
    """r -> (P(p_t / p_c - 1 <= r), its density at r), by quadrature over the control's posterior:
    F(r) = integral of f_c(x) F_t((1 + r) x) dx and f(r) = integral of x f_c(x) f_t((1 + r) x) dx."""
    nodes, weights = _grid([control])
    weighted_pdf = _pdfs([control], nodes)[0] * weights
    a, b = treatment.alpha, treatment.beta
    log_norm = special.betaln(a, b)

    def cdf_and_density(lift: float) -> tuple[float, float]:
        scaled = np.clip((1 + lift) * nodes, 0.0, 1.0)
        cdf = float(np.clip(special.betainc(a, b, scaled) @ weighted_pdf, 0.0, 1.0))
        with np.errstate(divide="ignore", invalid="ignore"):
            pdf_t = np.exp(special.xlogy(a - 1, scaled) + special.xlog1py(b - 1, -scaled) - log_norm)
        density = float(np.nan_to_num(pdf_t, nan=0.0, posinf=0.0) @ (weighted_pdf * nodes))
        return cdf, density

    return cdf_and_density


def lift_cdf(treatment: BetaPosterior, control: BetaPosterior, lift: float) -> float:
    """P(p_t / p_c - 1 <= lift)."""
    return _lift_cdf_function(treatment, control)(lift)[0]


def lift_interval(treatment: BetaPosterior, control: BetaPosterior, level: float = 0.95) -> tuple[float, float]:
    """Equal-tailed credible interval of the relative lift p_t / p_c - 1: Newton steps on the quadrature CDF,
    started from the normal approximation of the log ratio, with a bracketing root-finder as the fallback."""
    tail = (1 - level) / 2
    function = _lift_cdf_function(treatment, control)
    centre = math.log(treatment.mean / control.mean)
    spread = math.sqrt(
        treatment.beta / (treatment.alpha * (treatment.alpha + treatment.beta + 1))
        + control.beta / (control.alpha * (control.alpha + control.beta + 1))
    )

    def solve(target: float) -> float:
        r = math.expm1(centre + float(special.ndtri(target)) * spread)
        for _ in range(12):
            value, density = function(r)
            if abs(value - target) < 1e-11:
                return r
            if density <= 0:
                break
            step = (value - target) / density
            r_next = r - step
            if r_next <= -1.0:
                break
            r = r_next
        lo = max(-1.0 + 1e-12, math.expm1(centre - 12 * spread))
        hi = math.expm1(centre + 12 * spread)
        while function(lo)[0] > target and lo > -1.0 + 1e-12:
            lo = -1.0 + (lo + 1.0) / 10
        while function(hi)[0] < target:
            hi = hi * 2 + 1
            if hi > 1e9:
                return math.inf
        from scipy import optimize  # imported on first use: it costs a noticeable share of start-up

        return float(optimize.brentq(lambda x: function(x)[0] - target, lo, hi, xtol=1e-12, rtol=1e-12))

    return solve(tail), solve(1 - tail)


def lift_density(treatment: BetaPosterior, control: BetaPosterior, lifts: np.ndarray) -> np.ndarray:
    """Posterior density of the relative lift r: f(r) = integral of x f_c(x) f_t((1 + r) x) dx."""
    nodes, weights = _grid([control, treatment])
    pdf_c = _pdfs([control], nodes)[0]
    scaled = np.clip((1 + lifts[:, None]) * nodes[None, :], 0.0, 1.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        log_t = (
            special.xlogy(treatment.alpha - 1, scaled)
            + special.xlog1py(treatment.beta - 1, -scaled)
            - special.betaln(treatment.alpha, treatment.beta)
        )
    pdf_t = np.nan_to_num(np.exp(log_t), nan=0.0, posinf=0.0)
    return (pdf_t * (nodes * pdf_c)[None, :]) @ weights
