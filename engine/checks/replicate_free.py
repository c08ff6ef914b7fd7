"""Checks that need no replicates (statsmodels RESET, rainbow, Harvey–Collier), all approximate."""

from __future__ import annotations

import math

import numpy as np

from ..stats.results import SideTest
from ..stats.study import Study

__all__ = ["replicate_free"]


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
        t, p = dg.linear_harvey_collier(res, skip=3)
        ok = math.isfinite(float(t))
        out.append(
            SideTest("Harvey–Collier (recursive residuals in x order)", ok, float(t) if ok else None, (), float(p) if ok else None,
                     reason=None if ok else "recursive residuals are degenerate here", approximate=True)
        )
    except Exception as exc:  # noqa: BLE001
        out.append(SideTest("Harvey–Collier (recursive residuals in x order)", False, reason=f"not computable here ({type(exc).__name__})"))
    return tuple(out)
