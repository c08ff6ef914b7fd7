"""Checks that need no replicates (statsmodels RESET, rainbow, Harvey–Collier), all approximate."""

from __future__ import annotations

import math

import numpy as np

from ..stats.results import SideTest
from ..stats.study import Study

__all__ = ["harvey_collier", "replicate_free"]


def harvey_collier(x: np.ndarray, y: np.ndarray, skip: int = 3) -> tuple[float, float]:
    """Harvey–Collier t test on the recursive residuals of the straight line, rows in the given
    order, in O(n): the same statistic as statsmodels' ``linear_harvey_collier(res, skip=3)``
    (Harvey & Collier 1977), which updates (X′X)⁻¹ row by row in Python.

    For rows 0…i−1 the line's running means and centred sums come from cumulative sums taken about
    the first row (rows sorted by x keep the cancellation in Σ(x − c)² − m(x̄ − c)² small); the
    recursive residual of row i is (yᵢ − ŷᵢ)/√(1 + 1/m + (xᵢ − x̄)²/Sxx). Raises ValueError when
    the first ``skip`` rows do not determine a line (as statsmodels does).
    """
    from ..stats.dist import t_sf2

    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    n = x.size
    if n <= skip + 1:
        raise ValueError("too few rows for recursive residuals")
    dx, dy = x - x[0], y - y[0]
    m = np.arange(1, n + 1, dtype=float)
    sx, sy = np.cumsum(dx), np.cumsum(dy)
    sxx, sxy = np.cumsum(dx * dx), np.cumsum(dx * dy)
    mx, my = sx / m, sy / m
    cxx = sxx - m * mx * mx
    cxy = sxy - m * mx * my
    if not cxx[skip - 1] > 0:
        raise ValueError("the first rows do not determine a line")
    # fits on rows 0..i-1 (index i-1 of the running sums) predict row i, for i = skip … n-1
    k = np.arange(skip, n)
    prev = k - 1
    b = cxy[prev] / cxx[prev]
    pred = my[prev] + b * (dx[k] - mx[prev])
    f = 1.0 + 1.0 / m[prev] + (dx[k] - mx[prev]) ** 2 / cxx[prev]
    w = (dy[k] - pred) / np.sqrt(f)
    sd = float(np.std(w, ddof=1))
    t = float(np.mean(w)) / (sd / math.sqrt(w.size)) if sd > 0 else float("nan")
    return t, t_sf2(abs(t), w.size - 1) if math.isfinite(t) else float("nan")


def replicate_free(study: Study) -> tuple[SideTest, ...]:
    """Checks that need no replicates (statsmodels), on rows sorted by x. All approximate."""
    import statsmodels.api as sm
    from statsmodels.stats import diagnostic as dg

    order = np.argsort(study.x, kind="stable")
    xs, ys = study.x[order], study.y[order]
    exog = np.column_stack([np.ones_like(xs), xs])
    if study.weights is None:
        res = sm.OLS(ys, exog).fit()
    else:
        res = sm.WLS(ys, exog, weights=study.weights[order]).fit()
    out: list[SideTest] = []
    try:
        r = dg.linear_reset(res, power=3, test_type="fitted", use_f=True)
        out.append(SideTest("RESET (powers 2–3 of the fit)", True, float(r.fvalue), (float(r.df_num), float(r.df_denom)), float(r.pvalue), approximate=True))
    except Exception as exc:  # noqa: BLE001 - statsmodels raises assorted errors on tiny data
        out.append(SideTest("RESET (powers 2–3 of the fit)", False, reason=f"not computable here ({type(exc).__name__})"))
    try:
        f, p = dg.linear_rainbow(res, frac=0.5)
        out.append(SideTest("rainbow (middle half of x)", True, float(f), (), float(p), approximate=True))
    except Exception as exc:  # noqa: BLE001
        out.append(SideTest("rainbow (middle half of x)", False, reason=f"not computable here ({type(exc).__name__})"))
    try:
        t, p = harvey_collier(xs, ys, skip=3)  # statsmodels' statistic (unweighted rows), in O(n)
        ok = math.isfinite(float(t))
        out.append(
            SideTest("Harvey–Collier (recursive residuals in x order)", ok, float(t) if ok else None, (), float(p) if ok else None,
                     reason=None if ok else "recursive residuals are degenerate here", approximate=True)
        )
    except Exception as exc:  # noqa: BLE001
        out.append(SideTest("Harvey–Collier (recursive residuals in x order)", False, reason=f"not computable here ({type(exc).__name__})"))
    return tuple(out)
