"""Random-effects meta-analysis of many groups of estimates in one vectorised pass.

The estimators and intervals of :func:`archive.stats.meta.random_effects`, computed for every group at once: the
estimates are sorted by group once, every sum over a group is an ``np.add.reduceat`` call, and the iterative parts
(Paule-Mandel, REML, the Q-profile interval of tau^2) advance all groups together by Newton steps kept inside a
bracket, with bisection when a step would leave it.

An estimate may belong to several groups: the caller repeats it, once per group, with the matching group index.

Estimates of one cluster (the comparisons of a test against its shared control) may be correlated with a known
covariance: V + tau^2 I is then block-diagonal, each block a diagonal plus c 11', and every product with its inverse
is a sum over estimates with one correction per block (Sherman-Morrison), so the pass stays vectorised.
"""

from __future__ import annotations

import operator
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
from scipy import special

from archive.stats.meta import HKSJ_FLOOR_LABEL, PREDICTION_POINTS, ArrayLike, TauMethod, reml_grid

_MAX_ITERATIONS = 300
_RELATIVE_TOLERANCE = 1e-13

# f(tau2) and df/dtau2 for every group, given one tau2 per group
_RootFunction = Callable[[np.ndarray], tuple[np.ndarray, np.ndarray]]


@dataclass(frozen=True)
class GroupPooling:
    """One entry per group in every array. Groups without estimates are NaN throughout (k = 0)."""

    k: np.ndarray  # int
    tau2: np.ndarray
    tau2_low: np.ndarray  # Q-profile interval (Viechtbauer 2007); NaN for k < 2
    tau2_high: np.ndarray
    mean: np.ndarray
    se: np.ndarray  # HKSJ standard error where that interval is used, else the plain random-effects one
    low: np.ndarray
    high: np.ndarray
    p_value: np.ndarray
    prediction_low: np.ndarray  # tau^2 carried by its confidence distribution (see prediction_interval); NaN for k < 3
    prediction_high: np.ndarray
    q: np.ndarray  # Cochran's Q (fixed-effect weights)
    df: np.ndarray  # k - 1
    q_p_value: np.ndarray  # NaN for k < 2
    i_squared: np.ndarray  # fraction, 0..1
    fixed_mean: np.ndarray
    fixed_se: np.ndarray
    method: str
    interval_kind: str  # "HKSJ ... (t, k-1 df); normal where k = 1" or "normal"
    hts_low: np.ndarray | None = None  # Higgins, Thompson & Spiegelhalter (2009) with the plug-in tau^2; k < 3 NaN
    hts_high: np.ndarray | None = None

    @property
    def n_groups(self) -> int:
        return len(self.k)


class _Groups:
    """Group-wise reductions of per-estimate arrays that are sorted by group (contiguous runs, ``np.add.reduceat``)."""

    def __init__(self, sorted_index: np.ndarray, n_groups: int) -> None:
        self.n = n_groups
        self.k = np.bincount(sorted_index, minlength=n_groups)
        self.nonempty = self.k > 0
        self.all_nonempty = bool(self.nonempty.all())
        self.starts = (np.cumsum(self.k) - self.k)[self.nonempty]

    def _reduce(self, ufunc: np.ufunc, x: np.ndarray, empty: float) -> np.ndarray:
        if len(x) == 0:
            return np.full(self.n, empty)
        reduced = ufunc.reduceat(x, self.starts)
        if self.all_nonempty:
            return np.asarray(reduced, dtype=float)
        out = np.full(self.n, empty)
        out[self.nonempty] = reduced
        return out

    def sum(self, x: np.ndarray) -> np.ndarray:
        return self._reduce(np.add, x, 0.0)

    def minimum(self, x: np.ndarray) -> np.ndarray:
        return self._reduce(np.minimum, x, np.inf)

    def maximum(self, x: np.ndarray) -> np.ndarray:
        return self._reduce(np.maximum, x, -np.inf)

    def spread(self, per_group: np.ndarray) -> np.ndarray:
        """Each group's value repeated for each of its estimates."""
        return np.repeat(per_group, self.k)


def _validate(
    effects: ArrayLike, variances: ArrayLike, group_index: Sequence[int] | np.ndarray, n_groups: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray, int]:
    y = np.asarray(effects, dtype=float)
    v = np.asarray(variances, dtype=float)
    g = np.asarray(group_index)
    if y.ndim != 1 or y.shape != v.shape or y.shape != g.shape:
        raise ValueError("effects, variances and group_index must be 1-d sequences of the same length")
    try:
        n = operator.index(n_groups)
    except TypeError:
        raise ValueError("n_groups must be an integer") from None
    if n < 0:
        raise ValueError("n_groups must be >= 0")
    if np.any(~np.isfinite(y)) or np.any(~np.isfinite(v)) or np.any(v <= 0):
        raise ValueError("effects must be finite and variances finite and > 0")
    if g.size:
        if not np.issubdtype(g.dtype, np.integer):
            raise ValueError("group_index must hold integers")
        if g.min() < 0 or g.max() >= n:
            raise ValueError("group_index values must lie in 0 .. n_groups - 1")
    return y, v, g.astype(np.intp), n


def _bracketed_newton(
    fn: _RootFunction, lo: np.ndarray, hi: np.ndarray, active: np.ndarray, atol: np.ndarray
) -> np.ndarray:
    """A root of fn in [lo, hi] for every active group, given fn(lo) > 0 > fn(hi).

    Newton steps from lo; a step landing outside the current bracket is replaced by bisection, and every new point
    narrows the bracket. Stops per group when a step or the bracket is below 1e-13 relative (plus atol).
    """
    lo, hi = lo.copy(), hi.copy()
    x = np.where(active, lo, 0.0)
    f, slope = fn(x)
    todo = active.copy()
    for _ in range(_MAX_ITERATIONS):
        if not todo.any():
            break
        candidate = x - f / slope
        inside = (candidate > lo) & (candidate < hi)
        candidate = np.where(inside, candidate, 0.5 * (lo + hi))
        new = np.where(todo, candidate, x)
        f_new, slope_new = fn(new)
        lo = np.where(todo & (f_new > 0), new, lo)
        hi = np.where(todo & (f_new < 0), new, hi)
        tolerance = _RELATIVE_TOLERANCE * new + atol
        done = (f_new == 0) | (np.abs(new - x) <= tolerance) | (hi - lo <= tolerance)
        x, f, slope = new, f_new, slope_new
        todo &= ~done
    return x


class _Blocks:
    """Estimates of one group and cluster (e.g. the comparisons of one test against its shared control), contiguous
    in the sorted order: every estimate is in a block (most of size 1), ``c`` the covariance of any two estimates of
    a block (0 for blocks of one)."""

    def __init__(self, starts: np.ndarray, c: np.ndarray, group: np.ndarray, n_estimates: int, n: int) -> None:
        self.starts, self.c, self.group, self.n = starts, c, group, n
        sizes = np.diff(np.append(starts, n_estimates))
        self.of = np.repeat(np.arange(len(starts)), sizes)  # block of every estimate

    def sum(self, x: np.ndarray) -> np.ndarray:
        """Per block: the sum of x over its estimates (bincount: several times faster than reduceat over many
        short runs)."""
        return np.bincount(self.of, weights=x, minlength=len(self.starts))

    def spread(self, per_block: np.ndarray) -> np.ndarray:
        return per_block[self.of]

    def to_groups(self, per_block: np.ndarray) -> np.ndarray:
        return np.bincount(self.group, weights=per_block, minlength=self.n)


_EMPTY = np.zeros(0)


@dataclass(frozen=True)
class _State:
    """The model at one tau^2 per group: W = (V + tau^2 I)^-1 with V block-diagonal (a diagonal of own variances
    plus c 11' per block), by Sherman-Morrison: W = D - f u u' per block, D = diag(u), u = 1 / (own + tau^2),
    f = c / (1 + c sum u)."""

    u: np.ndarray  # per estimate
    f: np.ndarray  # per block
    w1: np.ndarray  # W 1 per estimate
    sw: np.ndarray  # 1' W 1 per group
    mean: np.ndarray  # generalised least squares mean per group
    r: np.ndarray  # y - mean
    e: np.ndarray  # W r


class _Model:
    """Generalised Q and the REML score of every group, at one tau^2 per group.

    Estimates are independent unless ``blocks`` says otherwise: estimates of one block (comparisons of one test
    against its shared control) have covariance c, so V + tau^2 I is block-diagonal and every product with its
    inverse is a sum over estimates plus a correction per block."""

    def __init__(self, groups: _Groups, y: np.ndarray, v: np.ndarray, blocks: _Blocks | None = None) -> None:
        self.groups, self.y, self.v, self.blocks = groups, y, v, blocks
        self.own = v
        if blocks is not None:
            self.own = v - blocks.spread(blocks.c)

    def apply(self, state_u: np.ndarray, f: np.ndarray, x: np.ndarray) -> np.ndarray:
        """W x for a vector x over the estimates."""
        out = state_u * x
        b = self.blocks
        if b is not None:
            out -= state_u * b.spread(f * b.sum(out))
        return out

    def state(self, tau2: np.ndarray, residuals: bool = True) -> _State:
        """W 1, 1'W1 and the mean at tau2; with ``residuals`` also r and W r (else empty). Per block
        W 1 = u / (1 + c sum u) and W r = u (r - f sum u r)."""
        s, b = self.groups, self.blocks
        u = 1 / (self.own + s.spread(tau2))
        f = _EMPTY
        w1 = u
        if b is not None:
            cs = b.c * b.sum(u)
            f = b.c / (1 + cs)
            w1 = u * b.spread(1 / (1 + cs))
        sw = s.sum(w1)
        mean = s.sum(w1 * self.y) / sw
        if not residuals:
            return _State(u, f, w1, sw, mean, _EMPTY, _EMPTY)
        r = self.y - s.spread(mean)
        return _State(u, f, w1, sw, mean, r, self.apply(u, f, r))

    def trace_w(self, st: _State) -> np.ndarray:
        """tr W = sum u - sum over blocks of f sum u^2 (= 1'W1 for independent estimates)."""
        b = self.blocks
        if b is None:
            return st.sw
        return self.groups.sum(st.u) - b.to_groups(st.f * b.sum(st.u**2))

    def q_at(self, tau2: np.ndarray) -> tuple[_State, np.ndarray]:
        st = self.state(tau2)
        return st, self.groups.sum(st.r * st.e)

    def generalised_q(self, tau2: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Q(tau2) = r'W r, r = y - mu, and dQ/dtau2 = -r'W W r (mu minimises Q, so its change drops out)."""
        st = self.state(tau2)
        s = self.groups
        return s.sum(st.r * st.e), -s.sum(st.e * st.e)

    def _reml_parts(self, tau2: np.ndarray) -> tuple[np.ndarray, _State]:
        st = self.state(tau2)
        s = self.groups
        return s.sum(st.e * st.e) - (self.trace_w(st) - s.sum(st.w1 * st.w1) / st.sw), st

    def reml_score(self, tau2: np.ndarray) -> np.ndarray:
        """Twice the restricted score: y'PPy - tr(P), P = W - W11'W / 1'W1, so P y = W r and
        tr P = tr W - (W1)'(W1) / 1'W1 (independent estimates: sum w^2 (y - mu)^2 - (sum w - sum w^2 / sum w))."""
        return self._reml_parts(tau2)[0]

    def reml_score_and_slope(self, tau2: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Twice the restricted score and its derivative in tau^2, -2 y'PPPy + tr(PP) (as dP/dtau^2 = -PP), with
        y'PPPy = e'We - (1'We)^2 / 1'W1 (e = Py) and tr(PP) = tr(WW) - 2 (W1)'W(W1) / 1'W1 + ((W1)'(W1) / 1'W1)^2."""
        s, b = self.groups, self.blocks
        score, st = self._reml_parts(tau2)
        we = self.apply(st.u, st.f, st.e)
        ww1 = self.apply(st.u, st.f, st.w1)
        e_p_e = s.sum(st.e * we) - s.sum(st.w1 * st.e) ** 2 / st.sw
        tr_ww = s.sum(st.u * st.u)
        if b is not None:
            u2, u3 = b.sum(st.u**2), b.sum(st.u**3)
            tr_ww -= b.to_groups(2 * st.f * u3 - st.f**2 * u2**2)
        sw2 = s.sum(st.w1 * st.w1)
        tr_pp = tr_ww - 2 * s.sum(st.w1 * ww1) / st.sw + (sw2 / st.sw) ** 2
        return score, -2 * e_p_e + tr_pp

    def negative_restricted_loglik(self, tau2: np.ndarray) -> np.ndarray:
        """0.5 (log det(V + tau^2 I) + log 1'W1 + r'Wr); per block log det = sum log(own + tau^2) + log(1 + c sum u)."""
        st = self.state(tau2)
        s, b = self.groups, self.blocks
        log_det = s.sum(np.log(self.own + s.spread(tau2)))
        if b is not None:
            log_det += b.to_groups(np.log1p(b.c * b.sum(st.u)))
        return 0.5 * (log_det + np.log(st.sw) + s.sum(st.r * st.e))


def _solve_q(
    model: _Model,
    target: np.ndarray,
    q0: np.ndarray,
    active: np.ndarray,
    k_var_y: np.ndarray,
    atol: np.ndarray,
    start: np.ndarray | None = None,
) -> np.ndarray:
    """tau^2 with generalised Q(tau^2) = target; 0 where Q(0) <= target.

    Q decreases in tau^2, so the root is unique. Upper bracket: Q(t) <= sum (y - ybar)^2 / t = k var(y) / t (the
    weighted mean minimises Q, every weight is <= 1/t), so Q < target at t = 2 k var(y) / target. Newton runs on
    1/target - 1/Q(t), which is close to linear in t where Q behaves like a / (b + t), so few steps are needed.
    ``start`` (optional) is a known lower bound of the root per group, e.g. the root for a larger target.
    """
    solve = active & (q0 > target)
    hi = np.where(solve, 2 * k_var_y / target, 1.0)

    def fn(t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        q, slope = model.generalised_q(t)
        return 1 / target - 1 / q, slope / (q * q)

    lo = np.zeros_like(hi) if start is None else np.where(solve, np.minimum(start, hi), 0.0)
    root = _bracketed_newton(fn, lo, hi, solve, atol)
    return np.where(solve, root, 0.0)


def _tau2_reml(
    model: _Model, active: np.ndarray, v_min: np.ndarray, v_max: np.ndarray, var_y: np.ndarray, atol: np.ndarray
) -> np.ndarray:
    """REML per group, as :func:`archive.stats.meta.tau2_reml`: the best local maximum of the restricted likelihood.

    The score is scanned on the same grid (one pass per grid point, all groups together); each sign change from
    + to - is solved; when a group has several, they are solved in rounds (first bracket of every group, then the
    second, ...) and the one with the highest likelihood kept, with tau^2 = 0 a candidate where the score there is
    <= 0.
    """
    n = len(active)
    # groups with k < 2 get a harmless grid; they are masked out below
    inner = reml_grid(np.where(active, v_min, 1.0), np.where(active, v_max, 1.0), np.where(active, var_y, 1.0))
    grid = np.concatenate([np.zeros((n, 1)), inner], axis=1)
    scores = np.empty_like(grid)
    for j in range(grid.shape[1]):
        scores[:, j] = model.reml_score(grid[:, j])
    brackets = (scores[:, :-1] > 0) & (scores[:, 1:] <= 0) & active[:, None]
    best = np.zeros(n)
    best_nll = np.where(active & (scores[:, 0] <= 0), model.negative_restricted_loglik(np.zeros(n)), np.inf)
    rank = np.cumsum(brackets, axis=1)
    rows = np.arange(n)
    for r in range(1, int(rank[:, -1].max(initial=0)) + 1):
        chosen = brackets & (rank == r)
        has = chosen.any(axis=1)
        j = chosen.argmax(axis=1)
        lo, hi = grid[rows, j], grid[rows, j + 1]
        at_grid_point = has & (scores[rows, j + 1] == 0)
        root = _bracketed_newton(model.reml_score_and_slope, lo, hi, has & ~at_grid_point, atol)
        root = np.where(at_grid_point, hi, np.where(has, root, 0.0))
        value = np.where(has, model.negative_restricted_loglik(root), np.inf)
        better = value < best_nll
        best = np.where(better, root, best)
        best_nll = np.where(better, value, best_nll)
    return best


def _by_distinct(fn: Callable[[np.ndarray], np.ndarray], x: np.ndarray) -> np.ndarray:
    """fn(x) computed once per distinct value (quantiles by degrees of freedom: few distinct values, many groups)."""
    distinct, inverse = np.unique(x, return_inverse=True)
    return np.asarray(fn(distinct), dtype=float)[inverse]


def pool_groups(
    effects: ArrayLike,
    variances: ArrayLike,
    group_index: Sequence[int] | np.ndarray,
    n_groups: int,
    method: TauMethod = "REML",
    hksj: bool = True,
    confidence: float = 0.95,
    hksj_floor: bool = True,
    prediction: bool = True,
    clusters: Sequence[int] | np.ndarray | None = None,
    shared: ArrayLike | None = None,
) -> GroupPooling:
    """Random-effects pooling of every group: ``effects[i]`` (variance ``variances[i]``) belongs to group
    ``group_index[i]`` in 0 .. n_groups - 1. Group by group the result equals
    ``random_effects(effects[group_index == j], variances[group_index == j], method, hksj, confidence, hksj_floor,
    clusters=clusters[group_index == j], shared=shared[group_index == j])``, with None there as NaN here.

    ``clusters`` (integers) and ``shared`` (covariances) mark estimates that are correlated: two estimates of one
    group in the same cluster have covariance ``shared`` (equal within a cluster, 0 <= shared < variance), e.g. the
    comparisons of one test against its shared control. Without them the estimates are independent."""
    y, v, g, n = _validate(effects, variances, group_index, n_groups)
    cl, c = _validate_clusters(clusters, shared, v)
    if method not in ("DL", "PM", "REML"):
        raise ValueError(f"unknown tau^2 method {method!r}; use DL, PM or REML")
    if not 0 < confidence < 1:
        raise ValueError("confidence must lie strictly between 0 and 1")
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        return _pool(y, v, g, n, method, hksj, confidence, hksj_floor, prediction, cl, c)


def _validate_clusters(
    clusters: Sequence[int] | np.ndarray | None, shared: ArrayLike | None, v: np.ndarray
) -> tuple[np.ndarray | None, np.ndarray | None]:
    if clusters is None and shared is None:
        return None, None
    if clusters is None or shared is None:
        raise ValueError("clusters and shared go together")
    cl, c = np.asarray(clusters), np.asarray(shared, dtype=float)
    if cl.shape != v.shape or c.shape != v.shape:
        raise ValueError("clusters and shared must have one entry per effect")
    if cl.size and not np.issubdtype(cl.dtype, np.integer):
        raise ValueError("clusters must hold integers")
    if np.any(~np.isfinite(c)) or np.any(c < 0) or np.any(c >= v):
        raise ValueError("shared covariances must be finite, >= 0 and below the effect's variance")
    return cl.astype(np.int64), c


def _blocks(g: np.ndarray, cl: np.ndarray, c: np.ndarray, n: int) -> _Blocks | None:
    """The blocks of estimates of one group and cluster (estimates sorted by group, then cluster); None when no
    block holds two estimates."""
    if len(g) < 2:
        return None
    new = np.concatenate([[True], (g[1:] != g[:-1]) | (cl[1:] != cl[:-1])])
    starts = np.nonzero(new)[0]
    sizes = np.diff(np.append(starts, len(g)))
    if not bool((sizes >= 2).any()):
        return None
    block_c = np.where(sizes >= 2, c[starts], 0.0)
    blocks = _Blocks(starts, block_c, g[starts], len(g), n)
    if np.any(np.where(sizes[blocks.of] >= 2, c != blocks.spread(block_c), False)):
        raise ValueError("shared must be equal for every effect of a cluster within a group")
    return blocks


def _pool(
    y: np.ndarray,
    v: np.ndarray,
    g: np.ndarray,
    n: int,
    method: str,
    hksj: bool,
    confidence: float,
    floor: bool,
    prediction: bool = True,
    cl: np.ndarray | None = None,
    c: np.ndarray | None = None,
) -> GroupPooling:
    blocks = None
    if cl is not None and c is not None:
        if len(g) > 1:
            order = np.lexsort((cl, g))
            y, v, g, cl, c = y[order], v[order], g[order], cl[order], c[order]
        blocks = _blocks(g, cl, c, n)
    elif len(g) > 1 and not bool(np.all(g[1:] >= g[:-1])):
        # a stable sort of small integers is a radix sort in numpy: several times faster than on int64
        order = np.argsort(g.astype(np.uint16) if n <= 1 << 16 else g, kind="stable")
        y, v, g = y[order], v[order], g[order]
    s = _Groups(g, n)
    model = _Model(s, y, v, blocks)
    k = s.k.astype(int)
    some, multi = k >= 1, k >= 2
    df = np.where(some, k - 1, np.nan).astype(float)
    nan = np.full(n, np.nan)

    # fixed effect and Cochran's Q (generalised least squares with the within-study covariance)
    zero, q = model.q_at(np.zeros(n))
    sw0 = zero.sw
    fixed_mean = zero.mean
    fixed_se = np.sqrt(1 / sw0)
    q_p_value = nan.copy()
    q_p_value[multi] = special.chdtrc(df[multi], q[multi])
    # I^2 = max(0, (Q - df) / Q); 0 when Q = 0 or df = 0 (one estimate: Q is 0 up to rounding)
    i_squared = np.where((q > 0) & multi, np.maximum(0.0, (q - df) / q), 0.0)

    # scales for the iterations: the population variance of y (the scalar code's np.var), the extreme v
    y_bar = s.sum(y) / k
    var_y = s.sum((y - s.spread(y_bar)) ** 2) / k
    v_min, v_max = s.minimum(v), s.maximum(v)
    k_var_y = np.where(multi, k * var_y, 0.0)
    atol = np.where(some, 1e-15 * v_min, 0.0)  # below the rounding noise of a root near 0

    if method == "DL":
        # moment estimator: E[Q] = k - 1 + tau^2 tr(P0), tr(P0) = tr W0 - (W0 1)'(W0 1) / 1'W0 1 (with independent
        # estimates sum w - sum w^2 / sum w, DerSimonian & Laird 1986)
        scale = model.trace_w(zero) - s.sum(zero.w1 * zero.w1) / sw0
        tau2 = np.where(multi & (scale > 0), np.maximum(0.0, (q - df) / scale), 0.0)
    elif method == "PM":
        tau2 = _solve_q(model, np.where(multi, df, 1.0), q, multi, k_var_y, atol)
    else:
        tau2 = _tau2_reml(model, multi, v_min, v_max, var_y, atol)
    tau2 = np.where(some, tau2, 0.0)

    # random-effects mean; HKSJ: se * sqrt(q_hk), q_hk = sum w (y - mu)^2 / (k - 1) (floored at 1 by default), t, k-1 df
    fitted, q_tau = model.q_at(tau2)
    mean = fitted.mean
    se_plain = np.sqrt(1 / fitted.sw)
    tail = 0.5 + confidence / 2
    use_t = multi if hksj else np.zeros(n, dtype=bool)
    use_z = some & ~use_t
    q_hk = q_tau / df
    if floor:
        q_hk = np.maximum(1.0, q_hk)  # Knapp-Hartung modification: never narrower than the plain interval
    se = np.where(use_t, se_plain * np.sqrt(q_hk), se_plain)
    crit = nan.copy()
    crit[use_t] = _by_distinct(lambda d: special.stdtrit(d, tail), df[use_t])
    crit[use_z] = special.ndtri(tail)
    p_value = nan.copy()
    z = np.abs(mean / se)
    p_value[use_t] = np.where(se[use_t] > 0, 2 * special.stdtr(df[use_t], -(z[use_t])), 0.0)
    p_value[use_z] = 2 * special.ndtr(-z[use_z])

    # Higgins-Thompson-Spiegelhalter: mean +/- t_{k-2} sqrt(tau2 + SE^2), with the plain (not HKSJ) SE
    three = k >= 3
    half = nan.copy()
    half[three] = _by_distinct(lambda d: special.stdtrit(d, tail), k[three] - 2.0) * np.sqrt(
        tau2[three] + se_plain[three] ** 2
    )
    wanted = three if prediction else np.zeros(n, dtype=bool)
    pred_low, pred_high = _cd_prediction(model, q, df, wanted, k_var_y, atol, confidence)

    # Q-profile interval of tau^2: the generalised Q equal to the chi-square (k-1) quantiles
    upper_q, lower_q = nan.copy(), nan.copy()
    upper_q[multi] = _by_distinct(lambda d: special.chdtri(d, 1 - (tail)), df[multi])
    lower_q[multi] = _by_distinct(lambda d: special.chdtri(d, 1 - (0.5 - confidence / 2)), df[multi])
    tau2_low = _solve_q(model, np.where(multi, upper_q, 1.0), q, multi, k_var_y, atol)
    tau2_high = _solve_q(model, np.where(multi, lower_q, 1.0), q, multi, k_var_y, atol)

    def group_values(x: np.ndarray, valid: np.ndarray = some) -> np.ndarray:
        return np.where(valid, x, np.nan).astype(float)

    return GroupPooling(
        k=k,
        tau2=group_values(tau2),
        tau2_low=group_values(tau2_low, multi),
        tau2_high=group_values(tau2_high, multi),
        mean=group_values(mean),
        se=group_values(se),
        low=group_values(mean - crit * se),
        high=group_values(mean + crit * se),
        p_value=group_values(p_value),
        prediction_low=group_values(pred_low, wanted),
        prediction_high=group_values(pred_high, wanted),
        q=group_values(q),
        df=df,
        q_p_value=q_p_value,
        i_squared=group_values(i_squared),
        fixed_mean=group_values(fixed_mean),
        fixed_se=group_values(fixed_se),
        method=method,
        interval_kind=_interval_kind(hksj, floor),
        hts_low=group_values(mean - half, three),
        hts_high=group_values(mean + half, three),
    )


def _interval_kind(hksj: bool, floor: bool) -> str:
    if not hksj:
        return "normal"
    return (HKSJ_FLOOR_LABEL if floor else "HKSJ (t, k-1 df)") + "; normal where k = 1"



def _cd_prediction(
    model: _Model,
    q0: np.ndarray,
    df: np.ndarray,
    active: np.ndarray,
    k_var_y: np.ndarray,
    atol: np.ndarray,
    confidence: float,
) -> tuple[np.ndarray, np.ndarray]:
    """:func:`archive.stats.meta.cd_prediction_interval` for every group at once: the tau^2 of each slice of its
    confidence distribution by the bracketed Newton solver (slices in order of growing tau^2, each started from
    the last root), the mixture quantiles by Newton steps kept inside a shrinking bracket."""
    n = len(df)
    u = (np.arange(PREDICTION_POINTS) + 0.5) / PREDICTION_POINTS
    centres = np.zeros((n, PREDICTION_POINTS))
    scales = np.ones((n, PREDICTION_POINTS))
    if not active.any():
        return np.full(n, np.nan), np.full(n, np.nan)
    dfs = np.where(active, df, 1.0)
    tau2 = np.zeros(n)
    for j in range(PREDICTION_POINTS - 1, -1, -1):  # u falling: chi-square target falling, tau^2 growing
        target = _by_distinct(lambda d, p=u[j]: special.chdtri(d, 1 - (p)), dfs)  # type: ignore[misc]
        tau2 = _solve_q(model, target, q0, active, k_var_y, atol, start=tau2)
        st = model.state(tau2, residuals=False)
        centres[:, j] = st.mean
        scales[:, j] = np.sqrt(tau2 + 1 / st.sw)
    centres = np.where(active[:, None], centres, 0.0)
    scales = np.where(active[:, None] & (scales > 0), scales, 1.0)
    tail = (1 - confidence) / 2
    spread = np.sqrt(np.mean(scales**2, axis=1) + np.var(centres, axis=1))
    middle = np.mean(centres, axis=1)
    out = []
    for target_p in (tail, 1 - tail):
        lo = np.min(centres - 10 * scales, axis=1)
        hi = np.max(centres + 10 * scales, axis=1)
        x = middle + float(special.ndtri(target_p)) * spread
        todo = active.copy()
        for _ in range(100):
            z = (x[:, None] - centres) / scales
            cdf = np.mean(special.ndtr(z), axis=1) - target_p
            density = np.mean(np.exp(-0.5 * z * z) / scales, axis=1) / np.sqrt(2 * np.pi)
            lo = np.where(cdf < 0, x, lo)
            hi = np.where(cdf > 0, x, hi)
            step = np.where(density > 0, cdf / np.where(density > 0, density, 1.0), np.inf)
            candidate = x - step
            candidate = np.where((candidate > lo) & (candidate < hi), candidate, 0.5 * (lo + hi))
            done = (np.abs(candidate - x) <= 1e-13 * (np.abs(x) + spread)) | (cdf == 0)
            x = np.where(todo, candidate, x)
            todo &= ~done
            if not todo.any():
                break
        out.append(np.where(active, x, np.nan))
    return out[0], out[1]
