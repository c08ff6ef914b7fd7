"""Random run slopes for the straight line (``--run-slopes``): each run has its own intercept and slope.

z = Xβ + Xu_run + e for the straight line X = [1, u] (u the working-basis predictor), with
u_run ~ N(0, σ_w²Γ) and e ~ N(0, σ_w²). Within a run, with M = X′X of that run and
B = Γ(I + MΓ)⁻¹: X′H⁻¹X = M − MBM, X′H⁻¹z = c − MBc (c = X′z), z′H⁻¹z = z′z − c′Bc and
log|H| = log|I + MΓ|; so per-run sums suffice, as for the random intercept. Γ = LL′ (L lower
triangular) keeps it positive semi-definite; σ_w² is profiled out and the REML (or ML)
likelihood is maximised over L by BFGS from several starts. BLUPs are B(c − Mβ); their
prediction error covariance σ_w²B (β treated as known). Sources: Searle, Casella & McCulloch
(1992) ch. 6; Pinheiro & Bates (2000) ch. 2 for the parametrisation.

Only the straight line: other nodes are refused with one line (``engine.tree.runs_node``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

RunDesignSums = Any  # the per-run sums of engine.tree.runs_node (n, xx, xz, zz per run); not imported: no cycle

__all__ = ["SlopeFit", "SlopeParts", "fit_slopes", "slope_pieces", "slope_parts", "reml_at"]


def _gamma(par: np.ndarray) -> np.ndarray:
    low = np.array([[par[0], 0.0], [par[1], par[2]]])
    return low @ low.T


def slope_pieces(ds: RunDesignSums, gam: np.ndarray) -> tuple[np.ndarray, np.ndarray, float, float, np.ndarray]:
    """X′H⁻¹X, X′H⁻¹z, z′H⁻¹z, log|H| and the per-run B matrices at Γ."""
    eye = np.eye(2)
    bs = np.array([gam @ np.linalg.inv(eye + m @ gam) for m in ds.xx])
    a = ds.xx.sum(axis=0) - np.einsum("kij,kjl,klm->im", ds.xx, bs, ds.xx)
    b = ds.xz.sum(axis=0) - np.einsum("kij,kjl,kl->i", ds.xx, bs, ds.xz)
    zz = float(ds.zz.sum() - np.einsum("ki,kij,kj->", ds.xz, bs, ds.xz))
    logdet = float(sum(np.linalg.slogdet(eye + m @ gam)[1] for m in ds.xx))
    return a, b, zz, logdet, bs


def _profiled(ds: RunDesignSums, gam: np.ndarray, reml: bool) -> tuple[float, float]:
    a, b, zz, logdet_h, _ = slope_pieces(ds, gam)
    n, p = ds.total, 2
    q = max(zz - float(b @ np.linalg.solve(a, b)), 1e-300)
    m = n - p if reml else n
    s2 = q / m
    ll = -0.5 * (m * (math.log(2 * math.pi * s2) + 1.0) + logdet_h)
    if reml:
        ll -= 0.5 * np.linalg.slogdet(a)[1]
    return s2, ll


@dataclass(frozen=True, slots=True)
class SlopeFit:
    """σ_w², the random-effects covariance D = σ_w²Γ (working basis), log-likelihood, GLS fit, BLUPs."""

    s2: float
    d: np.ndarray
    loglik: float
    beta: np.ndarray
    cov: np.ndarray
    blups: np.ndarray
    pev: np.ndarray


def fit_slopes(ds: RunDesignSums, reml: bool, start_gamma: float) -> SlopeFit:
    """Maximise the profiled likelihood over Γ = LL′ (several starts; the best kept)."""
    from scipy.optimize import minimize

    def neg(par: np.ndarray) -> float:
        val = _profiled(ds, _gamma(par), reml)[1]
        return -val if math.isfinite(val) else 1e300

    r = math.sqrt(max(start_gamma, 1e-4))
    starts = [np.array([r, 0.0, 0.1]), np.array([r, 0.1 * r, 0.5])]
    best = None
    for s in starts:
        res = minimize(neg, s, method="Nelder-Mead", options={"xatol": 1e-6, "fatol": 1e-9, "maxiter": 800})
        res = minimize(neg, res.x, method="BFGS", options={"gtol": 1e-10})
        if best is None or res.fun < best.fun:
            best = res
    assert best is not None
    gam = _gamma(best.x)
    s2, ll = _profiled(ds, gam, reml)
    a, b, _, _, bs = slope_pieces(ds, gam)
    beta = np.linalg.solve(a, b)
    blups = np.einsum("kij,kj->ki", bs, ds.xz - ds.xx @ beta)
    return SlopeFit(s2, s2 * gam, ll, beta, s2 * np.linalg.inv(a), blups, s2 * bs)


def reml_at(ds: RunDesignSums, s2: float, d: np.ndarray) -> float:
    """REML log-likelihood at σ_w² and D (working basis), not profiled."""
    a, b, zz, logdet_h, _ = slope_pieces(ds, d / s2)
    n, p = ds.total, 2
    q = zz - float(b @ np.linalg.solve(a, b))
    return -0.5 * ((n - p) * math.log(s2) + logdet_h + np.linalg.slogdet(a)[1] + q / s2 + (n - p) * math.log(2 * math.pi))


def _theta_cov(ds: RunDesignSums, s2: float, d: np.ndarray) -> np.ndarray:
    """Inverse observed REML information of θ = (σ_w², D₀₀, D₀₁, D₁₁) by central differences."""
    theta = np.array([s2, d[0, 0], d[0, 1], d[1, 1]])
    scale = np.array([s2, d[0, 0], math.sqrt(abs(d[0, 0] * d[1, 1])), d[1, 1]])
    h = 1e-4 * np.maximum(np.abs(scale), 1e-3 * s2)

    def ll(t: np.ndarray) -> float:
        return reml_at(ds, float(t[0]), np.array([[t[1], t[2]], [t[2], t[3]]]))

    hess = np.empty((4, 4))
    for i in range(4):
        for j in range(4):
            ei, ej = np.eye(4)[i] * h[i], np.eye(4)[j] * h[j]
            hess[i, j] = (ll(theta + ei + ej) - ll(theta + ei - ej) - ll(theta - ei + ej)
                          + ll(theta - ei - ej)) / (4 * h[i] * h[j])
    return np.linalg.pinv(-hess)


@dataclass(frozen=True, slots=True)
class SlopeParts:
    """Random intercept and slope of the straight line, in the raw basis (intercept at x = 0, slope per unit x)."""

    d: np.ndarray
    """Covariance of the run's (intercept, slope) offsets."""
    theta_cov: np.ndarray
    """Asymptotic covariance of (σ_w², D₀₀, D₀₁, D₁₁) (inverse REML information)."""
    blups: np.ndarray
    """Each run's (intercept, slope) offset."""
    pev: np.ndarray
    """Prediction error covariance of each run's offsets."""

    @property
    def slope_sd(self) -> float:
        """SD of the runs' slopes."""
        return math.sqrt(max(float(self.d[1, 1]), 0.0))

    @property
    def correlation(self) -> float | None:
        """Correlation of a run's intercept and slope offsets (None when either SD is 0)."""
        den = math.sqrt(max(float(self.d[0, 0] * self.d[1, 1]), 0.0))
        return float(self.d[0, 1]) / den if den > 0 else None


def slope_parts(ds: RunDesignSums, fit: SlopeFit, to_raw: np.ndarray) -> SlopeParts:
    """The REML slope fit in the raw basis (D and PEV transform as T·D·T′, BLUPs as T·u)."""
    t = to_raw[:2, :2]
    w = _theta_cov(ds, fit.s2, fit.d)
    jac = np.zeros((4, 4))
    jac[0, 0] = 1.0
    for j, (a, b) in enumerate(((0, 0), (0, 1), (1, 1))):
        unit = np.zeros((2, 2))
        unit[a, b] = unit[b, a] = 1.0
        raw = t @ unit @ t.T
        jac[1:, j + 1] = [raw[0, 0], raw[0, 1], raw[1, 1]]
    return SlopeParts(t @ fit.d @ t.T, jac @ w @ jac.T, fit.blups @ t.T,
                      np.einsum("ij,kjl,ml->kim", t, fit.pev, t))
