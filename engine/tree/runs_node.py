"""Runs (days, batches) through the remedy tree: every node refitted with a random run intercept.

For a node with transformed response z and design X (its own mean structure), the model is
z = Xβ + u_run + e with u ~ N(0, σ_b²), e ~ N(0, σ_w²). Within one run V = σ_w²(I + γJ) with
γ = σ_b²/σ_w², and V⁻¹ = (I − c J)/σ_w² with c = γ/(1 + nγ). So X'V⁻¹X, X'V⁻¹z and z'V⁻¹z need
only per-run sums: the count n, the column sums s = X'1, X'X, X'z, Σz and z'z. σ_w² is profiled
out in closed form and the likelihood is maximised over γ ≥ 0 (a grid over log γ, then Brent,
then the boundary γ = 0 compared), for REML (the reported SDs) and for ML (the criteria: AIC,
AICc and BIC compare models with different mean structures only under ML; the Jacobian of the
response transform is added as for every node). The interval for σ_b is the profile REML
likelihood interval (χ²₁ cut-off, σ_w profiled out).

Lack of fit within runs: the node's model plus one offset per run, against runs plus one mean
per setting of the node's predictor variables (x level and the node's covariates), with pure error
within run × setting cells; the classical within-run test, run by rows (``--runs`` reads the table
in memory).

Sources: Searle, Casella & McCulloch (1992) ch. 6 (ML and REML for variance components);
Pawitan (2001) ch. 2 (profile-likelihood intervals); Kutner et al. (2005) ch. 21 (blocks).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from ..checks.results import LackOfFit
from ..checks.runs import INTERVAL_LEVEL, RunFactor, sd_interval_ends
from ..errors import UsageError
from ..stats.dist import f_sf
from ..stats.results import Criteria, criteria_from

if TYPE_CHECKING:
    from .runs_slopes import SlopeParts

__all__ = ["NodeRuns", "RunDesignSums", "design_sums", "profile_fit", "fit_runs", "within_run_lof", "node_runs", "node_rows", "score_runs", "apply_runs", "raw_fixed", "gls_at", "variance_cov"]

CRITERIA_NOTE = ("criteria from the ML log-likelihood of the random-intercept model (original y scale, Jacobian "
                 "added); the SDs are REML")


@dataclass(frozen=True, slots=True)
class RunDesignSums:
    """Per-run sufficient statistics of a design X and response z."""

    n: np.ndarray
    s: np.ndarray
    """Column sums X'1 per run (k × p)."""
    xx: np.ndarray
    """X'X per run (k × p × p)."""
    xz: np.ndarray
    """X'z per run (k × p)."""
    sz: np.ndarray
    zz: np.ndarray

    @property
    def total(self) -> int:
        """Rows."""
        return int(self.n.sum())


def design_sums(x: np.ndarray, z: np.ndarray, codes: np.ndarray, k: int) -> RunDesignSums:
    """The per-run sums of ``x`` (rows × p) and ``z`` for run codes 0..k−1."""
    onehot = (codes[:, None] == np.arange(k)[None, :]).astype(float)
    n = onehot.sum(axis=0)
    s = onehot.T @ x
    xx = np.einsum("ri,rj,rk->kij", x, x, onehot)
    xz = onehot.T @ (x * z[:, None])
    return RunDesignSums(n, s, xx, xz, onehot.T @ z, onehot.T @ (z * z))


def _pieces(ds: RunDesignSums, g: float) -> tuple[np.ndarray, np.ndarray, float, float]:
    """X'H⁻¹X, X'H⁻¹z, z'H⁻¹z and log|H| for H = I + γJ within each run."""
    c = g / (1.0 + ds.n * g)
    a = ds.xx.sum(axis=0) - np.einsum("k,ki,kj->ij", c, ds.s, ds.s)
    b = ds.xz.sum(axis=0) - (c * ds.sz) @ ds.s
    zz = float(ds.zz.sum() - (c * ds.sz * ds.sz).sum())
    return a, b, zz, float(np.log1p(ds.n * g).sum())


def _profiled(ds: RunDesignSums, g: float, reml: bool) -> tuple[float, float]:
    """(σ_w², log-likelihood) at ratio γ with σ_w² at its maximum (REML or ML)."""
    a, b, zz, logdet_h = _pieces(ds, g)
    p, n = a.shape[0], ds.total
    sol = np.linalg.lstsq(a, b, rcond=None)[0]
    q = max(zz - float(b @ sol), 1e-300)
    m = n - p if reml else n
    s2 = q / m
    ll = -0.5 * (m * (math.log(2 * math.pi * s2) + 1.0) + logdet_h)
    if reml:
        sign, logdet_a = np.linalg.slogdet(a)
        ll -= 0.5 * logdet_a if sign > 0 else math.inf
    return s2, ll


def _slope(ds: RunDesignSums, g: float, reml: bool) -> float:
    """d/dγ of the profiled log-likelihood (analytic, so the root is found without rounding noise).

    With c′ = 1/(1 + nγ)² per run: dA/dγ = −Σ c′ s s′, dq/dγ = −Σ c′ (Σz − s′β)², d log|H|/dγ = Σ n/(1 + nγ).
    """
    a, b, zz, _ = _pieces(ds, g)
    beta = np.linalg.lstsq(a, b, rcond=None)[0]
    q = max(zz - float(b @ beta), 1e-300)
    cp = 1.0 / (1.0 + ds.n * g) ** 2
    r = ds.sz - ds.s @ beta
    dq = -float((cp * r * r).sum())
    m = ds.total - (a.shape[0] if reml else 0)
    out = m * dq / q + float((ds.n / (1.0 + ds.n * g)).sum())
    if reml:
        da = -np.einsum("k,ki,kj->ij", cp, ds.s, ds.s)
        out += float(np.trace(np.linalg.solve(a, da)))
    return -0.5 * out


def profile_fit(ds: RunDesignSums, reml: bool) -> tuple[float, float, float]:
    """(σ_w², σ_b², log-likelihood) at the maximum over γ ≥ 0: a grid over log γ finds the peak's
    neighbourhood, the root of the analytic slope pins it, and the boundary γ = 0 is compared last."""
    from scipy.optimize import brentq

    grid = np.linspace(-25.0, 25.0, 101)
    values = [_profiled(ds, math.exp(t), reml)[1] for t in grid]
    i = int(np.argmax(values))
    g = math.exp(float(grid[i]))
    lo, hi = grid[max(i - 1, 0)], grid[min(i + 1, len(grid) - 1)]
    d_lo, d_hi = _slope(ds, math.exp(lo), reml), _slope(ds, math.exp(hi), reml)
    if d_lo > 0 > d_hi:
        t = brentq(lambda t: _slope(ds, math.exp(t), reml) * math.exp(t), lo, hi, xtol=1e-14, rtol=1e-15)
        g = math.exp(t)
    if _profiled(ds, 0.0, reml)[1] >= _profiled(ds, g, reml)[1]:
        g = 0.0
    s2, ll = _profiled(ds, g, reml)
    return s2, g * s2, ll


def _loglik_at(ds: RunDesignSums, s2: float, tau: float) -> float:
    """REML log-likelihood at given σ_w² and σ_b²."""
    g = tau / s2
    a, b, zz, logdet_h = _pieces(ds, g)
    p, n = a.shape[0], ds.total
    q = zz - float(b @ np.linalg.lstsq(a, b, rcond=None)[0])
    _, logdet_a = np.linalg.slogdet(a / s2)
    return -0.5 * (n * math.log(s2) + logdet_h + logdet_a + q / s2 + (n - p) * math.log(2 * math.pi))


def _best_s2(ds: RunDesignSums, tau: float, s2_hat: float) -> float:
    """REML log-likelihood at σ_b² = τ with σ_w² maximised."""
    from scipy.optimize import minimize_scalar

    res = minimize_scalar(lambda t: -_loglik_at(ds, math.exp(t), tau),
                          bounds=(math.log(s2_hat) - 12, math.log(s2_hat) + 12), method="bounded",
                          options={"xatol": 1e-10})
    return -float(res.fun)


def between_interval(ds: RunDesignSums, s2: float, tau: float) -> tuple[float, float | None]:
    """Profile REML likelihood interval for σ_b (χ²₁ cut-off at ``INTERVAL_LEVEL``)."""
    from scipy.stats import chi2

    top = _loglik_at(ds, s2, tau)
    cut = 0.5 * float(chi2.ppf(INTERVAL_LEVEL, 1))

    def drop(sd: float) -> float:
        return top - _best_s2(ds, sd * sd, s2) - cut

    return sd_interval_ends(drop, math.sqrt(tau), math.sqrt(s2))


@dataclass(frozen=True, slots=True)
class NodeRuns:
    """The runs part of one node's scores."""

    column: str
    count: int
    between_sd: float
    within_sd: float
    between_sd_interval: tuple[float, float | None] | None
    """Profile REML interval for σ_b (None with random slopes)."""
    method: str
    loglik_reml: float
    loglik_ml: float
    """ML log-likelihood on the transformed scale (no Jacobian)."""
    criteria: Criteria
    """AIC/AICc/BIC from the ML log-likelihood on the original y scale."""
    lack_of_fit: LackOfFit
    beta: tuple[float, ...]
    """GLS coefficients at the REML estimates (the node's working basis)."""
    cov: np.ndarray
    """Covariance of ``beta`` at the REML estimates, (X′V⁻¹X)⁻¹ (working basis)."""
    var_cov: np.ndarray
    """Asymptotic covariance of (σ_w², σ_b²): inverse of the observed REML information."""
    run_sizes: tuple[int, ...]
    """Rows in each run."""
    blups: tuple[float, ...]
    """Each run's predicted offset (BLUP) on the node's scale: σ_b²/(σ_w² + nσ_b²) · its residual total."""
    slopes: SlopeParts | None = None
    """With ``--run-slopes`` (straight line only): random intercept and slope, raw basis."""

    def as_json(self) -> dict:
        """``runs`` of a node in ``grow --json``."""
        iv = None
        if self.between_sd_interval is not None:
            lo, hi = self.between_sd_interval
            iv = {"low": lo, "high": hi, "level": INTERVAL_LEVEL,
                  "method": "profile REML likelihood (χ²₁ cut-off, σ_w profiled out)"}
        extra = {} if self.slopes is None else {"slopes": {
            "slope_sd": self.slopes.slope_sd, "correlation": self.slopes.correlation,
            "covariance": [[float(v) for v in row] for row in self.slopes.d],
            "note": "between_sd is the SD of the runs' intercepts at x = 0; random effects in the raw basis"}}
        return {
            "column": self.column, "count": self.count, "between_sd": self.between_sd, "within_sd": self.within_sd,
            "between_sd_interval": iv,
            "method": self.method,
            "criteria": {"aic": self.criteria.aic, "aicc": self.criteria.aicc, "bic": self.criteria.bic,
                         "k": self.criteria.k, "loglik_ml": self.criteria.loglik, "note": CRITERIA_NOTE},
            "lack_of_fit_within_runs": self.lack_of_fit.as_json(),
            **extra,
        }


def fit_runs(x: np.ndarray, z: np.ndarray, runs: RunFactor) -> tuple[RunDesignSums, float, float, float, float]:
    """(sums, σ_w², σ_b² by REML, REML log-likelihood, ML log-likelihood)."""
    ds = design_sums(x, z, runs.codes, runs.count)
    s2, tau, ll_reml = profile_fit(ds, reml=True)
    _, _, ll_ml = profile_fit(ds, reml=False)
    return ds, s2, tau, ll_reml, ll_ml


def _rss_rank(a: np.ndarray, z: np.ndarray) -> tuple[float, int]:
    coef, _, rank, _ = np.linalg.lstsq(a, z, rcond=None)
    r = z - a @ coef
    return float(r @ r), int(rank)


def within_run_lof(x: np.ndarray, z: np.ndarray, run_codes: np.ndarray, k: int, setting: np.ndarray) -> LackOfFit:
    """Lack of fit of ``x`` + run offsets against run + setting means, pure error within run × setting cells.

    ``setting`` codes each row's combination of the node's predictor variables.
    """
    kind = "pure error within run × level cells; runs as blocks (node's scale)"
    run_cols = (run_codes[:, None] == np.arange(k)[None, :]).astype(float)
    _, s_inv = np.unique(setting, return_inverse=True)
    set_cols = (s_inv[:, None] == np.arange(s_inv.max() + 1)[None, :]).astype(float)
    sse_node, r_node = _rss_rank(np.column_stack([run_cols, x]), z)
    sse_add, r_add = _rss_rank(np.column_stack([run_cols, set_cols]), z)
    _, cell = np.unique(run_codes * (s_inv.max() + 1) + s_inv, return_inverse=True)
    m = int(cell.max()) + 1
    means = np.bincount(cell, weights=z) / np.bincount(cell)
    pure = float(((z - means[cell]) ** 2).sum())
    df_pure, df_lack = len(z) - m, r_add - r_node
    scale = max(float(((z - z.mean()) ** 2).sum()), 1e-300)
    if df_lack <= 0:
        return LackOfFit(False, "the node spends as many parameters on its predictors as there are settings: "
                         "nothing left to test within runs", kind)
    if df_pure <= 0 or not pure > 1e-13 * scale:
        return LackOfFit(False, "no setting was repeated within a run (or the repeats agree exactly): pure error "
                         "within runs is needed", kind)
    ss = max(sse_node - sse_add, 0.0)
    f = (ss / df_lack) / (pure / df_pure)
    return LackOfFit(True, None, kind, ss, pure, df_lack, df_pure, f, f_sf(f, df_lack, df_pure))


def node_runs(x: np.ndarray, z: np.ndarray, jac: float, runs: RunFactor, setting: np.ndarray,
              extra_params: int, interval: bool = True) -> NodeRuns:
    """Everything ``--runs`` adds to one node: REML SDs with interval, ML criteria, within-run lack of fit."""
    ds, s2, tau, ll_reml, ll_ml = fit_runs(x, z, runs)
    beta, cov, blups = gls_at(ds, s2, tau)
    rank = int(np.linalg.matrix_rank(ds.xx.sum(axis=0)))
    crit = criteria_from(ll_ml + jac, rank + 2 + extra_params, ds.total)
    if rank < x.shape[1]:
        raise UsageError("the node's terms are collinear: its run model cannot be fitted in full")
    return NodeRuns(
        column=runs.name, count=runs.count, between_sd=math.sqrt(tau), within_sd=math.sqrt(s2),
        between_sd_interval=between_interval(ds, s2, tau) if interval else None,
        method="REML random run intercept, maximised from per-run sums of the node's design",
        loglik_reml=ll_reml, loglik_ml=ll_ml, criteria=crit,
        lack_of_fit=within_run_lof(x, z, runs.codes, runs.count, setting),
        beta=tuple(float(v) for v in beta), cov=cov, var_cov=variance_cov(ds, s2, tau),
        run_sizes=tuple(int(v) for v in ds.n), blups=tuple(float(v) for v in blups),
    )


def gls_at(ds: RunDesignSums, s2: float, tau: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """GLS coefficients, their covariance (X′V⁻¹X)⁻¹ and each run's BLUP at σ_w² and σ_b²."""
    a, b, _, _ = _pieces(ds, tau / s2)
    beta = np.linalg.lstsq(a, b, rcond=None)[0]
    blups = tau / (s2 + ds.n * tau) * (ds.sz - ds.s @ beta)
    return beta, s2 * np.linalg.pinv(a), blups


def variance_cov(ds: RunDesignSums, s2: float, tau: float) -> np.ndarray:
    """Inverse of the observed REML information of (σ_w², σ_b²) by central differences."""
    h = np.array([1e-4 * s2, 1e-4 * max(tau, 1e-2 * s2)])
    theta = np.array([s2, tau])

    def ll(v: np.ndarray) -> float:
        return _loglik_at(ds, float(v[0]), float(v[1]))

    hess = np.empty((2, 2))
    for i in range(2):
        for j in range(2):
            ei, ej = np.eye(2)[i] * h[i], np.eye(2)[j] * h[j]
            hess[i, j] = (ll(theta + ei + ej) - ll(theta + ei - ej) - ll(theta - ei + ej)
                          + ll(theta - ei - ej)) / (4 * h[i] * h[j])
    return np.linalg.pinv(-hess)


def raw_fixed(study, spec, nr: NodeRuns) -> tuple[np.ndarray, np.ndarray]:
    """The run model's coefficients and their covariance in the node's raw basis (as the spec stores them)."""
    from .scoring import build_design, model_frame

    design, _ = build_design(study, spec, model_frame(study, spec))
    to_raw = design.to_raw.astype(float)
    return to_raw @ np.asarray(nr.beta), to_raw @ nr.cov @ to_raw.T


def node_rows(study, spec) -> tuple[np.ndarray, np.ndarray, float]:
    """(row design in the node's working basis, transformed response, log-Jacobian) of ``spec``."""
    from .scoring import _row_design, build_design, model_frame

    fr = model_frame(study, spec)
    design, _ = build_design(study, spec, fr)
    return _row_design(study, design, fr), np.asarray(fr.z, dtype=float), float(fr.jac)


def score_runs(study, spec, runs: RunFactor, slopes: bool = False) -> NodeRuns:
    """``node_runs`` for a node of the tree (``slopes``: random slopes too, straight line only);
    refuses weighted nodes, and random slopes on other nodes, with one line."""
    from .model_spec import ModelSpec

    if spec.weights is not None:
        raise UsageError("power-of-mean weights and a random run intercept are not fitted together; "
                         "the run model is unweighted")
    if slopes and spec != ModelSpec():
        raise UsageError("--run-slopes: random run slopes are fitted for the straight line only; drop "
                         "--run-slopes to compare this node")
    x, z, jac = node_rows(study, spec)
    setting, _ = study.group_codes(tuple(spec.covariates))
    out = node_runs(x, z, jac, runs, np.asarray(setting), spec.extra_params, interval=not slopes)
    return with_slopes(study, spec, out, x, z, jac, runs) if slopes else out


def with_slopes(study, spec, base: NodeRuns, x: np.ndarray, z: np.ndarray, jac: float, runs: RunFactor) -> NodeRuns:
    """The straight line's run model with random intercept AND slope (engine.tree.runs_slopes)."""
    import dataclasses

    from .runs_slopes import fit_slopes, slope_parts
    from .scoring import build_design, model_frame

    ds = design_sums(x, z, runs.codes, runs.count)
    start = (base.between_sd / base.within_sd) ** 2
    reml, ml = fit_slopes(ds, True, start), fit_slopes(ds, False, start)
    to_raw = build_design(study, spec, model_frame(study, spec))[0].to_raw.astype(float)
    parts = slope_parts(ds, reml, to_raw)
    crit = criteria_from(ml.loglik + jac, x.shape[1] + 4 + spec.extra_params, ds.total)
    return dataclasses.replace(
        base, between_sd=math.sqrt(max(float(parts.d[0, 0]), 0.0)), within_sd=math.sqrt(reml.s2),
        between_sd_interval=None, loglik_reml=reml.loglik, loglik_ml=ml.loglik, criteria=crit,
        method="REML random run intercept and slope (straight line), maximised from per-run sums",
        beta=tuple(float(v) for v in reml.beta), cov=reml.cov, blups=tuple(float(v) for v in parts.blups[:, 0]),
        slopes=parts)


def apply_runs(study, node, runs: RunFactor, slopes: bool = False) -> None:
    """Attach the run model to a scored tree node: its within-run lack of fit becomes the node's
    lack-of-fit test and its ML criteria the node's criteria (like with like across nodes); a node
    whose run model cannot be fitted keeps no criteria, so it is never ranked against the others."""
    import dataclasses

    from ..errors import BendwiseError

    s = node.score
    try:
        node.runs = score_runs(study, node.spec, runs, slopes)
    except BendwiseError as exc:
        node.runs_error = str(exc)
        crit = Criteria(math.nan, s.criteria.k, s.criteria.n, None, None, None)
        node.score = dataclasses.replace(s, criteria=crit, warnings=(*s.warnings, f"no run model: {exc}"))
        return
    node.score = dataclasses.replace(s, criteria=node.runs.criteria, lack_of_fit=node.runs.lack_of_fit)
