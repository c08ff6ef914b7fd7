"""Does the spread follow the mean? A power-of-mean variance function fitted to the replicates.

Model: Var(y | level j) = σ² · |m_j|^(2θ), with m_j the level mean. Only the replicates inform
it: SS_j / (σ² |m_j|^(2θ)) ~ χ²(n_j − 1) independently, so the within-level log-likelihood is

    ℓ(θ, σ²) = Σ_j [ −(ν_j/2) log(σ² |m_j|^(2θ)) − SS_j / (2σ² |m_j|^(2θ)) ],   ν_j = n_j − 1,

and with σ² profiled out, ℓ_p(θ) = −(ν/2) log σ̂²(θ) − θ Σ ν_j log|m_j| (+ constant),
σ̂²(θ) = Σ SS_j |m_j|^(−2θ) / ν. θ = 0 is equal spread, ½ Poisson-like, 1 a constant coefficient
of variation, 2 an SD growing with the square of the mean. The likelihood-ratio statistic
2[ℓ_p(θ̂) − ℓ_p(0)] tests θ = 0 against χ²₁ (a trend test of spread; Carroll & Ruppert,
*Transformation and Weighting in Regression*, 1988, ch. 3, fit variance functions this way
[from memory]). Everything is computed with log|m_j| centred and through log-sum-exp, so no power
of a mean can overflow; θ is searched in [THETA_MIN, THETA_MAX] only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .numerics import golden_max

__all__ = ["VarianceTrend", "variance_trend", "level_weights", "THETA_MIN", "THETA_MAX",
           "CONVENTIONAL_THETAS", "MIN_REPLICATES"]

THETA_MIN = -1.0
"""Smallest power searched: an SD falling as 1/mean."""
THETA_MAX = 2.0
"""Largest power searched: an SD growing as mean²."""
CONVENTIONAL_THETAS = (0.0, 1.0, 0.5, 1.5, 2.0, -0.5, -1.0)
"""Round powers, in order of plainness; 0 (equal spread) first."""
MIN_REPLICATES = 3
"""A level informs the variance function only with at least this many replicates."""
_CHI2_1_95 = 3.841458820694124  # χ²₁(0.95), common practice
_EPS = float(np.finfo(float).eps)


@dataclass(frozen=True, slots=True)
class VarianceTrend:
    """The power-of-mean variance function of one response scale, or why there is none."""

    available: bool
    """False when the replicates cannot support a variance function (see ``reason``)."""
    reason: str | None = None
    """Why it is unavailable."""
    theta_hat: float = math.nan
    """Maximum-likelihood θ in [THETA_MIN, THETA_MAX]."""
    low: float | None = None
    """Lower end of the 95% likelihood interval of θ (None: at the search bound)."""
    high: float | None = None
    """Upper end (None: at the search bound)."""
    statistic: float = math.nan
    """Likelihood-ratio statistic of θ = 0, 2[ℓ(θ̂) − ℓ(0)]."""
    p: float = math.nan
    """Two-sided p-value of θ = 0 (χ²₁)."""
    p_increasing: float = math.nan
    """One-sided p-value of θ = 0 against θ > 0 (spread growing with the mean): half the two-sided
    p when θ̂ > 0, else 1 − p/2."""
    levels: int = 0
    """Levels used (replicated, mean ≠ 0)."""
    chosen: float = 0.0
    """θ used for weights: a round value inside the interval when there is one, else θ̂."""
    snapped: bool = False
    """True when ``chosen`` is a round value rather than θ̂."""

    def as_json(self) -> dict:
        """JSON description."""
        if not self.available:
            return {"available": False, "reason": self.reason}
        return {"available": True, "theta_hat": self.theta_hat, "low": self.low, "high": self.high,
                "statistic": self.statistic, "p": self.p, "p_increasing": self.p_increasing,
                "levels": self.levels, "chosen": self.chosen, "snapped": self.snapped}


def _logsumexp(a: np.ndarray) -> float:
    top = float(np.max(a))
    return top + math.log(float(np.sum(np.exp(a - top))))


def variance_trend(count: np.ndarray, mean: np.ndarray, ss: np.ndarray, *,
                   fitted: np.ndarray | None = None, rank: int = 0) -> VarianceTrend:
    """Fit Var = σ²|m|^(2θ) to per-level counts, means and within-level sums of squares.

    Needs at least 3 levels with ``MIN_REPLICATES`` or more replicates, those being more than
    half of all levels, a mean of one sign with some spread in log|m|, and some pure error.

    With ``fitted`` (the level means of a fitted mean model of ``rank`` coefficients) the trend is
    read from that model's residuals instead of the replicates alone, as regression diagnostics of
    spread do (Cook & Weisberg 1983, Biometrika 70:1): each level contributes its pure error plus
    n_j(ȳ_j − ŷ_j)², the power is of |ŷ_j|, and the degrees of freedom are shared as n_j(n − rank)/n.
    Under a correct mean model this uses every residual degree of freedom.
    """
    count = np.asarray(count, dtype=float)
    mean = np.asarray(mean, dtype=float)
    ss = np.asarray(ss, dtype=float)
    if fitted is not None:
        fitted = np.asarray(fitted, dtype=float)
        total = float(count.sum())
        dev = mean - fitted
        dev = np.where(np.abs(dev) > 64 * _EPS * np.abs(mean), dev, 0.0)  # rounding is no departure
        return _fit_trend(count, fitted, ss + count * dev**2, count * (total - rank) / total)
    return _fit_trend(count, mean, ss, count - 1.0)


def _fit_trend(count: np.ndarray, mean: np.ndarray, ss: np.ndarray, nu_all: np.ndarray) -> VarianceTrend:
    """The likelihood of the module text with per-level degrees of freedom ``nu_all``."""
    rich = count >= MIN_REPLICATES
    if rich.sum() < 3 or 2 * rich.sum() <= count.size:
        return VarianceTrend(False, f"needs at least {MIN_REPLICATES} replicates at most levels "
                             f"({int(rich.sum())} of {count.size} levels have them)")
    if (mean[rich] > 0).any() and (mean[rich] < 0).any():
        return VarianceTrend(False, "the level means change sign: a power of the mean is undefined")
    use = rich & (np.abs(mean) > 0) & (ss > 0)
    if use.sum() < 3:
        return VarianceTrend(False, "fewer than 3 replicated levels with a non-zero mean and some spread")
    nu = nu_all[use]
    lm = np.log(np.abs(mean[use]))
    lm = lm - float(np.sum(nu * lm) / np.sum(nu))
    if float(np.ptp(lm)) < 1e-9:
        return VarianceTrend(False, "the level means are all equal: a trend of spread with the mean cannot be seen")
    lss = np.log(ss[use])
    total = float(nu.sum())

    def loglik(theta: float) -> float:
        # −(ν/2) log σ̂²(θ) − θ Σ ν_j lm_j; the second sum is 0 because lm is centred
        return -0.5 * total * (_logsumexp(lss - 2.0 * theta * lm) - math.log(total))

    grid = np.linspace(THETA_MIN, THETA_MAX, 61)
    vals = np.array([loglik(float(t)) for t in grid])
    i = int(np.argmax(vals))
    a, b = grid[max(i - 1, 0)], grid[min(i + 1, grid.size - 1)]
    theta = golden_max(loglik, float(a), float(b))
    top = loglik(theta)
    if vals[i] > top:
        theta, top = float(grid[i]), float(vals[i])
    stat = max(2.0 * (top - loglik(0.0)), 0.0)
    from .dist import chi2_sf

    p = chi2_sf(stat, 1)
    cut = top - _CHI2_1_95 / 2

    def edge(lo: float, hi: float) -> float:
        # loglik − cut changes sign between lo (below the cut) and hi (above): bisection
        for _ in range(80):
            mid = 0.5 * (lo + hi)
            if loglik(mid) < cut:
                lo = mid
            else:
                hi = mid
        return 0.5 * (lo + hi)

    low = edge(THETA_MIN, theta) if loglik(THETA_MIN) < cut else None
    high = edge(THETA_MAX, theta) if loglik(THETA_MAX) < cut else None
    inside = [v for v in CONVENTIONAL_THETAS
              if (low is None or v >= low) and (high is None or v <= high)]
    if 0.0 in inside:
        chosen, snapped = 0.0, True
    elif inside:
        chosen, snapped = min(inside, key=lambda v: abs(v - theta)), True
    else:
        chosen, snapped = round(theta, 2), False
    p_inc = p / 2 if theta > 0 else 1 - p / 2
    return VarianceTrend(True, None, theta, low, high, stat, p, p_inc, int(use.sum()), float(chosen), snapped)


def level_weights(mean: np.ndarray, theta: float) -> np.ndarray:
    """Weights |m_j|^(−2θ) per level, scaled to geometric mean 1, computed in log space.

    Raises ValueError when a mean is 0 or the weights would span more than 1e200 (no power
    weights mean anything there).
    """
    m = np.abs(np.asarray(mean, dtype=float))
    if not (m > 0).all():
        raise ValueError("a level mean is 0 on this response scale")
    lw = -2.0 * theta * np.log(m)
    lw = lw - float(np.mean(lw))
    if float(np.ptp(lw)) > 460.0:  # e^460 ≈ 1e200
        raise ValueError("the level means span so many orders of magnitude that power weights would overflow")
    return np.exp(lw)
