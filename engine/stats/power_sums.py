"""Per-group power sums of ln y, and the moments of every power transform they imply.

For y > 0, y^λ = e^{λ ln y}. With d = ln y − c (c near the group's centre), the sums Σd^k
(k ≤ M) and Σd^k·t (k ≤ K) of one pass over the rows give, for any λ, the group mean,
variance and covariances of y^λ (so of y, √y, 1/y, log y and every Box–Cox λ) as series
in λ, with a bound on the truncation error from the group's largest |d|. The SQL engine
collects the sums in one GROUP BY; the in-memory engine uses them for the Box–Cox grid of
large tables. Pure numpy.
"""

from __future__ import annotations

import math

import numpy as np

from .transforms import Transform

__all__ = ["GroupSeries", "choose_orders", "series_helps", "SERIES_TOL", "GRID_TOL", "GRID_END"]

GRID_END = 3.0
"""|λ| at the ends of the Box–Cox grid the tree profiles."""
SERIES_TOL = 1e-10
"""Largest truncation error of the series, relative to the within-group spread (node statistics)."""
GRID_TOL = 1e-7
"""The same for Box–Cox profile grid points (they only locate λ̂; the chosen λ is held to SERIES_TOL)."""
SERIES_ORDERS = (6, 8, 10, 12, 14, 16)
"""Candidate orders M of the power sums Σd^k (even); K, the order of Σd^k·t, goes up to 12."""
SERIES_K_MAX = 12
_LAMBDA_DESIGN = 1.0
"""|λ| the order is sized for: y, √y, 1/y (log y is exact at any order); a Box–Cox λ far beyond
may need an exact scan of its own."""


def _tail(log_r: float | np.ndarray, log_d: np.ndarray, start: int, shift: int, terms: int = 60) -> np.ndarray:
    """Σ_{k=start}^{start+terms} r^k D^(k−shift) / k!, per unit (0 where D = 0)."""
    ks = np.arange(start, start + terms, dtype=float)
    lg = np.array([math.lgamma(k + 1.0) for k in ks])
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        e = ks[None, :] * log_r + (ks[None, :] - shift) * log_d[:, None] - lg[None, :]
        out = np.exp(e).sum(axis=1)
    return np.where(np.isfinite(log_d), out, 0.0)


class GroupSeries:
    """Per-group power sums of d = ln y − c (c: the group's centre) and their use.

    For any power λ, e^{λ ln y} = e^{λ(c+a)} e^{λδ} with δ = d − a, a the group mean of d, and
    E e^{λδ} = Σ λ^k μ_k / k!, Var e^{λδ} = Σ_{j,k≥1} λ^{j+k}(μ_{j+k} − μ_j μ_k)/(j! k!),
    Cov(e^{λδ}, t) = Σ_{k≥1} λ^k Cov(δ^k, t)/k!, with μ_k the central moments of d. The series
    are truncated at order M (K for the covariances); the truncation error is bounded with
    D = max |δ| in the group (from its smallest and largest y): E|δ|^k ≤ D^(k−M) μ_M for k > M.
    Each d also carries the rounding of LN(y) (about ε·|ln y|), which matters when the spread
    of ln y is tiny beside its size (a large offset). A transform whose bound or rounding
    exceeds the tolerance in any group is scanned exactly instead.
    """

    def __init__(self, n: np.ndarray, centre: np.ndarray, s: np.ndarray, cross: np.ndarray, tsum: np.ndarray,
                 tt: np.ndarray, ylo: np.ndarray, yhi: np.ndarray, t_ref: np.ndarray) -> None:
        u, big_m = s.shape
        j_, big_k = cross.shape[1], cross.shape[2]
        self.M, self.K = big_m, big_k
        self.n = n
        m = np.ones((u, big_m + 1))
        m[:, 1:] = s / n[:, None]
        a = m[:, 1].copy()
        mu = np.zeros_like(m)
        for k in range(big_m + 1):
            mu[:, k] = sum(math.comb(k, i) * m[:, i] * (-a) ** (k - i) for i in range(k + 1))
        mu[:, 0], mu[:, 1] = 1.0, 0.0
        self.mu = mu
        raw = np.zeros((u, j_, max(big_k, 1) + 1))  # E[d^i t′]
        raw[:, :, 0] = tsum / n[:, None]
        raw[:, :, 1: big_k + 1] = cross / n[:, None, None]
        ct = np.zeros((u, j_, max(big_k, 1) + 1))  # Cov(δ^k, t′)
        for k in range(1, big_k + 1):
            ek = sum(math.comb(k, i) * raw[:, :, i] * ((-a) ** (k - i))[:, None] for i in range(k + 1))
            ct[:, :, k] = ek - mu[:, k][:, None] * raw[:, :, 0]
        self.ct = ct
        self.bmean = tsum / n[:, None] + t_ref[None, :]
        self.bb = tt - tsum[:, :, None] * tsum[:, None, :] / n[:, None, None]
        self.sig_t = np.sqrt(np.maximum(np.diagonal(self.bb, axis1=1, axis2=2), 0.0) / n[:, None])
        self.base = centre + a
        with np.errstate(divide="ignore"):
            dev = np.maximum(np.log(yhi) - self.base, self.base - np.log(ylo))
        self.D = np.maximum(dev, 0.0)
        self.log_d = np.log(self.D, where=self.D > 0, out=np.full(u, -np.inf))
        # the centre must lie within the group's own range, or rounding in Σd^k is amplified
        self.centred = np.abs(a) <= self.D
        self.ylo, self.yhi = ylo, yhi

    def var_bound(self, lam: float) -> float:
        """Largest relative truncation error of the variance over groups (for reports/tests)."""
        return float(np.max(self._checks(lam, 0.0, details=True)[0]))

    def _checks(self, lam: float, tol: float, details: bool = False):
        r = abs(lam)
        big_m, big_k = self.M, self.K
        f = np.array([lam**k / math.factorial(k) for k in range(big_m + 1)])
        mu = self.mu
        var_e = np.zeros(mu.shape[0])
        for k in range(1, big_m):
            for j in range(1, big_m - k + 1):
                var_e += f[k] * f[j] * (mu[:, k + j] - mu[:, k] * mu[:, j])
        phi1 = mu[:, 2:] @ f[2:]
        cov_e = np.einsum("ujk,k->uj", self.ct[:, :, 1: big_k + 1], f[1: big_k + 1])
        mu_m = mu[:, big_m]
        log_r = math.log(r)
        tail_phi = mu_m * _tail(log_r, self.log_d, big_m + 1, big_m)
        tail_var = 2.0 * mu_m * _tail(math.log(2 * r), self.log_d, big_m + 1, big_m)
        # Cov tail: Σ_{k>K} r^k/k! sqrt(E δ^{2k}); E δ^{2k} = μ_2k while 2k ≤ M, else D^(2k−M) μ_M
        tail_cov = np.zeros(mu.shape[0])
        for k in range(big_k + 1, big_k + 61):
            with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
                e2k = mu[:, 2 * k] if 2 * k <= big_m else np.exp((2 * k - big_m) * self.log_d) * mu_m
                tail_cov += np.exp(k * log_r - math.lgamma(k + 1.0)) * np.sqrt(np.maximum(e2k, 0.0))
        sd = np.sqrt(np.maximum(var_e, 0.0))
        if details:
            with np.errstate(divide="ignore", invalid="ignore"):
                rel = np.where(var_e > 0, tail_var / var_e, np.where(tail_var > 0, np.inf, 0.0))
            return rel, phi1, var_e, cov_e
        flat = self.D == 0
        ok = flat | ((var_e > 0) & (tail_var <= tol * var_e) & (tail_phi <= tol * sd) & (2 * r * self.D <= 30.0))
        if self.ct.shape[1]:
            ok &= flat | (tail_cov <= tol * sd)
        ok &= flat | self.centred
        # each d carries the rounding of LN(y), about ε·|ln y|: relative to the spread of d
        ok &= flat | (2.2e-16 * (np.abs(self.base) + self.D) <= tol * np.sqrt(np.maximum(mu[:, 2], 0.0)))
        return bool(ok.all()), phi1, var_e, cov_e

    def moments(self, t: Transform, tol: float) -> dict | None:
        """Group moments of g(y) in the form of ``SqlStudy._scan``, or None when not exact enough."""
        k = t.kind
        lam: float
        if k == "log" or (k == "boxcox" and float(t.param) == 0.0):  # type: ignore[arg-type]
            mean = self.base.copy()
            var = self.mu[:, 2].copy()
            cov = self.ct[:, :, 1].copy()
        else:
            if k == "identity":
                lam = 1.0
            elif k == "sqrt":
                lam = 0.5
            elif k == "reciprocal":
                lam = -1.0
            elif k == "boxcox":
                lam = float(t.param)  # type: ignore[arg-type]
            else:
                return None
            ok, phi1, var_e, cov_e = self._checks(lam, tol)
            if not ok:
                return None
            if k == "boxcox":
                mean = np.expm1(lam * self.base + np.log1p(phi1)) / lam
                scale = np.exp(lam * self.base) / lam
            else:
                scale = np.exp(lam * self.base)
                mean = scale * (1.0 + phi1)
            var = scale**2 * var_e
            cov = scale[:, None] * cov_e
        lo = np.asarray(t.forward(self.ylo), dtype=float)
        hi = np.asarray(t.forward(self.yhi), dtype=float)
        if k == "reciprocal":
            lo, hi = hi, lo
        return {"mean": mean, "ss": self.n * var, "zb": self.n[:, None] * cov, "lo": lo, "hi": hi,
                "bmean": self.bmean, "bb": self.bb}


class _NormalBounds:
    """The truncation bounds GroupSeries checks, for a normal-like group of log-scale standard
    deviation ``sd`` whose largest deviation is ``spread`` (used to size the query before a scan)."""

    def __init__(self, sd: float, spread: float) -> None:
        self.sd, self.log_d = sd, math.log(spread)

    def log_moment(self, m: int) -> float:  # log E δ^m (m even)
        return sum(math.log(v) for v in range(m - 1, 0, -2)) + m * math.log(self.sd)

    def var_ok(self, big_m: int, r: float, tol: float) -> bool:
        tail = 2 * math.exp(self.log_moment(big_m)) * float(
            _tail(math.log(2 * r), np.array([self.log_d]), big_m + 1, big_m)[0])
        return tail <= tol * r * r * self.sd * self.sd

    def cov_ok(self, big_m: int, big_k: int, r: float, tol: float) -> bool:
        tail = 0.0
        for k in range(big_k + 1, big_k + 61):
            log_e = (self.log_moment(2 * k) if 2 * k <= big_m
                     else (2 * k - big_m) * self.log_d + self.log_moment(big_m))
            tail += math.exp(k * math.log(r) - math.lgamma(k + 1.0) + 0.5 * log_e)
        return tail <= tol * r * self.sd


def series_helps(sd: float, spread: float, covariates: int = 1) -> bool:
    """Whether the largest orders can hold y, √y and 1/y (|λ| = _LAMBDA_DESIGN) to SERIES_TOL for
    groups of this spread; if not, a scan of power sums would be wasted on them."""
    if not (sd > 0 and spread > 0):
        return True
    b, r = _NormalBounds(sd, spread), _LAMBDA_DESIGN
    big_m, big_k = SERIES_ORDERS[-1], SERIES_K_MAX
    return b.var_ok(big_m, r, SERIES_TOL) and (not covariates or b.cov_ok(big_m, big_k, r, SERIES_TOL))


def choose_orders(sd: float, spread: float, covariates: int = 1) -> tuple[int, int]:
    """Series orders (M, K) for groups whose ln y has standard deviation ``sd`` and largest
    deviation ``spread`` from the centre: the cheapest (fewest sums) whose bounds, as the exact
    check computes them after the scan (normal-like moments, extremes at ``spread``), meet a tenth
    of SERIES_TOL at |λ| = _LAMBDA_DESIGN and of GRID_TOL at the Box–Cox grid's ends (±3). The
    check after the scan decides; this sizes the query."""
    if not (sd > 0 and spread > 0):
        return SERIES_ORDERS[0], SERIES_ORDERS[0] // 2
    b = _NormalBounds(sd, spread)
    targets = ((_LAMBDA_DESIGN, 0.1 * SERIES_TOL), (GRID_END, 0.1 * GRID_TOL))  # design power, grid ends

    def ok(big_m: int, big_k: int | None) -> bool:
        return all(b.var_ok(big_m, r, tol) and (big_k is None or b.cov_ok(big_m, big_k, r, tol))
                   for r, tol in targets)

    best: tuple[int, int, int] | None = None
    for big_m in SERIES_ORDERS:
        if not ok(big_m, None):
            continue
        for big_k in range(3, SERIES_K_MAX + 1):
            if covariates == 0 or ok(big_m, big_k):
                cost = big_m + covariates * big_k
                if best is None or cost < best[0]:
                    best = (cost, big_m, big_k)
                break
    if best is None:
        return SERIES_ORDERS[-1], SERIES_K_MAX
    return best[1], best[2]
