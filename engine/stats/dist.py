"""Tail probabilities through ``scipy.special`` (imported lazily; lighter than scipy.stats)."""

from __future__ import annotations

import math


def f_sf(f: float, df1: float, df2: float) -> float:
    """Upper tail P(F > f) of the F(df1, df2) distribution."""
    from scipy.special import fdtrc

    return float(fdtrc(df1, df2, max(f, 0.0)))


def f_ppf(q: float, df1: float, df2: float) -> float:
    """Quantile of the F(df1, df2) distribution."""
    from scipy.special import fdtri

    return float(fdtri(df1, df2, q))


def t_sf2(t: float, df: float) -> float:
    """Two-sided p-value of a t statistic on ``df`` degrees of freedom."""
    from scipy.special import stdtr

    if not math.isfinite(t):
        return 0.0
    return float(2.0 * stdtr(df, -abs(t)))


def t_ppf(q: float, df: float) -> float:
    """Quantile of Student's t."""
    from scipy.special import stdtrit

    return float(stdtrit(df, q))


def chi2_ppf(q: float, df: float) -> float:
    """Quantile of the chi-square distribution."""
    from scipy.special import chdtri

    return float(chdtri(df, 1.0 - q))


def chi2_sf(x: float, df: float) -> float:
    """Upper tail P(χ²_df > x)."""
    from scipy.special import chdtrc

    return float(chdtrc(df, max(x, 0.0)))
