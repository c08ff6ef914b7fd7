"""Tests of equal spread across levels: Brown–Forsythe from the rows, Bartlett from level
variances.
"""

from __future__ import annotations

import math

import numpy as np

from .dist import f_sf
from .results import SideTest

__all__ = ["spread_test", "bartlett_from_groups", "brown_forsythe_from_sums", "deviation_sums"]


def spread_test(z: np.ndarray, codes: np.ndarray, c: int, order: np.ndarray | None = None) -> SideTest:
    """Brown–Forsythe test of equal spread: one-way ANOVA of |z − group median| (unweighted).

    Levels with one row carry no spread and are left out (as scipy.stats.levene would need).
    ``order`` (rows sorted by group, e.g. ``Study.group_order()``) saves a sort.
    """
    name = "equal spread (Brown–Forsythe)"
    counts = np.bincount(codes, minlength=c)
    ok = counts >= 2
    if ok.sum() < 2:
        return SideTest(name, False, reason="needs at least two levels with two or more replicates")
    if order is None:
        order = np.argsort(codes.astype(np.uint16) if c <= 65535 else codes.astype(np.int64), kind="stable")
    zs = z[order]
    ends = np.cumsum(counts)
    starts = ends - counts
    sums = np.zeros(c)
    sq = np.zeros(c)
    dsq = np.zeros(c)
    if c <= 5000:
        for g in np.flatnonzero(ok):
            seg = zs[starts[g]:ends[g]]
            dg = np.abs(seg - np.median(seg))
            sums[g] = dg.sum()
            dev = dg - sums[g] / counts[g]
            sq[g] = np.einsum("i,i->", dev, dev)  # einsum: BLAS dot is slow on some OpenBLAS builds
            dsq[g] = np.einsum("i,i->", dg, dg)
    else:
        import pandas as pd

        med = pd.Series(zs).groupby(np.repeat(np.arange(c), counts)).median().to_numpy()
        d = np.abs(zs - np.repeat(med, counts))
        nz = counts > 0
        sums[nz] = np.add.reduceat(d, starts[nz])
        dev = d - np.repeat(np.divide(sums, counts, out=np.zeros(c), where=nz), counts)
        sq[nz] = np.add.reduceat(dev * dev, starts[nz])
        dsq[nz] = np.add.reduceat(d * d, starts[nz])
    return _brown_forsythe(name, counts, ok, sums, sq, dsq)


def brown_forsythe_from_sums(counts: np.ndarray, sums: np.ndarray, sq: np.ndarray, dsq: np.ndarray) -> SideTest:
    """Brown–Forsythe from per-group Σd, Σ(d − d̄)² and Σd² of the absolute deviations from
    the group medians (see :func:`deviation_sums`)."""
    name = "equal spread (Brown–Forsythe)"
    ok = counts >= 2
    if ok.sum() < 2:
        return SideTest(name, False, reason="needs at least two levels with two or more replicates")
    return _brown_forsythe(name, counts, ok, sums, sq, dsq)


def deviation_sums(z: np.ndarray, codes: np.ndarray, c: int, counts: np.ndarray,
                          medians: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per group: Σ d, Σ (d − d̄)² and Σ d² of d = |z − median|.

    One pass: Σ(d − d̄)² = Σd² − (Σd)²/n loses little here, because d ≥ 0 and its spread within a
    group is of the size of its mean (a group whose d barely vary, e.g. two rows, comes out near
    0 either way and the test refuses it).
    """
    d = np.abs(z - medians[codes])
    sums = np.bincount(codes, weights=d, minlength=c)
    dsq = np.bincount(codes, weights=d * d, minlength=c)
    means = np.divide(sums, counts, out=np.zeros(c), where=counts > 0)
    return sums, np.maximum(dsq - sums * means, 0.0), dsq


def _brown_forsythe(name: str, counts: np.ndarray, ok: np.ndarray, sums: np.ndarray, sq: np.ndarray,
                    dsq: np.ndarray) -> SideTest:
    """The one-way ANOVA of the absolute deviations from per-group sums."""
    c = counts.shape[0]
    means = np.divide(sums, counts, out=np.zeros(c), where=counts > 0)
    nk = counts[ok].astype(float)
    k = int(ok.sum())
    total = float(nk.sum())
    grand = float(sums[ok].sum() / total)
    ssb = float((nk * (means[ok] - grand) ** 2).sum())
    ssw = float(sq[ok].sum())
    scale = float(dsq[ok].sum())
    if ssw <= 1e-12 * scale or scale == 0:
        # e.g. two rows per level: both deviations from the median are equal, so the within
        # sum of squares is 0 up to rounding and F would be a ratio of rounding noise
        return SideTest(name, False, reason="the absolute deviations do not vary within levels (e.g. two "
                        "replicates per level): the spread test needs three or more replicates somewhere")
    f = (ssb / (k - 1)) / (ssw / (total - k))
    return SideTest(name, True, f, (k - 1, total - k), f_sf(f, k - 1, total - k), method="Brown–Forsythe")


def bartlett_from_groups(count: np.ndarray, ss: np.ndarray, name: str = "equal spread (Bartlett)") -> SideTest:
    """Bartlett's (1937) test of equal variances from group sizes and within-group sums of squares."""
    from .dist import chi2_sf

    keep = count >= 2
    if keep.sum() < 2:
        return SideTest(name, False, reason="needs at least two levels with two or more replicates")
    nk, ssk = count[keep], ss[keep]
    var = ssk / (nk - 1.0)
    scale = float(np.max(np.abs(var))) if var.size else 0.0
    if scale <= 0 or (var <= 1e-13 * scale).any():
        return SideTest(name, False, reason="a level has no spread (all its replicates are equal)")
    k = int(keep.sum())
    dof = float(nk.sum()) - k
    pooled = float(ssk.sum()) / dof
    stat = (dof * math.log(pooled) - float(((nk - 1.0) * np.log(var)).sum()))
    stat /= 1.0 + (float((1.0 / (nk - 1.0)).sum()) - 1.0 / dof) / (3.0 * (k - 1))
    note = ("one pass over level variances, assumes normal errors within levels; Brown–Forsythe "
            "needs the rows: --engine memory")
    return SideTest(name, True, stat, (k - 1,), chi2_sf(stat, k - 1), reason=note, method="Bartlett")
