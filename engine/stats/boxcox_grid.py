"""Group statistics of the Box–Cox transform on a grid of λ, in one batched pass over the rows
(or from per-group power sums of ln y), for the profile likelihood of λ.
"""

from __future__ import annotations

import numpy as np

from .groups import GroupStats, compute_group_stats
from .transforms import LOG, Transform

__all__ = ["EXACT_PROFILE_LIMIT", "GRID_STEP", "grid_group_stats", "grid_group_stats_series"]


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
    base_parts: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None,
) -> list[GroupStats | None]:
    """The Box–Cox grid's group statistics from one pass of power sums of ln y (unweighted).

    Each group is centred on its own mean of ln y; :class:`engine.series.GroupSeries` gives every
    λ from the sums Σd^k and Σd^k·b̃ (b̃: the bases centred within groups). An entry is None
    where the series cannot promise GRID_TOL (the caller computes that λ row by row).
    ``order`` sorts the rows by group (for each group's extremes); ``base_parts`` as for
    :func:`compute_group_stats` (the bases' group means, centred rows and cross-products).
    """
    from .power_sums import GRID_TOL, GroupSeries, choose_orders

    base = compute_group_stats(codes, c, logy, None, bases, base_parts=base_parts)
    count = base.count.astype(float)
    centre = base.mean
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
    bc = None if not q else base_parts[1] if base_parts is not None else bases - base.base_mean[codes]  # type: ignore[operator]
    # in group order every sum is over a contiguous run of rows (reduceat is several times
    # faster than bincount at scattering into groups)
    d_sorted = sorted_log - np.repeat(centre, base.count)
    bc_sorted = None if bc is None else np.asfortranarray(bc[order])
    _power_sums(d_sorted, starts, bc_sorted, s, cross)
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


def _power_sums(d: np.ndarray, starts: np.ndarray, bc: np.ndarray | None, s: np.ndarray, cross: np.ndarray) -> None:
    """Fill s[:, k−1] = Σ dᵏ and cross[:, j, k−1] = Σ dᵏ·b̃ⱼ per group (k up to their widths);
    the rows are in group order, group g from ``starts[g]`` (every group has rows)."""
    big_m = s.shape[1]
    big_k = cross.shape[2]
    power = np.ones_like(d)
    for k in range(1, big_m + 1):
        power *= d
        s[:, k - 1] = np.add.reduceat(power, starts)
        if k <= big_k and bc is not None:
            for j in range(bc.shape[1]):
                cross[:, j, k - 1] = np.add.reduceat(power * bc[:, j], starts)
