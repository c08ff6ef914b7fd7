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


def box_tidwell(study: Study, spec: ModelSpec, max_iter: int = 50) -> PowerSearch:
    """Iterate α_{k+1} = α_k + γ/β₁ (regress on x^α and x^α·log x), then a likelihood interval."""
    from ..stats.dist import t_sf2

    x_lv = study.x_level_values
    if (x_lv <= 0).any():
        raise UsageError("a power of x needs x > 0")
    fr = _frame(study, spec)
    stats = study.group_stats(fr.z, ("z", spec.response.key()), by=fr.by, weights=fr.w, weights_key=fr.wkey,
                              bases=fr.bases, bases_key=fr.bases_key, level_weights=fr.w_level)
    xg = study.group_parent(fr.by)
    logx = np.log(x_lv)[xg]

    def design_for(alpha: float, extra: bool) -> Design:
        s2 = spec.with_(predictor=Transform("power", alpha) if alpha != 1 else IDENTITY)
        fr2 = _frame(study, s2)
        d, _ = build_design(study, s2, fr2)
        if not extra:
            return d
        t = np.exp(alpha * logx)
        col = Column(t * logx / (np.abs(t * logx).max() or 1.0))
        p = d.p + 1
        to_raw = np.eye(p, dtype=np.longdouble)
        to_raw[: d.p, : d.p] = d.to_raw
        return Design(d.columns + (col,), d.names + ("xlogx",), to_raw, True)

    def slope_gamma(alpha: float) -> tuple[float, float, float]:
        f1 = fit_design(stats, design_for(alpha, False))
        f2 = fit_design(stats, design_for(alpha, True))
        b1 = f1.coefficients[1].estimate
        g = f2.coefficients[-1]
        scale = np.abs(np.exp(alpha * logx) * logx).max() or 1.0
        # γ on the unscaled x^α·log x column; b1 on x^α (raw basis)
        return b1, g.estimate / scale, g.p

    if fit_design(stats, design_for(1.0, False)).sse == 0:
        raise UsageError("the straight line fits every level exactly: there is no power of x to estimate")
    first = slope_gamma(1.0)
    p1 = first[2]
    alpha, it = 1.0, 0
    for it in range(1, max_iter + 1):  # noqa: B007 - count is reported
        # the first step starts from α = 1, whose fits were just made
        b1, gamma, _ = first if it == 1 else slope_gamma(alpha)
        # the x^α·log x column equals (1/α)·t·log t; γ estimates β₁(α_new − α)
        step = gamma / b1 if b1 else 0.0
        if not math.isfinite(step):
            break
        new = alpha + step
        new = float(np.clip(new, -4.0, 4.0))
        if abs(new - alpha) < 1e-9:
            alpha = new
            break
        alpha = new if abs(new) > 1e-8 else 1e-8
    # likelihood interval on the profile of SSE(α)
    n = study.n

    seen: dict[float, float] = {}

    def sse(a: float) -> float:
        # the bracket search and the root finder revisit the same powers: compute each once
        hit = seen.get(a)
        if hit is None:
            hit = seen[a] = design_rss(stats, design_for(a, False))
        return hit

    s_hat = sse(alpha)

    def gap(a: float) -> float:
        return n * math.log(sse(a) / s_hat) - CHI2_95

    low = high = None
    edge = alpha - 0.05
    while edge > alpha - 8 and gap(edge if edge != 0 else 1e-6) < 0:
        edge -= 0.5
    try:
        if gap(edge if edge != 0 else 1e-6) > 0:
            low = float(brentq(lambda a: gap(a if a != 0 else 1e-9), edge, alpha, xtol=1e-8))
    except ValueError:
        low = None
    edge = alpha + 0.05
    while edge < alpha + 8 and gap(edge if edge != 0 else 1e-6) < 0:
        edge += 0.5
    try:
        if gap(edge if edge != 0 else 1e-6) > 0:
            high = float(brentq(lambda a: gap(a if a != 0 else 1e-9), alpha, edge, xtol=1e-8))
    except ValueError:
        high = None
    inside = [v for v in CONVENTIONAL_POWERS if (low is None or v >= low) and (high is None or v <= high)]
    if inside:
        chosen, estimated = min(inside, key=lambda v: abs(v - alpha)), False
    else:
        chosen, estimated = round(alpha, 2), True
    _ = t_sf2  # imported for callers' symmetry
    return PowerSearch(alpha, p1, low, high, chosen, estimated, it)
