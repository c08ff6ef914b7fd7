"""Grow the tree of candidate remedies, score every node, and suggest one with reasons.

A child is its parent plus one move: a response transform (log, √, 1/y, Box–Cox λ̂ with
regressors), a predictor transform (log, √, 1/x, Box–Tidwell power), the next polynomial
degree, an admitted covariate, an x×covariate interaction, or weights from a power-of-mean
variance function. Moves that cannot apply are pruned with a reason that stays visible.
The same model reached by two paths is one node.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from .cautions import POST_SEARCH_CAUTION
from .errors import BendwiseError, UsageError
from .groups import GroupStats, compute_group_stats
from .linalg import Column, Design, design_rss, fit_design, rounding_floor
from .linearity import nested_f
from .results import LackOfFit
from .scoring import NodeScore, _frame, build_design, score_spec
from .spec import ModelSpec, WeightRule
from .study import Study
from .suggestion import RULES, Suggestion, SuggestionPolicy
from .suggestion import suggest as _suggest
from .transforms import (
    CONVENTIONAL_LAMBDAS,
    IDENTITY,
    LOG,
    RECIPROCAL,
    SQRT,
    Transform,
    boxcox,
    power,
)
from .variance import VarianceTrend, variance_trend

__all__ = [
    "Node",
    "RemedyTree",
    "Suggestion",
    "BoxCoxProfile",
    "profile_boxcox",
    "box_tidwell",
    "RULES",
    "grow",
    "POST_SEARCH_CAUTION",
]

MAX_DEGREE = 3
HALF_CHI2_95 = 1.9207294103470  # ½ χ²₁(0.95), Box & Cox (1964) interval
CHI2_95 = 2 * HALF_CHI2_95
CONVENTIONAL_POWERS = (0.0, 0.5, -1.0, 2.0, -0.5, 1 / 3, 3.0)

ProgressFn = Callable[[int, int, str], None]
CancelFn = Callable[[], bool]



# ----- small numerical helpers (scipy.optimize and scipy.interpolate cost ~0.2 s to import) -----

def _brentq(f: Callable[[float], float], xa: float, xb: float, xtol: float = 2e-12,
            rtol: float = 4 * float(np.finfo(float).eps), maxiter: int = 100) -> float:
    """Root of ``f`` bracketed by [xa, xb] by Brent's method (inverse quadratic interpolation,
    secant and bisection steps), step for step as ``scipy.optimize.brentq``.

    Raises ValueError when the ends do not bracket a sign change or ``f`` returns NaN, and
    RuntimeError after ``maxiter`` steps.
    """
    def call(x: float) -> float:
        fx = float(f(x))
        if math.isnan(fx):
            raise ValueError(f"the function is undefined (NaN) at {x:.6g}")
        return fx

    xpre, xcur = float(xa), float(xb)
    xblk = fblk = spre = scur = 0.0
    fpre, fcur = call(xpre), call(xcur)
    if fpre == 0:
        return xpre
    if fcur == 0:
        return xcur
    if math.copysign(1.0, fpre) == math.copysign(1.0, fcur):
        raise ValueError("the ends of the bracket give values of the same sign")
    for _ in range(maxiter):
        if fpre != 0 and fcur != 0 and math.copysign(1.0, fpre) != math.copysign(1.0, fcur):
            xblk, fblk = xpre, fpre
            spre = scur = xcur - xpre
        if abs(fblk) < abs(fcur):  # keep the best point in xcur
            xpre, xcur, xblk = xcur, xblk, xcur
            fpre, fcur, fblk = fcur, fblk, fcur
        delta = (xtol + rtol * abs(xcur)) / 2
        sbis = (xblk - xcur) / 2
        if fcur == 0 or abs(sbis) < delta:
            return xcur
        if abs(spre) > delta and abs(fcur) < abs(fpre):
            if xpre == xblk:  # secant
                stry = -fcur * (xcur - xpre) / (fcur - fpre)
            else:  # inverse quadratic
                dpre = (fpre - fcur) / (xpre - xcur)
                dblk = (fblk - fcur) / (xblk - xcur)
                stry = -fcur * (fblk * dblk - fpre * dpre) / (dblk * dpre * (fblk - fpre))
            if 2 * abs(stry) < min(abs(spre), 3 * abs(sbis) - delta):
                spre, scur = scur, stry
            else:
                spre = scur = sbis
        else:
            spre = scur = sbis
        xpre, fpre = xcur, fcur
        xcur += scur if abs(scur) > delta else (delta if sbis > 0 else -delta)
        fcur = call(xcur)
    raise RuntimeError(f"the root search did not converge in {maxiter} steps")


class _Spline:
    """Cubic interpolating spline with not-a-knot ends through (x, y), x increasing, 4+ points;
    the values of ``scipy.interpolate.CubicSpline(x, y)`` (same system, same elimination order)."""

    def __init__(self, x: np.ndarray, y: np.ndarray) -> None:
        x = np.asarray(x, dtype=float)
        y = np.asarray(y, dtype=float)
        if not np.isfinite(y).all():
            raise ValueError("spline values must be finite")
        n = x.size
        dx = np.diff(x)
        slope = np.diff(y) / dx
        # first derivatives s solve sub[i]·s[i−1] + diag[i]·s[i] + sup[i]·s[i+1] = b[i]
        sub, diag, sup, b = np.zeros(n), np.zeros(n), np.zeros(n), np.empty(n)
        diag[1:-1] = 2 * (dx[:-1] + dx[1:])
        sup[1:-1] = dx[:-1]
        sub[1:-1] = dx[1:]
        b[1:-1] = 3 * (dx[1:] * slope[:-1] + dx[:-1] * slope[1:])
        d = x[2] - x[0]
        diag[0], sup[0] = dx[1], d
        b[0] = ((dx[0] + 2 * d) * dx[1] * slope[0] + dx[0] ** 2 * slope[1]) / d
        d = x[-1] - x[-3]
        diag[-1], sub[-1] = dx[-2], d
        b[-1] = (dx[-1] ** 2 * slope[-2] + (2 * d + dx[-1]) * dx[-2] * slope[-1]) / d
        s = _solve_tridiagonal(sub, diag, sup, b)
        t = (s[:-1] + s[1:] - 2 * slope) / dx
        self._x = x
        self._c = np.array([t / dx, (slope - s[:-1]) / dx - t, s[:-1], y[:-1]])

    def __call__(self, v: np.ndarray | float) -> np.ndarray:
        v = np.asarray(v, dtype=float)
        i = np.clip(np.searchsorted(self._x, v, side="right") - 1, 0, self._x.size - 2)
        h = v - self._x[i]
        c = self._c
        return c[3, i] + c[2, i] * h + c[1, i] * (h * h) + c[0, i] * (h * h * h)


def _solve_tridiagonal(sub: np.ndarray, diag: np.ndarray, sup: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Gaussian elimination with partial pivoting on a tridiagonal system (a row swap adds a
    second super-diagonal), then back substitution column by column."""
    n = diag.size
    u0, u1, u2 = diag.tolist(), sup.tolist(), [0.0] * n
    low, rhs = sub.tolist(), b.tolist()
    for j in range(n - 1):
        if abs(low[j + 1]) > abs(u0[j]):  # the row below holds the larger pivot: swap
            last = j + 1 == n - 1
            u0[j], u1[j], u2[j], low[j + 1], u0[j + 1], nxt = (
                low[j + 1], u0[j + 1], 0.0 if last else u1[j + 1], u0[j], u1[j], u2[j])
            if not last:
                u1[j + 1] = nxt
            rhs[j], rhs[j + 1] = rhs[j + 1], rhs[j]
        m = low[j + 1] / u0[j]
        u0[j + 1] = u0[j + 1] - m * u1[j]
        if j + 1 < n - 1:
            u1[j + 1] = u1[j + 1] - m * u2[j]
        rhs[j + 1] = rhs[j + 1] - m * rhs[j]
    for i in range(n - 1, -1, -1):
        rhs[i] = rhs[i] / u0[i]
        if i >= 1:
            rhs[i - 1] = rhs[i - 1] - rhs[i] * u1[i - 1]
        if i >= 2:
            rhs[i - 2] = rhs[i - 2] - rhs[i] * u2[i - 2]
    return np.array(rhs)


# ----- Box–Cox with regressors ----------------------------------------------------------

@dataclass(frozen=True, slots=True)
class BoxCoxProfile:
    """Profile log-likelihood of λ with the parent's regressors (Box & Cox 1964)."""

    lam_hat: float
    """Maximising λ."""
    low: float | None
    """Lower end of the 95% interval (None: beyond the search range)."""
    high: float | None
    """Upper end of the 95% interval."""
    grid: tuple[tuple[float, float], ...]
    """(λ, profile log-likelihood) pairs for charts."""
    chosen: float
    """λ used: a conventional value inside the interval when there is one, else λ̂."""
    estimated: bool
    """True when λ̂ itself is used (then λ counts as an estimated parameter)."""

    def as_json(self) -> dict:
        """JSON description."""
        return {"lambda_hat": self.lam_hat, "low": self.low, "high": self.high, "chosen": self.chosen,
                "estimated": self.estimated}


EXACT_PROFILE_LIMIT = 50_000
"""Up to this many rows the Box–Cox profile is maximised exactly (one pass per λ); above it a
0.2-step grid computed in one batched pass is interpolated (cubic spline)."""
GRID_STEP = 0.2


def _bc(logy: np.ndarray, lam: float) -> np.ndarray:
    return logy if lam == 0 else np.expm1(lam * logy) / lam


def grid_group_stats(
    logy: np.ndarray,
    codes: np.ndarray,
    c: int,
    lams: np.ndarray,
    weights: np.ndarray | None = None,
    bases: np.ndarray | None = None,
    chunk: int = 65536,
) -> list[GroupStats]:
    """Group statistics of (y^λ − 1)/λ for every λ in ``lams`` from one batched pass.

    Per group: Σw z, Σw z² (one-pass, after a per-λ shift to the median's value so the
    subtraction stays accurate) and Σw z·b̃ with the bases centred within groups.
    """
    from scipy.sparse import csr_matrix

    n = logy.shape[0]
    L = lams.shape[0]
    base = compute_group_stats(codes, c, logy, weights, bases)  # counts, weights, base parts
    med = np.array([float(np.median(logy))])
    shift = np.array([float(_bc(med, float(v))[0]) for v in lams])
    s1 = np.zeros((c, L))
    s2 = np.zeros((c, L))
    q = 0 if bases is None else bases.shape[1]
    sb = np.zeros((c, q, L))
    if q:
        bc = bases - base.base_mean[codes]
    safe = np.where(lams == 0, 1.0, lams)
    for a in range(0, n, chunk):
        b = min(n, a + chunk)
        lc = logy[a:b, None]
        z = np.where(lams == 0, lc, np.expm1(lc * lams) / safe) - shift
        data = np.ones(b - a) if weights is None else weights[a:b]
        g = csr_matrix((data, (codes[a:b], np.arange(b - a))), shape=(c, b - a))
        s1 += g @ z
        s2 += g @ (z * z)
        for k in range(q):
            sb[:, k, :] += g @ (z * bc[a:b, k, None])
    mean = s1 / base.wsum[:, None]
    ss = np.maximum(s2 - base.wsum[:, None] * mean**2, 0.0)
    out = []
    for j in range(L):
        cross = None
        if q:
            cross = np.empty((c, q + 1, q + 1))
            cross[:, :q, :q] = base.cross[:, :q, :q]  # type: ignore[index]
            cross[:, :q, q] = sb[:, :, j]
            cross[:, q, :q] = sb[:, :, j]
            cross[:, q, q] = ss[:, j]
        out.append(GroupStats(n, base.count, base.wsum, mean[:, j] + shift[j], ss[:, j], base.sum_log_w,
                              base.base_mean, cross))
    return out


def grid_group_stats_series(
    logy: np.ndarray,
    codes: np.ndarray,
    c: int,
    lams: np.ndarray,
    bases: np.ndarray | None,
    order: np.ndarray,
) -> list[GroupStats | None]:
    """The Box–Cox grid's group statistics from one pass of power sums of ln y (unweighted).

    Each group is centred on its own mean of ln y; :class:`engine.series.GroupSeries` gives every
    λ from the sums Σd^k and Σd^k·b̃ (b̃: the bases centred within groups). An entry is None
    where the series cannot promise GRID_TOL (the caller computes that λ row by row).
    ``order`` sorts the rows by group (for each group's extremes).
    """
    from .series import GRID_TOL, GroupSeries, choose_orders

    base = compute_group_stats(codes, c, logy, None, bases)
    count = base.count.astype(float)
    centre = base.mean
    d = logy - centre[codes]
    sorted_log = logy[order]
    starts = np.concatenate(([0], np.cumsum(base.count)[:-1])).astype(np.intp)
    lo = np.minimum.reduceat(sorted_log, starts)
    hi = np.maximum.reduceat(sorted_log, starts)
    q = 0 if bases is None else bases.shape[1]
    sd = float(np.sqrt(np.max(base.ss / count)))
    spread = float(np.max(np.maximum(hi - centre, centre - lo)))
    big_m, big_k = choose_orders(sd, spread, q)
    s = np.empty((c, big_m))
    cross = np.zeros((c, q, big_k))
    bc = None if not q else bases - base.base_mean[codes]  # type: ignore[operator]
    power = np.ones_like(d)
    for k in range(1, big_m + 1):
        power *= d
        s[:, k - 1] = np.bincount(codes, weights=power, minlength=c)
        if k <= big_k:
            for j in range(q):
                cross[:, j, k - 1] = np.bincount(codes, weights=power * bc[:, j], minlength=c)  # type: ignore[index]
    tsum = np.zeros((c, q))
    tt = base.cross[:, :q, :q] if q else np.zeros((c, 0, 0))  # type: ignore[index]
    series = GroupSeries(count, centre, s, cross, tsum, tt, np.exp(lo), np.exp(hi), np.zeros(q))
    out: list[GroupStats | None] = []
    for v in lams:
        mom = series.moments(Transform("boxcox", float(v)) if v != 0 else LOG, GRID_TOL)
        if mom is None:
            out.append(None)
            continue
        cr = None
        if q:
            cr = np.empty((c, q + 1, q + 1))
            cr[:, :q, :q] = base.cross[:, :q, :q]  # type: ignore[index]
            cr[:, :q, q] = cr[:, q, :q] = mom["zb"]
            cr[:, q, q] = mom["ss"]
        out.append(GroupStats(base.n, base.count, base.wsum, mom["mean"], mom["ss"], base.sum_log_w,
                              base.base_mean, cr))
    return out


def profile_boxcox(
    y: np.ndarray | None,
    codes: np.ndarray,
    c: int,
    design: Design,
    *,
    weights: np.ndarray | None = None,
    bases: np.ndarray | None = None,
    lo: float = -3.0,
    hi: float = 3.0,
    grid_cache: dict | None = None,
    grid_provider: Callable[[np.ndarray], list[GroupStats]] | None = None,
    n: int | None = None,
    sum_log_y: float | None = None,
) -> BoxCoxProfile:
    """λ̂ and its 95% interval for (y^λ − 1)/λ regressed on ``design`` (groups ``codes``).

    ℓ(λ) = −(n/2) log(RSS_λ/n) + (λ − 1) Σ log y; interval ℓ(λ̂) − ℓ(λ) ≤ ½χ²₁(0.95)
    (Box & Cox 1964). The work is done on y divided by its geometric mean ġ (the same profile
    up to a constant: ℓ(λ) = −(n/2) log(RSS of ((y/ġ)^λ − 1)/λ / n) − Σ log y), so no power of a
    large or small y can overflow or cancel; λ is searched only where |λ·log(y/ġ)| stays below 300.
    Small tables: exact maximisation, one pass per λ. Large tables (and the SQL engine): a
    0.2-step grid of group statistics of the normalised transform (``grid_provider``, shared by
    every node through ``grid_cache``), then a cubic spline through the profile.

    Raises UsageError (a reason, not a crash) when the profile cannot say anything: the fit is
    exact at every λ (or at too many of them).
    """
    if y is None:
        if grid_provider is None or n is None or sum_log_y is None:
            raise ValueError("without rows, give grid_provider, n and sum_log_y")
        ly = None
        slog = float(sum_log_y)
    else:
        if (y <= 0).any():
            raise UsageError("Box–Cox needs y > 0")
        n = y.shape[0]
        logy = np.log(y)
        slog = float(logy.sum())
        ly = logy - slog / n
    if ly is not None:
        reach = float(np.max(np.abs(ly)))
        if reach > 0:
            lo, hi = max(lo, -300.0 / reach), min(hi, 300.0 / reach)
    grid_l = np.round(np.arange(lo, hi + 1e-9, GRID_STEP), 6)

    def from_stats(st: GroupStats, lam: float) -> float:
        rss = design_rss(st, design)
        # the profile in the raw form, ℓ = −(n/2)log(RSS/n) + (λ − 1)Σ log y, from the normalised RSS
        return -0.5 * n * math.log(rss / n) - slog if rss > rounding_floor(st) else math.nan

    if n > EXACT_PROFILE_LIMIT or ly is None:
        stats_list = None if grid_cache is None else grid_cache.get("bc")
        if stats_list is None:
            if grid_provider is not None:
                stats_list = grid_provider(grid_l)
            else:
                stats_list = grid_group_stats(ly, codes, c, grid_l, weights, bases)  # type: ignore[arg-type]
            if grid_cache is not None:
                grid_cache["bc"] = stats_list
        vals = np.array([from_stats(st, float(v)) for st, v in zip(stats_list, grid_l, strict=True)])
        grid_l, vals = _finite_run(grid_l, vals)
        spline = _Spline(grid_l, vals)
        fine = np.arange(grid_l[0], grid_l[-1] + 1e-9, 0.0005)
        fv = spline(fine)
        i = int(np.argmax(fv))
        lam_hat, top = float(fine[i]), float(fv[i])
        below = fv < top - HALF_CHI2_95
        left = np.flatnonzero(below[:i])
        right = np.flatnonzero(below[i:])
        low = float(_brentq(lambda v: spline(v) - top + HALF_CHI2_95, fine[left[-1]], fine[left[-1] + 1])) if left.size else None
        high = float(_brentq(lambda v: spline(v) - top + HALF_CHI2_95, fine[i + right[0] - 1], fine[i + right[0]])) if right.size else None
    else:
        def ll(lam: float) -> float:
            st = compute_group_stats(codes, c, _bc(ly, lam), weights, bases)  # type: ignore[arg-type]
            return from_stats(st, lam)

        coarse = grid_l[::2]
        grid_l, vals = _finite_run(coarse, np.array([ll(float(v)) for v in coarse]))
        lam_hat, top = _maximise(ll, grid_l, vals)

        def gap(v: float) -> float:
            g = top - ll(v) - HALF_CHI2_95
            return g if math.isfinite(g) else math.inf

        low = _interval_end(gap, lam_hat, float(grid_l[0]), -1)
        high = _interval_end(gap, lam_hat, float(grid_l[-1]), +1)
    inside = [v for v in CONVENTIONAL_LAMBDAS if (low is None or v >= low) and (high is None or v <= high)
              and grid_l[0] - 1e-9 <= v <= grid_l[-1] + 1e-9]
    if inside:
        chosen = min(inside, key=lambda v: abs(v - lam_hat))
        estimated = False
    else:
        chosen, estimated = round(lam_hat, 2), True
    grid = tuple((float(g), float(v)) for g, v in zip(grid_l, vals, strict=True))
    return BoxCoxProfile(lam_hat, low, high, grid, chosen, estimated)


def _finite_run(lams: np.ndarray, vals: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The longest run of grid points whose profile is defined (finite), preferring the run
    that holds λ = 1; raises UsageError when fewer than 4 points remain."""
    ok = np.isfinite(vals)
    runs: list[tuple[int, int]] = []
    start = None
    for i, good in enumerate(ok):
        if good and start is None:
            start = i
        if not good and start is not None:
            runs.append((start, i))
            start = None
    if start is not None:
        runs.append((start, ok.size))
    if not runs:
        raise UsageError("the model fits every level exactly at every λ: a transform of y cannot be judged")
    one = [r for r in runs if lams[r[0]] <= 1.0 <= lams[r[1] - 1]]
    a, b = one[0] if one else max(runs, key=lambda r: r[1] - r[0])
    if b - a < 4:
        raise UsageError("the Box–Cox profile is defined at too few powers here (the fit is exact or the "
                         "values cancel): a transform of y cannot be judged")
    return lams[a:b], vals[a:b]


def _maximise(ll: Callable[[float], float], grid: np.ndarray, vals: np.ndarray) -> tuple[float, float]:
    """Refine the best grid point by golden-section search between its neighbours."""
    i = int(np.argmax(vals))
    a, b = float(grid[max(i - 1, 0)]), float(grid[min(i + 1, grid.size - 1)])
    g = (math.sqrt(5.0) - 1.0) / 2.0
    c, d = b - g * (b - a), a + g * (b - a)
    fc, fd = ll(c), ll(d)
    while b - a > 1e-8:
        if not (fc < fd):  # NaN-safe: keep the left part unless d is clearly better
            b, d, fd = d, c, fc
            c = b - g * (b - a)
            fc = ll(c)
        else:
            a, c, fc = c, d, fd
            d = a + g * (b - a)
            fd = ll(d)
    lam = 0.5 * (a + b)
    top = ll(lam)
    if not math.isfinite(top) or vals[i] > top:
        return float(grid[i]), float(vals[i])
    return lam, top


def _interval_end(gap: Callable[[float], float], centre: float, limit: float, sign: int) -> float | None:
    """Where ``gap`` (negative inside the interval) crosses 0 going from ``centre`` towards
    ``limit``; None when it stays inside up to the limit."""
    step = 0.25
    inner = centre
    edge = centre + sign * step
    while sign * (edge - limit) < 0 and gap(edge) < 0:
        inner, edge = edge, edge + sign * step
        step *= 1.5
    if sign * (edge - limit) >= 0:
        edge = limit
        if gap(edge) < 0:
            return None
    a, b = (inner, edge) if sign > 0 else (edge, inner)
    try:
        return float(_brentq(gap, a, b, xtol=1e-10))
    except (ValueError, RuntimeError):
        return None


# ----- Box–Tidwell power of x -----------------------------------------------------------

@dataclass(frozen=True, slots=True)
class PowerSearch:
    """Box–Tidwell (1962) estimate of the power α in y = β₀ + β₁x^α (+ other terms)."""

    alpha_hat: float
    """Converged power."""
    p_alpha1: float
    """p-value of the first-step test of α = 1 (t of the x·log x term)."""
    low: float | None
    """Lower end of the likelihood interval for α (95%)."""
    high: float | None
    """Upper end."""
    chosen: float
    """Power used (a conventional value inside the interval when there is one)."""
    estimated: bool
    """True when α̂ itself is used."""
    iterations: int
    """Box–Tidwell iterations to convergence."""


def box_tidwell(study: Study, spec: ModelSpec, max_iter: int = 50) -> PowerSearch:
    """Iterate α_{k+1} = α_k + γ/β₁ (regress on x^α and x^α·log x), then a likelihood interval."""
    from .dist import t_sf2

    x_lv = study.x_level_values
    if (x_lv <= 0).any():
        raise UsageError("a power of x needs x > 0")
    fr = _frame(study, spec)
    stats = study.group_stats(fr.z, ("z", spec.response.key()), by=fr.by, weights=fr.w, weights_key=fr.wkey,
                              bases=fr.bases, bases_key=fr.bases_key, level_weights=fr.w_level)
    xg = study.group_parent(fr.by)
    logx = np.log(x_lv)[xg]

    def design_for(alpha: float, extra: bool) -> Design:
        s2 = spec.with_(predictor=Transform("power", alpha) if alpha != 1 else IDENTITY)
        fr2 = _frame(study, s2)
        d, _ = build_design(study, s2, fr2)
        if not extra:
            return d
        t = np.exp(alpha * logx)
        col = Column(t * logx / (np.abs(t * logx).max() or 1.0))
        p = d.p + 1
        to_raw = np.eye(p, dtype=np.longdouble)
        to_raw[: d.p, : d.p] = d.to_raw
        return Design(d.columns + (col,), d.names + ("xlogx",), to_raw, True)

    def slope_gamma(alpha: float) -> tuple[float, float, float]:
        f1 = fit_design(stats, design_for(alpha, False))
        f2 = fit_design(stats, design_for(alpha, True))
        b1 = f1.coefficients[1].estimate
        g = f2.coefficients[-1]
        scale = np.abs(np.exp(alpha * logx) * logx).max() or 1.0
        # γ on the unscaled x^α·log x column; b1 on x^α (raw basis)
        return b1, g.estimate / scale, g.p

    if fit_design(stats, design_for(1.0, False)).sse == 0:
        raise UsageError("the straight line fits every level exactly: there is no power of x to estimate")
    first = slope_gamma(1.0)
    p1 = first[2]
    alpha, it = 1.0, 0
    for it in range(1, max_iter + 1):  # noqa: B007 - count is reported
        # the first step starts from α = 1, whose fits were just made
        b1, gamma, _ = first if it == 1 else slope_gamma(alpha)
        # the x^α·log x column equals (1/α)·t·log t; γ estimates β₁(α_new − α)
        step = gamma / b1 if b1 else 0.0
        if not math.isfinite(step):
            break
        new = alpha + step
        new = float(np.clip(new, -4.0, 4.0))
        if abs(new - alpha) < 1e-9:
            alpha = new
            break
        alpha = new if abs(new) > 1e-8 else 1e-8
    # likelihood interval on the profile of SSE(α)
    n = study.n

    seen: dict[float, float] = {}

    def sse(a: float) -> float:
        # the bracket search and the root finder revisit the same powers: compute each once
        hit = seen.get(a)
        if hit is None:
            hit = seen[a] = design_rss(stats, design_for(a, False))
        return hit

    s_hat = sse(alpha)

    def gap(a: float) -> float:
        return n * math.log(sse(a) / s_hat) - CHI2_95

    low = high = None
    edge = alpha - 0.05
    while edge > alpha - 8 and gap(edge if edge != 0 else 1e-6) < 0:
        edge -= 0.5
    try:
        if gap(edge if edge != 0 else 1e-6) > 0:
            low = float(_brentq(lambda a: gap(a if a != 0 else 1e-9), edge, alpha, xtol=1e-8))
    except ValueError:
        low = None
    edge = alpha + 0.05
    while edge < alpha + 8 and gap(edge if edge != 0 else 1e-6) < 0:
        edge += 0.5
    try:
        if gap(edge if edge != 0 else 1e-6) > 0:
            high = float(_brentq(lambda a: gap(a if a != 0 else 1e-9), alpha, edge, xtol=1e-8))
    except ValueError:
        high = None
    inside = [v for v in CONVENTIONAL_POWERS if (low is None or v >= low) and (high is None or v <= high)]
    if inside:
        chosen, estimated = min(inside, key=lambda v: abs(v - alpha)), False
    else:
        chosen, estimated = round(alpha, 2), True
    _ = t_sf2  # imported for callers' symmetry
    return PowerSearch(alpha, p1, low, high, chosen, estimated, it)


# ----- the tree -------------------------------------------------------------------------

@dataclass(slots=True)
class Node:
    """One candidate in the tree (its scores are frozen; links are filled as the tree grows)."""

    id: str
    """'root', then 'n1', 'n2', … in creation order."""
    parent: str | None
    """Parent id (None for the root)."""
    move: str
    """The move from the parent, in words."""
    spec: ModelSpec
    """The model."""
    depth: int
    """Moves from the root."""
    score: NodeScore | None = None
    """Scores (None when scoring failed: see ``error``)."""
    error: str | None = None
    """Why the node could not be scored."""
    nested: LackOfFit | None = None
    """Nested F against the parent, or the reason there is none."""
    children: list[str] = field(default_factory=list)
    """Child ids in creation order."""
    pruned: list[tuple[str, str]] = field(default_factory=list)
    """(move, reason) for moves that could not apply here."""
    also_from: list[tuple[str, str]] = field(default_factory=list)
    """(node id, move) of other paths that reach the same model."""
    expanded: bool = False
    """True once its moves were generated."""
    detail: dict = field(default_factory=dict)
    """Move details (Box–Cox profile, Box–Tidwell search, variance fit)."""


def _nested(parent: Node, child: Node) -> LackOfFit:
    kind = "nested F"
    ps, cs = parent.spec, child.spec
    if ps.response != cs.response:
        return LackOfFit(False, f"different response scale ({ps.response.short('y')} vs {cs.response.short('y')}): "
                         "compare AICc, not F", kind)
    if ps.weights != cs.weights:
        return LackOfFit(False, "different weights: compare AICc, not F", kind)
    if ps.predictor != cs.predictor:
        return LackOfFit(False, "not nested: the predictor transform changes the x columns", kind)
    if parent.score is None or child.score is None:
        return LackOfFit(False, "a model could not be scored", kind)
    pf, cf = parent.score.fit, child.score.fit
    return nested_f(pf.sse, pf.df_resid, cf.sse, cf.df_resid, kind, approximate=cs.weights is not None)


class RemedyTree:
    """The candidate tree on one study; deterministic order, cached and deduplicated."""

    def __init__(self, study: Study, *, alpha: float = 0.05, allowable_deviation: float | None = None) -> None:
        if not 0 < alpha < 1:
            raise UsageError(f"alpha {alpha!r} must lie strictly between 0 and 1, e.g. 0.05")
        if allowable_deviation is not None and not allowable_deviation > 0:
            raise UsageError(f"allowable deviation {allowable_deviation!r} must be > 0 (in y units)")
        self.study = study
        self.alpha = alpha
        self.allowable_deviation = allowable_deviation
        self.nodes: dict[str, Node] = {}
        self._by_spec: dict[ModelSpec, str] = {}
        self._aside: dict[ModelSpec, NodeScore | None] = {}
        self._variances: dict[Transform | str, VarianceTrend] = {}
        self._counter = 0
        self._root_line: np.ndarray | None = None
        root = Node("root", None, "start: straight line", ModelSpec(), 0)
        self._add(root)
        self._score(root)
        self._root_line = None if root.score is None else np.asarray(root.score.level_fitted_y)

    # ---- building --------------------------------------------------------------------
    def _add(self, node: Node) -> None:
        self.nodes[node.id] = node
        self._by_spec[node.spec] = node.id

    def _score(self, node: Node) -> None:
        try:
            node.score = score_spec(self.study, node.spec, root_line=self._root_line)
        except BendwiseError as exc:
            node.error = str(exc)
        if node.parent is not None:
            node.nested = _nested(self.nodes[node.parent], node)

    @property
    def root(self) -> Node:
        """The straight line."""
        return self.nodes["root"]

    def _moves(self, node: Node) -> tuple[list[tuple[str, ModelSpec, dict]], list[tuple[str, str]]]:
        """(move, child spec, detail) for applicable moves; (move, reason) for pruned ones."""
        st, sp = self.study, node.spec
        ok: list[tuple[str, ModelSpec, dict]] = []
        pruned: list[tuple[str, str]] = []
        xlab = st.x_name
        # response transforms
        if sp.response == IDENTITY and sp.weights is None:
            for t, move in ((LOG, "log y"), (SQRT, "√y"), (RECIPROCAL, "1/y")):
                prob = st.domain_problem(t, "y")
                if prob:
                    pruned.append((move, prob))
                else:
                    ok.append((move, sp.with_(response=t), {}))
            prob = st.domain_problem(Transform("boxcox", 0.5), "y")
            if prob:
                pruned.append(("Box–Cox y", prob))
            else:
                try:
                    fr = _frame(st, sp)
                    design, _ = build_design(st, sp, fr)
                    codes, c = st.group_codes(fr.by)

                    def provider(lams: np.ndarray, fr=fr) -> list[GroupStats]:
                        return st.boxcox_stats(lams, fr.by, fr.bases, fr.bases_key)

                    if st.has_rows:
                        prof = profile_boxcox(st.y, codes, c, design, weights=st.weights, bases=fr.bases,
                                              grid_provider=provider)
                    else:
                        prof = profile_boxcox(None, codes, c, design, grid_provider=provider, n=st.n,
                                              sum_log_y=st.sum_log_y())
                except (BendwiseError, ValueError, RuntimeError, FloatingPointError, np.linalg.LinAlgError) as exc:
                    pruned.append(("Box–Cox y", f"the profile cannot be computed here ({exc})"
                                   if not isinstance(exc, BendwiseError) else str(exc)))
                else:
                    interval = f"λ̂ = {prof.lam_hat:.3g}, 95% interval {_iv(prof.low, prof.high)}"
                    t = boxcox(prof.chosen)
                    if t == IDENTITY:
                        pruned.append(("Box–Cox y", f"no transform needed: λ = 1 lies inside ({interval})"))
                    else:
                        move = f"Box–Cox y (λ = {prof.chosen:.3g}{', estimated' if prof.estimated else ''}; {interval})"
                        ok.append((move, sp.with_(response=t, response_estimated=prof.estimated),
                                   {"boxcox": prof}))
        elif sp.response != IDENTITY:
            pruned.append(("response transform", f"the response is already transformed ({sp.response.short('y')})"))
        else:
            pruned.append(("response transform", "weights were estimated for the untransformed response; "
                           "transform first, then weight"))
        # predictor transforms
        if sp.predictor == IDENTITY and not sp.interactions:
            for t, move in ((LOG, "log x"), (SQRT, "√x"), (RECIPROCAL, "1/x")):
                prob = st.domain_problem(t, "x")
                if prob:
                    pruned.append((move, prob))
                else:
                    ok.append((move, sp.with_(predictor=t), {}))
            if sp.degree != 1:
                pruned.append(("power of x (Box–Tidwell)", "only for a straight line in x (degree 1)"))
            elif st.approximate_groups:
                pruned.append(("power of x (Box–Tidwell)", "not available when settings are grouped by a tolerance"))
            elif st.x_min <= 0:
                pruned.append(("power of x (Box–Tidwell)", f"a power of x needs x > 0; {xlab!r} goes down to {st.x_min:g}"))
            else:
                try:
                    ps = box_tidwell(st, sp)
                except (BendwiseError, ValueError, ZeroDivisionError, FloatingPointError, RuntimeError,
                        np.linalg.LinAlgError) as exc:
                    pruned.append(("power of x (Box–Tidwell)", f"did not converge ({exc})"))
                else:
                    t = power(ps.chosen)
                    iv = f"α̂ = {ps.alpha_hat:.3g}, 95% interval {_iv(ps.low, ps.high)}, test of α = 1 p = {ps.p_alpha1:.3g}"
                    if t == IDENTITY or ps.p_alpha1 >= self.alpha:
                        pruned.append(("power of x (Box–Tidwell)", f"no evidence the power differs from 1 ({iv})"))
                    else:
                        move = f"x^α (α = {ps.chosen:.3g}{', estimated' if ps.estimated else ''}; {iv})"
                        ok.append((move, sp.with_(predictor=t, predictor_estimated=ps.estimated), {"box_tidwell": ps}))
        elif sp.predictor != IDENTITY:
            pruned.append(("predictor transform", f"the predictor is already transformed ({sp.predictor.short('x')})"))
        else:
            pruned.append(("predictor transform", "this model has interactions with x; transform x before adding them"))
        # polynomial degree
        nd = sp.degree + 1
        if nd > MAX_DEGREE:
            pruned.append((f"degree {nd}", f"bendwise stops at degree {MAX_DEGREE}: higher degrees chase noise"))
        elif nd > st.c - 2:
            pruned.append((f"degree {nd}", f"{st.c} levels of x: degree {nd} would leave no degree of freedom for lack of fit"))
        else:
            ok.append((f"+ {'x²' if nd == 2 else 'x³'}", sp.with_(degree=nd), {}))
        # covariates and interactions
        for cov in st.covariates:
            if cov.name not in sp.covariates:
                ok.append((f"+ {cov.name}", sp.with_(covariates=sp.covariates + (cov.name,)), {}))
        for name in sp.covariates:
            if name in sp.interactions:
                continue
            if st.approximate_groups:
                pruned.append((f"+ x:{name}", "not available when settings are grouped by a tolerance"))
            else:
                ok.append((f"+ x:{name}", sp.with_(interactions=sp.interactions + (name,)), {}))
        # weights
        if sp.weights is None and node.score is not None:
            self._weights_move(node, ok, pruned)
        elif sp.weights is not None:
            pruned.append(("weights", "already weighted"))
        return ok, pruned

    def expand(self, node_id: str, progress: ProgressFn | None = None, cancel: CancelFn | None = None) -> list[str]:
        """Generate and score the children of one node (best-first growth); returns new ids."""
        node = self.nodes[node_id]
        if node.expanded:
            return []
        moves, pruned = self._moves(node)
        node.pruned = pruned
        new: list[str] = []
        for i, (move, spec, detail) in enumerate(moves):
            if cancel is not None and cancel():
                return new
            if spec == node.spec:
                node.pruned.append((move, "gives the same model"))
                continue
            hit = self._by_spec.get(spec)
            if hit is not None:
                if self.nodes[hit].parent != node_id:  # made before a cancelled pass: not a second path
                    self.nodes[hit].also_from.append((node_id, move))
                continue
            self._counter += 1
            child = Node(f"n{self._counter}", node_id, move, spec, node.depth + 1, detail=detail)
            self._add(child)
            node.children.append(child.id)
            self._score(child)
            new.append(child.id)
            if progress is not None:
                progress(i + 1, len(moves), child.spec.label())
        node.expanded = True
        return new

    def grow(self, depth: int = 2, progress: ProgressFn | None = None, cancel: CancelFn | None = None) -> None:
        """Breadth-first growth to ``depth`` moves from the root."""
        if depth < 0:
            raise UsageError(f"depth {depth} must be ≥ 0")
        frontier = ["root"]
        for _ in range(depth):
            nxt: list[str] = []
            for nid in frontier:
                if cancel is not None and cancel():
                    return
                if self.nodes[nid].score is None:
                    continue
                nxt += self.expand(nid, progress, cancel)
            frontier = nxt

    # ---- judging -----------------------------------------------------------------------
    def scored(self) -> list[Node]:
        """Nodes with scores, in creation order."""
        return [n for n in self.nodes.values() if n.score is not None]

    def best_aicc(self) -> float | None:
        """Lowest AICc among scored nodes."""
        vals = [n.score.criteria.aicc for n in self.scored() if n.score.criteria.aicc is not None]  # type: ignore[union-attr]
        return min(vals) if vals else None

    def passes(self, node: Node, alpha: float | None = None) -> bool:
        """Candidate for the suggestion: passes lack of fit at α, or is untestable and fails nothing else."""
        a = self.alpha if alpha is None else alpha
        s = node.score
        if s is None:
            return False
        verdict = s.lack_of_fit.passes(a)
        if verdict is None:
            return not s.fit.aliased and math.isfinite(s.fit.sigma)
        return verdict

    def sort_key(self, rule: str) -> Callable[[Node], tuple]:
        """Ordering of nodes under a rule (missing values last)."""
        if rule not in RULES:
            raise UsageError(f"unknown rule {rule!r}; choose one of {', '.join(RULES)}")
        inf = math.inf

        def key(n: Node) -> tuple:
            s = n.score
            if s is None:
                return (inf, inf, n.id)
            aicc = s.criteria.aicc if s.criteria.aicc is not None else inf
            if rule == "aicc":
                return (aicc, s.k, _order(n.id))
            if rule == "bic":
                return (s.criteria.bic if s.criteria.bic is not None else inf, s.k, _order(n.id))
            if rule == "simplest":
                return (s.k, aicc, _order(n.id))
            return (s.press if s.press is not None else inf, s.k, _order(n.id))

        return key

    def suggest(self, rule: str = "aicc", alpha: float | None = None,
                policy: SuggestionPolicy | str = "default") -> Suggestion:
        """Pick a node by ``rule`` among the candidates the evidence allows (engine.suggestion)."""
        return _suggest(self, rule, alpha, policy)

    # ---- evidence on the straight line (engine.suggestion weighs it) -----------------
    def _scored_spec(self, spec: ModelSpec) -> NodeScore | None:
        """The score of ``spec`` (a node of the tree, or scored aside and cached); None on error."""
        hit = self._by_spec.get(spec)
        if hit is not None:
            return self.nodes[hit].score
        if spec not in self._aside:
            try:
                self._aside[spec] = score_spec(self.study, spec, root_line=self._root_line)
            except BendwiseError:
                self._aside[spec] = None
        return self._aside[spec]

    def curvature_test(self) -> LackOfFit:
        """The straight line against line + x² (nested F; Mandel's test without the 99% level)."""
        kind = "curvature (line + x²)"
        root = self.root.score
        if root is None:
            return LackOfFit(False, self.root.error or "the straight line could not be scored", kind)
        if self.study.c < 3:
            return LackOfFit(False, f"needs at least 3 levels of x ({self.study.c} here)", kind)
        quad = self._scored_spec(ModelSpec(degree=2))
        if quad is None:
            return LackOfFit(False, "the quadratic could not be fitted", kind)
        return nested_f(root.fit.sse, root.fit.df_resid, quad.fit.sse, quad.fit.df_resid, kind,
                        floor=quad.fit.rounding)

    def covariate_test(self, name: str) -> LackOfFit:
        """Line + covariate against the line (nested F)."""
        kind = "nested F"
        root = self.root.score
        other = self._scored_spec(ModelSpec(covariates=(name,)))
        if root is None or other is None:
            return LackOfFit(False, "a model could not be scored", kind)
        return nested_f(root.fit.sse, root.fit.df_resid, other.fit.sse, other.fit.df_resid, kind,
                        floor=other.fit.rounding)

    def variance(self, response: Transform) -> VarianceTrend:
        """The power-of-mean variance function of the replicates on one response scale (cached)."""
        hit = self._variances.get(response)
        if hit is None:
            if self.study.weights is not None:
                hit = VarianceTrend(False, f"weights were given (column {self.study.weights_name!r}); "
                                    "bendwise does not estimate others on top")
            else:
                try:
                    z, _ = self.study.transformed(response)
                    st = self.study.group_stats(z, ("z", response.key()))
                except BendwiseError as exc:
                    hit = VarianceTrend(False, str(exc))
                else:
                    hit = variance_trend(st.count, st.mean, st.ss)
            self._variances[response] = hit
        return hit

    def variance_of(self, node: Node, alpha: float | None = None) -> VarianceTrend:
        """The variance function for weights on ``node``: from the node's residuals (pure error plus
        each level's departure from its fit) when the node fits (passes lack of fit at α) and its
        groups are the x levels; else from the replicates alone, which a wrong mean cannot blur
        (cached per node and α)."""
        a = self.alpha if alpha is None else alpha
        key = f"node {node.id} {a!r}"
        hit = self._variances.get(key)
        if hit is None:
            base = self.variance(node.spec.response)
            s = node.score
            by_level = not node.spec.covariates and not self.study.approximate_groups
            fits = s is not None and s.lack_of_fit.passes(a) is True
            if not (fits and by_level) or not base.available and "weights were given" in (base.reason or ""):
                hit = base
            else:
                z, _ = self.study.transformed(node.spec.response)
                st = self.study.group_stats(z, ("z", node.spec.response.key()))
                # the fit's groups may split x levels by categories it does not use: one value per level
                cats = tuple(c.name for c in self.study.covariates if c.kind == "categorical")
                fitted = np.empty(self.study.c)
                fitted[self.study.group_parent(cats)] = np.asarray(s.fit.group_fitted)
                hit = variance_trend(st.count, st.mean, st.ss, fitted=fitted, rank=s.fit.rank)
            self._variances[key] = hit
        return hit

    def spread_evidence(self, residuals: bool = True, alpha: float | None = None) -> VarianceTrend:
        """The trend of spread with the mean for the straight line: from its residuals when it fits
        (``variance_of``; default) or from the replicates alone."""
        return self.variance_of(self.root, alpha) if residuals else self.variance(IDENTITY)

    def _weights_move(self, node: Node, ok: list, pruned: list) -> None:
        """Offer power-of-mean weights when the node's residuals show the spread following the mean."""
        sp = node.spec
        vt = self.variance_of(node)
        if not vt.available:
            pruned.append(("weights", vt.reason))
            return
        iv = f"θ̂ = {vt.theta_hat:.3g}, 95% interval {_iv(vt.low, vt.high)}, test of θ = 0 p = {_fp(vt.p)}"
        if vt.p >= self.alpha or vt.chosen == 0:
            pruned.append(("weights", f"no evidence that the spread follows the mean ({iv})"))
            return
        how = "a round value inside the interval" if vt.snapped else "estimated"
        ok.append((f"weights ∝ mean^(−2θ), θ = {vt.chosen:.3g} ({how}; {iv}; θ counts as a parameter)",
                   sp.with_(weights=WeightRule("power-of-mean", vt.chosen, not vt.snapped)), {"variance": vt}))

    def path(self, node_id: str) -> list[Node]:
        """Nodes from the root to ``node_id``."""
        out = []
        cur: str | None = node_id
        while cur is not None:
            out.append(self.nodes[cur])
            cur = self.nodes[cur].parent
        return out[::-1]

    def node_json(self, node: Node) -> dict:
        """The stable JSON shape of a node (documented in the README)."""
        st = self.study
        kinds = {c.name: c.kind for c in st.covariates}
        s = node.score
        best = self.best_aicc()
        out: dict = {
            "id": node.id,
            "parent": node.parent,
            "move": node.move,
            "depth": node.depth,
            "label": node.spec.label(st.y_name, st.x_name),
            "formula": node.spec.formula(st.y_name, st.x_name, kinds),
            "spec": node.spec.as_json(),
            "children": list(node.children),
            "pruned": [{"move": m, "reason": r} for m, r in node.pruned],
            "also_reached_from": [{"node": i, "move": m} for i, m in node.also_from],
        }
        if s is None:
            out.update(k=None, error=node.error, lack_of_fit={"testable": False, "reason": node.error})
            return out
        out.update(
            k=s.k,
            coefficients={c.name: {"estimate": c.estimate, "se": c.se, "p": c.p} for c in s.fit.coefficients},
            sigma=s.fit.sigma,
            lack_of_fit=s.lack_of_fit.as_json(),
            lack_of_fit_pure=s.lack_of_fit_pure.as_json(),
            passes=self.passes(node),
            nested=(_nested_json(node.nested) if node.nested is not None else {"reason": "the root has no parent"}),
            chosen_from_data=list(node.spec.data_choices(st.y_name, st.x_name)),
            criteria={**s.criteria.as_json(),
                      "delta_aicc": (s.criteria.aicc - best) if (best is not None and s.criteria.aicc is not None) else None},
            press=s.press,
            press_note=s.press_note,
            max_studentized_residual=s.max_studentized,
            spread=s.spread.as_json(),
            max_deviation_from_line=s.max_deviation,
            deviation_note=s.deviation_note,
            warnings=list(s.warnings),
        )
        if "boxcox" in node.detail:
            out["boxcox"] = node.detail["boxcox"].as_json()
        if "variance" in node.detail:
            out["variance_function"] = node.detail["variance"].as_json()
        if "box_tidwell" in node.detail:
            ps = node.detail["box_tidwell"]
            out["box_tidwell"] = {"alpha_hat": ps.alpha_hat, "low": ps.low, "high": ps.high, "chosen": ps.chosen,
                                  "estimated": ps.estimated, "p_alpha_is_1": ps.p_alpha1}
        return out

    def as_json(self, rule: str = "aicc") -> dict:
        """``{"suggested", "reason", "rule", "alpha", "caution", "nodes"}``."""
        sug = self.suggest(rule)
        return {
            "suggested": sug.node,
            "reason": sug.reason,
            "rule": rule,
            "alpha": self.alpha,
            "evidence": [e.as_json() for e in sug.evidence],
            "caution": POST_SEARCH_CAUTION,
            "nodes": [self.node_json(n) for n in self.nodes.values()],
        }


def _nested_json(t: LackOfFit) -> dict:
    if not t.testable:
        return {"reason": t.reason}
    return {"f": t.f, "df_num": t.df_lack, "df_den": t.df_pure, "p": t.p, "approximate": t.approximate}


def _order(node_id: str) -> int:
    return 0 if node_id == "root" else int(node_id[1:])


def _iv(lo: float | None, hi: float | None) -> str:
    a = "−∞" if lo is None else f"{lo:.3g}"
    b = "∞" if hi is None else f"{hi:.3g}"
    return f"({a}, {b})"


def _fp(p: float | None) -> str:
    if p is None or not math.isfinite(p):
        return "—"
    return "<1e-12" if p < 1e-12 else f"{p:.3g}"


def grow(study: Study, *, depth: int = 2, alpha: float = 0.05, allowable_deviation: float | None = None,
         progress: ProgressFn | None = None, cancel: CancelFn | None = None) -> RemedyTree:
    """Build the remedy tree breadth-first to ``depth``."""
    tree = RemedyTree(study, alpha=alpha, allowable_deviation=allowable_deviation)
    tree.grow(depth, progress, cancel)
    return tree
