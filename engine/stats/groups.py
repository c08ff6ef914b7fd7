"""Group-level sufficient statistics: one pass over the rows per (response, grouping, weights).

Every fit in bendwise is computed from these. For a design whose columns are functions of
the grouping variables the normal equations need only the group totals; covariates that
vary inside a group ("bases") enter through per-group centred cross-products.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["GroupStats", "compute_group_stats", "compute_base_parts", "normalised_boxcox_stats", "drop_rounding",
           "pool_group_stats", "narrow_group_stats"]

_EPS = float(np.finfo(float).eps)


@dataclass(frozen=True, slots=True, eq=False)
class GroupStats:
    """Per-group totals of one (transformed) response under one grouping and weighting."""

    n: int
    """Rows."""
    count: np.ndarray
    """Rows per group (c,)."""
    wsum: np.ndarray
    """Sum of weights per group (equals count without weights)."""
    mean: np.ndarray
    """Weighted mean response per group."""
    ss: np.ndarray
    """Within-group weighted sum of squares about the group mean (pure error)."""
    sum_log_w: float
    """Σ log w over rows (0 without weights); enters the weighted log-likelihood."""
    base_mean: np.ndarray
    """(c, q) weighted group means of the within-varying bases (q may be 0)."""
    cross: np.ndarray | None
    """(c, q+1, q+1) within-group centred cross-products of [bases…, response]; None when q = 0."""
    zmin: np.ndarray | None = None
    """Smallest response per group (for the largest residual); None unless asked for."""
    zmax: np.ndarray | None = None
    """Largest response per group."""
    mean_lo: np.ndarray | None = None
    """What ``mean`` lost to rounding: mean + mean_lo is the group mean to about the precision of
    the deviations from it (a response 1e8 + a few units keeps its digits in the fit)."""

    @property
    def c(self) -> int:
        """Number of groups."""
        return int(self.count.shape[0])

    @property
    def ss_pure(self) -> float:
        """Pooled pure-error sum of squares."""
        return float(self.ss.sum())

    @property
    def df_pure(self) -> int:
        """n − c."""
        return self.n - self.c


def compute_group_stats(
    codes: np.ndarray,
    c: int,
    z: np.ndarray,
    w: np.ndarray | None = None,
    bases: np.ndarray | None = None,
    extremes: bool = False,
    order: np.ndarray | None = None,
    base_parts: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None,
    counts: np.ndarray | None = None,
) -> GroupStats:
    """Aggregate response ``z`` (and optional bases) by integer group ``codes`` in 0..c-1.

    Long because it is the inner loop of every score: the passes share their sorted order and
    buffers, and the signature alone takes 10 lines.

    Two passes (means, then centred squares) keep the pure error accurate when the
    response has a large offset, as in the NIST StRD sets. ``order`` (rows sorted by group)
    may be passed in to reuse one sort for the per-group extremes of many responses;
    ``base_parts`` = (base means, rows of bases centred within groups, base-by-base cross
    products) from :func:`base_parts` lets many responses share the work on the bases;
    ``counts`` (rows per group, int64) saves counting them again.
    """
    n = int(z.shape[0])
    count = np.bincount(codes, minlength=c).astype(np.int64) if counts is None else counts
    # corrected two-pass sums (Chan, Golub & LeVeque 1983): the deviations from the rounded mean
    # also give what the mean lost, and remove its effect from the sum of squares
    if w is None:
        wsum = count.astype(float)
        mean = np.bincount(codes, weights=z, minlength=c) / wsum
        d = z - mean[codes]
        sd = np.bincount(codes, weights=d, minlength=c)
        ss = np.bincount(codes, weights=d * d, minlength=c)
        slw = 0.0
    else:
        wsum = np.bincount(codes, weights=w, minlength=c)
        mean = np.bincount(codes, weights=w * z, minlength=c) / wsum
        d = z - mean[codes]
        sd = np.bincount(codes, weights=w * d, minlength=c)
        ss = np.bincount(codes, weights=w * d * d, minlength=c)
        slw = float(np.log(w).sum())
    mean_lo = sd / wsum
    ss = drop_rounding(np.maximum(ss - sd * mean_lo, 0.0), wsum, mean)
    if bases is None or bases.shape[1] == 0:
        base_mean = np.zeros((c, 0))
        cross = None
    else:
        q = bases.shape[1]
        if base_parts is None:
            base_parts = compute_base_parts(codes, c, wsum, w, bases)
        base_mean, centred_b, bcross = base_parts
        cross = np.empty((c, q + 1, q + 1))
        cross[:, :q, :q] = bcross
        dw = d if w is None else d * w
        for k in range(q):
            col = np.bincount(codes, weights=centred_b[:, k] * dw, minlength=c)
            cross[:, k, q] = col
            cross[:, q, k] = col
        cross[:, q, q] = ss
    zmin = zmax = None
    if extremes:
        if order is None:
            order = np.argsort(codes, kind="stable")
        zs = z[order]
        starts = np.concatenate(([0], np.cumsum(count)[:-1]))
        zmin = np.minimum.reduceat(zs, starts)
        zmax = np.maximum.reduceat(zs, starts)
    return GroupStats(n, count, wsum, mean, ss, slw, base_mean, cross, zmin, zmax, mean_lo)


def drop_rounding(ss: np.ndarray, wsum: np.ndarray, mean: np.ndarray) -> np.ndarray:
    """Within-level sums of squares with rounding noise set to 0: replicates that agree exactly
    leave only rounding (three copies of 0.1 give 1e-33), so a level whose sum of squares is
    within rounding of its mean's size has none."""
    return np.where(ss > wsum * (64.0 * _EPS * np.abs(mean)) ** 2, ss, 0.0)


def compute_base_parts(
    codes: np.ndarray, c: int, wsum: np.ndarray, w: np.ndarray | None, bases: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Group means of the bases, the bases centred within groups, and their cross-products."""
    n, q = bases.shape
    base_mean = np.empty((c, q))
    centred = np.empty((n, q), order="F")  # columns contiguous: each response pass reads them one by one
    for k in range(q):
        b = bases[:, k]
        bw = b if w is None else w * b
        base_mean[:, k] = np.bincount(codes, weights=bw, minlength=c) / wsum
        centred[:, k] = b - base_mean[codes, k]
    cross = np.empty((c, q, q))
    for k in range(q):
        for m in range(k, q):
            prod = centred[:, k] * centred[:, m]
            if w is not None:
                prod = prod * w
            col = np.bincount(codes, weights=prod, minlength=c)
            cross[:, k, m] = col
            cross[:, m, k] = col
    return base_mean, centred, cross


def normalised_boxcox_stats(st: GroupStats, lam: float, log_g: float) -> GroupStats:
    """Statistics of ((y/ġ)^λ − 1)/λ from those of (y^λ − 1)/λ (log ġ = ``log_g``).

    The two differ by an affine map z′ = a·z + b with a = ġ^(−λ) > 0 and b = (a − 1)/λ (b = −log ġ
    at λ = 0): means map, sums of squares and products with z scale by a² and a.
    """
    a = math.exp(-lam * log_g)
    b = -log_g if lam == 0 else math.expm1(-lam * log_g) / lam
    cross = None
    if st.cross is not None:
        cross = st.cross.copy()
        q = cross.shape[1] - 1
        cross[:, :q, q] *= a
        cross[:, q, :q] *= a
        cross[:, q, q] *= a * a
    return GroupStats(st.n, st.count, st.wsum, a * st.mean + b, a * a * st.ss, st.sum_log_w, st.base_mean, cross,
                      None if st.zmin is None else a * st.zmin + b, None if st.zmax is None else a * st.zmax + b)


def pool_group_stats(st: GroupStats, parent: np.ndarray, c: int, *, bases: bool, extremes: bool) -> GroupStats:
    """Statistics of coarser groups from those of finer ones: fine group g lies in coarse group
    ``parent[g]`` (0..c-1). Exact algebra (Chan, Golub & LeVeque 1983): counts and weights add;
    sums of squares and cross-products add, plus each fine group's weight times the outer
    product of its means' departure from the coarse means. Means are combined about a reference
    mean of each coarse group, so a large common offset costs no digits. ``bases`` keeps the
    within-varying bases (the fine statistics must have them); ``extremes`` keeps zmin/zmax.
    """
    count = np.bincount(parent, weights=st.count, minlength=c).astype(np.int64)
    wsum = np.bincount(parent, weights=st.wsum, minlength=c)
    ref = np.empty(c)
    ref[parent[::-1]] = st.mean[::-1]  # the first fine group's mean as the reference
    lo = st.mean_lo if st.mean_lo is not None else np.zeros_like(st.mean)
    dev_f = (st.mean - ref[parent]) + lo
    shift = np.bincount(parent, weights=st.wsum * dev_f, minlength=c) / wsum
    mean = ref + shift
    mean_lo = shift - (mean - ref)
    d = dev_f - shift[parent]  # fine mean minus coarse mean, with their low digits
    ss = np.bincount(parent, weights=st.ss + st.wsum * d * d, minlength=c)
    ss = drop_rounding(ss, wsum, mean)
    base_mean = np.zeros((c, 0))
    cross = None
    q = st.base_mean.shape[1]
    if bases and q:
        assert st.cross is not None
        base_mean = np.empty((c, q))
        for k in range(q):
            base_mean[:, k] = np.bincount(parent, weights=st.wsum * st.base_mean[:, k], minlength=c) / wsum
        u = np.column_stack([st.base_mean - base_mean[parent], d])  # (fine, q+1) departures
        extra = st.cross + st.wsum[:, None, None] * u[:, :, None] * u[:, None, :]
        cross = np.zeros((c, q + 1, q + 1))
        np.add.at(cross, parent, extra)
        cross[:, q, q] = ss
    zmin = zmax = None
    if extremes:
        assert st.zmin is not None and st.zmax is not None
        zmin = np.full(c, np.inf)
        zmax = np.full(c, -np.inf)
        np.minimum.at(zmin, parent, st.zmin)
        np.maximum.at(zmax, parent, st.zmax)
    return GroupStats(st.n, count, wsum, mean, ss, st.sum_log_w, base_mean, cross, zmin, zmax, mean_lo)


def narrow_group_stats(st: GroupStats, *, bases: bool, extremes: bool) -> GroupStats:
    """The same groups with the bases and/or the extremes left out."""
    base_mean, cross = (st.base_mean, st.cross) if bases else (np.zeros((st.c, 0)), None)
    zmin, zmax = (st.zmin, st.zmax) if extremes else (None, None)
    return GroupStats(st.n, st.count, st.wsum, st.mean, st.ss, st.sum_log_w, base_mean, cross, zmin, zmax,
                      st.mean_lo)
