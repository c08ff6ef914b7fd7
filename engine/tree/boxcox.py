"""The Box–Cox profile likelihood of λ with a node's regressors (Box & Cox 1964)."""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from ..errors import UsageError
from ..stats.boxcox_grid import EXACT_PROFILE_LIMIT, GRID_STEP, _bc, grid_group_stats
from ..stats.groups import GroupStats, compute_group_stats
from ..stats.linalg import Design, design_rss, rounding_floor
from ..stats.numerics import CubicSpline, brentq, golden_max
from ..stats.transforms import CONVENTIONAL_LAMBDAS

__all__ = ["BoxCoxProfile", "profile_boxcox", "HALF_CHI2_95"]


HALF_CHI2_95 = 1.9207294103470  # ½ χ²₁(0.95), Box & Cox (1964) interval


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
    centred_log: tuple[np.ndarray, float] | None = None,
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

    Long because the two paths (grid with spline, exact maximisation) share the profile function
    and the choice of a conventional λ; the signature alone takes 16 lines.
    """
    ly: np.ndarray | None
    if centred_log is not None:  # (log y − its mean, Σ log y) computed once by the caller
        ly, slog = centred_log
        n = ly.shape[0]
    else:
        ly, n, slog = _log_scale(y, n, sum_log_y, grid_provider)
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
        lam_hat, low, high = _spline_profile(grid_l, vals)
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


def _log_scale(y: np.ndarray | None, n: int | None, sum_log_y: float | None,
               grid_provider: Callable | None) -> tuple[np.ndarray | None, int, float]:
    """(log y − its mean, n, Σ log y) from the rows, or (None, n, Σ log y) as given without rows."""
    if y is None:
        if grid_provider is None or n is None or sum_log_y is None:
            raise ValueError("without rows, give grid_provider, n and sum_log_y")
        return None, n, float(sum_log_y)
    if (y <= 0).any():
        raise UsageError("Box–Cox needs y > 0")
    logy = np.log(y)
    slog = float(logy.sum())
    return logy - slog / y.shape[0], y.shape[0], slog


def _spline_profile(grid_l: np.ndarray, vals: np.ndarray) -> tuple[float, float | None, float | None]:
    """λ̂ and the interval from a cubic spline through the grid profile (0.0005 steps, then roots)."""
    spline = CubicSpline(grid_l, vals)
    fine = np.arange(grid_l[0], grid_l[-1] + 1e-9, 0.0005)
    fv = spline(fine)
    i = int(np.argmax(fv))
    lam_hat, top = float(fine[i]), float(fv[i])
    below = fv < top - HALF_CHI2_95
    left = np.flatnonzero(below[:i])
    right = np.flatnonzero(below[i:])

    def drop(v: float) -> float:
        return float(spline(v)) - top + HALF_CHI2_95

    low = float(brentq(drop, fine[left[-1]], fine[left[-1] + 1])) if left.size else None
    high = float(brentq(drop, fine[i + right[0] - 1], fine[i + right[0]])) if right.size else None
    return lam_hat, low, high


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
    lam = golden_max(ll, a, b, tol=1e-8)
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
        return float(brentq(gap, a, b, xtol=1e-10))
    except (ValueError, RuntimeError):
        return None
