"""Plain result values shared across the engine (frozen; no statsmodels objects inside)."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from ..numfmt import fmt_num, p_clause

__all__ = ["Coefficient", "Fit", "Criteria", "criteria_from", "AnovaRow", "LevelRow", "SideTest"]


@dataclass(frozen=True, slots=True)
class Coefficient:
    """One coefficient in the raw (user-facing) basis."""

    name: str
    """Term label, e.g. ``x``, ``x²``, ``run_day[day2]``."""
    estimate: float
    """Least-squares estimate."""
    se: float
    """Standard error from σ̂² (X′WX)⁻¹."""
    t: float
    """estimate / se."""
    p: float
    """Two-sided p-value on the residual df."""
    low: float
    """Lower end of the confidence interval at the fit's level."""
    high: float
    """Upper end of the confidence interval."""


@dataclass(frozen=True, slots=True)
class Fit:
    """A weighted or ordinary least-squares fit computed from group statistics."""

    coefficients: tuple[Coefficient, ...]
    """Raw-basis coefficients, in term order."""
    cov: tuple[tuple[float, ...], ...]
    """Covariance matrix of the raw coefficients."""
    n: int
    """Rows used."""
    rank: int
    """Rank of the design (p)."""
    df_resid: int
    """n − p."""
    sse: float
    """Residual sum of squares (weighted when weights are used)."""
    sigma: float
    """Residual standard deviation sqrt(sse / df_resid); NaN only when df_resid = 0."""
    r2: float
    """Coefficient of determination (centred; uncentred through the origin)."""
    r2_adj: float
    """Adjusted R²."""
    ss_total: float
    """Total sum of squares about the weighted mean (about zero through the origin)."""
    loglik: float
    """Gaussian log-likelihood on the fitted (possibly transformed) scale."""
    aliased: tuple[str, ...] = ()
    """Terms dropped because they are linear combinations of earlier terms."""
    conf_level: float = 0.95
    """Level of the coefficient intervals."""
    group_fitted: tuple[float, ...] = field(default=(), repr=False)
    """Fitted mean of each replicate group (group order)."""
    group_leverage: tuple[float, ...] = field(default=(), repr=False)
    """x̄_g′(X′WX)⁻¹x̄_g per group (leverage of a unit-weight row there)."""
    rounding: float = 0.0
    """Sums of squares at or below this are floating-point rounding of the response's values (a
    residual or pure-error sum of squares there is treated as exactly 0)."""

    def coef(self, name: str) -> Coefficient:
        """The coefficient called ``name``."""
        for c in self.coefficients:
            if c.name == name:
                return c
        raise KeyError(name)


@dataclass(frozen=True, slots=True)
class Criteria:
    """Information criteria on the original response scale."""

    loglik: float
    """Log-likelihood of the original y (Jacobian included for transforms); +inf for an exact fit."""
    k: int
    """Estimated parameters: coefficients, σ, and one for each transform or weight power chosen
    from the data (``ModelSpec.extra_params``)."""
    n: int
    """Rows."""
    aic: float | None
    """−2ℓ + 2k; None when the fit is exact (the likelihood is unbounded)."""
    aicc: float | None
    """AIC + 2k(k+1)/(n−k−1); None when n − k − 1 ≤ 0 or the fit is exact."""
    bic: float | None
    """−2ℓ + k log n; None when the fit is exact."""

    def as_json(self) -> dict:
        """Stable JSON shape."""
        return {"loglik": self.loglik if math.isfinite(self.loglik) else None, "k": self.k, "aic": self.aic,
                "aicc": self.aicc, "bic": self.bic}


@dataclass(frozen=True, slots=True)
class AnovaRow:
    """One line of the sum-of-squares split."""

    source: str
    """'model', 'residual', 'lack of fit', 'pure error', 'total'."""
    df: int
    """Degrees of freedom."""
    ss: float
    """Sum of squares."""
    ms: float | None
    """Mean square (None where df = 0)."""
    f: float | None
    """F ratio where one applies."""
    p: float | None
    """p-value where one applies."""


@dataclass(frozen=True, slots=True)
class LevelRow:
    """Summary of one replicate group."""

    level: str
    """Label of the setting (x value, or x range under a tolerance)."""
    x: float
    """Mean predictor value of the group."""
    n: int
    """Rows in the group."""
    mean: float
    """(Weighted) mean response."""
    sd: float | None
    """Standard deviation of the replicates (None with one row)."""
    fitted: float
    """Fitted mean at this group."""
    residual: float
    """mean − fitted."""


@dataclass(frozen=True, slots=True)
class SideTest:
    """A supporting test (Mandel, spread, replicate-free checks)."""

    name: str
    """Our short name of the test."""
    testable: bool
    """False when it cannot be run here (see reason)."""
    statistic: float | None = None
    """Test statistic."""
    df: tuple[float, ...] = ()
    """Degrees of freedom of the reference distribution."""
    p: float | None = None
    """p-value."""
    reason: str | None = None
    """Why it is unavailable, or a note on its interpretation."""
    approximate: bool = False
    """True when the test is only indicative (no exact replicates)."""
    alpha: float | None = None
    """Level used for this test's own verdict (e.g. 0.01 for Mandel by ISO 8466-1)."""
    method: str | None = None
    """The method run, e.g. 'Brown–Forsythe' or 'Bartlett' (not part of the JSON; the name says it too)."""

    def summary(self) -> str:
        """One line: 'statistic 2.31 on (3, 20), p = 0.107' or 'not run — reason'."""
        if not self.testable:
            return f"not run — {self.reason or 'no reason given'}"
        df = f" on ({', '.join(fmt_num(d, 4) for d in self.df)})" if self.df else ""
        return f"statistic {fmt_num(self.statistic, 4)}{df}, {p_clause(self.p)}" + (
            " (approximate)" if self.approximate else "")

    def to_dict(self) -> dict:
        """JSON shape."""
        out = {"name": self.name, "testable": self.testable}
        if self.testable:
            out.update(statistic=self.statistic, df=list(self.df), p=self.p, approximate=self.approximate)
            if self.alpha is not None:
                out["alpha"] = self.alpha
        if self.reason:
            out["reason" if not self.testable else "note"] = self.reason
        return out

    as_json = to_dict


def criteria_from(loglik: float, k: int, n: int) -> Criteria:
    """AIC, AICc and BIC from a log-likelihood with k estimated parameters (Burnham & Anderson 2002).

    An exact fit has an unbounded likelihood: its criteria are None, never −∞.
    """
    if not math.isfinite(loglik):
        return Criteria(loglik, k, n, None, None, None)
    aic = -2.0 * loglik + 2.0 * k
    aicc = aic + 2.0 * k * (k + 1) / (n - k - 1) if n - k - 1 > 0 else None
    bic = -2.0 * loglik + k * math.log(n)
    return Criteria(loglik, k, n, aic, aicc, bic)
