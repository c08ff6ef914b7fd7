"""The Box–Tidwell (1962) power of x, with a likelihood interval."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import UsageError
from ..stats.linalg import Column, Design, design_rss, fit_design
from ..stats.numerics import brentq
from ..stats.study import Study
from ..stats.transforms import IDENTITY, Transform
from .boxcox import HALF_CHI2_95
from .model_spec import ModelSpec
from .scoring import _frame, build_design

__all__ = ["PowerSearch", "box_tidwell", "CONVENTIONAL_POWERS"]


CHI2_95 = 2 * HALF_CHI2_95


CONVENTIONAL_POWERS = (0.0, 0.5, -1.0, 2.0, -0.5, 1 / 3, 3.0)


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


class _PowerFits:
    """The fits Box–Tidwell needs at a trial power α, from the node's group statistics."""

    def __init__(self, study: Study, spec: ModelSpec) -> None:
        self.study, self.spec = study, spec
        fr = _frame(study, spec)
        self.stats = study.group_stats(fr.z, ("z", spec.response.key()), by=fr.by, weights=fr.w,
                                       weights_key=fr.wkey, bases=fr.bases, bases_key=fr.bases_key,
                                       level_weights=fr.w_level)
        self.logx = np.log(study.x_level_values)[study.group_parent(fr.by)]
        self._sse: dict[float, float] = {}

    def design(self, alpha: float, extra: bool) -> Design:
        """The node's design with x^α (and, with ``extra``, the scaled x^α·log x column)."""
        s2 = self.spec.with_(predictor=Transform("power", alpha) if alpha != 1 else IDENTITY)
        d, _ = build_design(self.study, s2, _frame(self.study, s2))
        if not extra:
            return d
        t = np.exp(alpha * self.logx)
        col = Column(t * self.logx / (np.abs(t * self.logx).max() or 1.0))
        p = d.p + 1
        to_raw = np.eye(p, dtype=np.longdouble)
        to_raw[: d.p, : d.p] = d.to_raw
        return Design(d.columns + (col,), d.names + ("xlogx",), to_raw, True)

    def slope_gamma(self, alpha: float) -> tuple[float, float, float]:
        """b₁ on x^α, γ on the unscaled x^α·log x column, and γ's p-value."""
        f1 = fit_design(self.stats, self.design(alpha, False))
        f2 = fit_design(self.stats, self.design(alpha, True))
        g = f2.coefficients[-1]
        scale = np.abs(np.exp(alpha * self.logx) * self.logx).max() or 1.0
        return f1.coefficients[1].estimate, g.estimate / scale, g.p

    def sse(self, alpha: float) -> float:
        """Residual sum of squares at α (the bracket search and root finder revisit powers: cached)."""
        hit = self._sse.get(alpha)
        if hit is None:
            hit = self._sse[alpha] = design_rss(self.stats, self.design(alpha, False))
        return hit


def box_tidwell(study: Study, spec: ModelSpec, max_iter: int = 50) -> PowerSearch:
    """Iterate α_{k+1} = α_k + γ/β₁ (regress on x^α and x^α·log x), then a likelihood interval."""
    if (study.x_level_values <= 0).any():
        raise UsageError("a power of x needs x > 0")
    fits = _PowerFits(study, spec)
    if fit_design(fits.stats, fits.design(1.0, False)).sse == 0:
        raise UsageError("the straight line fits every level exactly: there is no power of x to estimate")
    first = fits.slope_gamma(1.0)
    alpha, it = _iterate(fits, first, max_iter)
    s_hat = fits.sse(alpha)

    def gap(a: float) -> float:
        return study.n * math.log(fits.sse(a if a != 0 else 1e-9) / s_hat) - CHI2_95

    low = _interval_end(gap, alpha, -1)
    high = _interval_end(gap, alpha, +1)
    inside = [v for v in CONVENTIONAL_POWERS if (low is None or v >= low) and (high is None or v <= high)]
    if inside:
        chosen, estimated = min(inside, key=lambda v: abs(v - alpha)), False
    else:
        chosen, estimated = round(alpha, 2), True
    return PowerSearch(alpha, first[2], low, high, chosen, estimated, it)


def _iterate(fits: _PowerFits, first: tuple[float, float, float], max_iter: int) -> tuple[float, int]:
    """Box–Tidwell steps from α = 1 until the power stops moving; returns (α̂, iterations)."""
    alpha, it = 1.0, 0
    for it in range(1, max_iter + 1):  # noqa: B007 - count is reported
        # the first step starts from α = 1, whose fits were just made
        b1, gamma, _ = first if it == 1 else fits.slope_gamma(alpha)
        # the x^α·log x column equals (1/α)·t·log t; γ estimates β₁(α_new − α)
        step = gamma / b1 if b1 else 0.0
        if not math.isfinite(step):
            break
        new = float(np.clip(alpha + step, -4.0, 4.0))
        if abs(new - alpha) < 1e-9:
            alpha = new
            break
        alpha = new if abs(new) > 1e-8 else 1e-8
    return alpha, it


def _interval_end(gap, alpha: float, direction: int) -> float | None:
    """One end of the profile-likelihood interval: step out by ½ until the χ² cut-off is crossed,
    then find the root; None when it is not crossed within 8 of α̂."""
    edge = alpha + 0.05 * direction
    while abs(edge - alpha) < 8 and gap(edge if edge != 0 else 1e-6) < 0:
        edge += 0.5 * direction
    try:
        if gap(edge if edge != 0 else 1e-6) > 0:
            lo, hi = (edge, alpha) if direction < 0 else (alpha, edge)
            return float(brentq(gap, lo, hi, xtol=1e-8))
    except ValueError:
        return None
    return None
