"""Runs in a handed-on model: the ``runs`` block of spec.json and predictions for a new or known run.

The spec of a node exported with ``--runs`` keeps its ``fit`` block (the least-squares fit, which
reproduce.py refits) and gains ``runs``: the REML variance parts, the GLS coefficients and their
covariance at the REML estimates, the asymptotic covariance of (σ_w², σ_b²) and each run's BLUP.

A reading from a NEW run has variance x₀′Cx₀ + σ_b² + σ_w²/m (m readings averaged); from a run in
the data (``--run NAME``), its BLUP û is added to the curve and σ_b² is replaced by the prediction
error variance of the offset, σ_b²σ_w²/(σ_w² + n·σ_b²). The t quantile uses Satterthwaite's (1946)
degrees of freedom for the variance part: ν = 2v²/(g′Wg) with v the variance above without x₀′Cx₀,
g its gradient in (σ_w², σ_b²) and W the inverse REML information (Searle, Casella & McCulloch 1992,
ch. 6); the fixed part x₀′Cx₀ enters the interval but not ν (said in the output). The predictions
and Fieller-type sets are then those of ``predict``/``inverse`` with these variances.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import SpecError, UsageError
from .specfile import HandedModel

__all__ = ["runs_block", "HandedRuns", "read_runs", "model_for_run", "DF_METHOD"]

DF_METHOD = ("Satterthwaite (1946) degrees of freedom for the run and reading variance (REML information); the "
             "coefficients' variance is added to the interval but not counted in the df")


def runs_block(tree, node) -> dict[str, Any]:
    """The ``runs`` block of the spec for a tree node grown with runs."""
    from ..tree.runs_node import raw_fixed

    nr = node.runs
    if nr is None:
        raise UsageError(f"node {node.id} has no run model ({node.runs_error}); export another node or drop --runs")
    beta, cov = raw_fixed(tree.study, node.spec, nr)
    lo, hi = nr.between_sd_interval if nr.between_sd_interval is not None else (None, None)
    slopes = {} if nr.slopes is None else {"slopes": {
        "covariance": nr.slopes.d.tolist(), "theta_covariance": nr.slopes.theta_cov.tolist(),
        "blups": nr.slopes.blups.tolist(), "pev": nr.slopes.pev.tolist(),
        "slope_sd": nr.slopes.slope_sd, "correlation": nr.slopes.correlation,
        "note": "each run's (intercept, slope) offsets in the raw basis; between_sd is the intercepts' SD at x = 0"}}
    return {**slopes,
        "column": nr.column, "count": nr.count, "labels": list(tree.runs.labels), "run_sizes": list(nr.run_sizes),
        "between_sd": nr.between_sd, "within_sd": nr.within_sd,
        "between_sd_interval": {"low": lo, "high": hi, "level": 0.95}, "method": nr.method,
        "coefficients": [float(v) for v in beta], "covariance": [[float(v) for v in row] for row in cov],
        "variance_covariance": [[float(v) for v in row] for row in nr.var_cov],
        "blups": [float(v) for v in nr.blups], "df_method": DF_METHOD,
        "lack_of_fit_within_runs": nr.lack_of_fit.as_json(),
    }


@dataclass(frozen=True, slots=True)
class HandedRuns:
    """The ``runs`` block of a spec, checked."""

    column: str
    labels: tuple[str, ...]
    run_sizes: np.ndarray
    between_sd: float
    within_sd: float
    beta: np.ndarray
    cov: np.ndarray
    var_cov: np.ndarray
    blups: np.ndarray
    slope_cov: np.ndarray | None = None
    """With random slopes: covariance D of a run's (intercept, slope) offsets (raw basis)."""
    theta_cov: np.ndarray | None = None
    """With random slopes: covariance of (σ_w², D₀₀, D₀₁, D₁₁)."""
    slope_blups: np.ndarray | None = None
    """With random slopes: each run's (intercept, slope) offsets (k × 2)."""
    pev: np.ndarray | None = None
    """With random slopes: prediction error covariance of each run's offsets (k × 2 × 2)."""


def _nums(v: Any, where: str, count: int | None = None) -> np.ndarray:
    if not isinstance(v, list) or any(isinstance(e, bool) or not isinstance(e, (int, float)) for e in v):
        raise SpecError(f"spec field runs.{where} must be a list of numbers; export the model again")
    out = np.array(v, dtype=float)
    if (count is not None and len(out) != count) or not np.isfinite(out).all():
        raise SpecError(f"spec field runs.{where} must hold {count} finite numbers; export the model again")
    return out


def _matrix(v: Any, where: str, p: int) -> np.ndarray:
    if not isinstance(v, list) or len(v) != p:
        raise SpecError(f"spec field runs.{where} must be {p}×{p}; export the model again")
    return np.vstack([_nums(r, where, p) for r in v])


def read_runs(doc: dict, model: HandedModel) -> HandedRuns | None:
    """The checked ``runs`` block, or None when the spec was exported without runs."""
    block = doc.get("runs")
    if block is None:
        return None
    if not isinstance(block, dict):
        raise SpecError("spec field runs must be an object; export the model again")
    labels = block.get("labels")
    if not isinstance(labels, list) or len(labels) < 2 or not all(isinstance(s, str) for s in labels):
        raise SpecError("spec field runs.labels must list at least 2 run names; export the model again")
    k, p = len(labels), len(model.terms)
    column = block.get("column")
    if not isinstance(column, str):
        raise SpecError("spec field runs.column must be a column name; export the model again")
    sds = _nums([block.get("between_sd"), block.get("within_sd")], "between_sd/within_sd", 2)
    if sds[0] < 0 or sds[1] <= 0:
        raise SpecError("spec fields runs.between_sd ≥ 0 and runs.within_sd > 0 are needed; export the model again")
    base = HandedRuns(column, tuple(labels), _nums(block.get("run_sizes"), "run_sizes", k), float(sds[0]),
                      float(sds[1]), _nums(block.get("coefficients"), "coefficients", p),
                      _matrix(block.get("covariance"), "covariance", p),
                      _matrix(block.get("variance_covariance"), "variance_covariance", 2),
                      _nums(block.get("blups"), "blups", k))
    sl = block.get("slopes")
    if sl is None:
        return base
    if not isinstance(sl, dict) or not model.is_line:
        raise SpecError("spec field runs.slopes must be an object, on a straight line; export the model again")
    pev = sl.get("pev")
    if not isinstance(pev, list) or len(pev) != k:
        raise SpecError(f"spec field runs.slopes.pev must hold {k} 2×2 matrices; export the model again")
    blups = sl.get("blups")
    if not isinstance(blups, list) or len(blups) != k:
        raise SpecError(f"spec field runs.slopes.blups must hold {k} pairs; export the model again")
    return dataclasses.replace(
        base, slope_cov=_matrix(sl.get("covariance"), "slopes.covariance", 2),
        theta_cov=_matrix(sl.get("theta_covariance"), "slopes.theta_covariance", 4),
        slope_blups=np.vstack([_nums(b, "slopes.blups", 2) for b in blups]),
        pev=np.stack([_matrix(m, "slopes.pev", 2) for m in pev]))


def satterthwaite(v_of, s2: float, tau: float, w: np.ndarray) -> float:
    """ν = 2v²/(g′Wg) for v = v_of(σ_w², σ_b²) (gradient by central differences)."""
    h = np.array([1e-6 * s2, 1e-6 * max(tau, s2)])
    g = np.array([(v_of(s2 + h[0], tau) - v_of(s2 - h[0], tau)) / (2 * h[0]),
                  (v_of(s2, tau + h[1]) - v_of(s2, tau - h[1])) / (2 * h[1])])
    var = float(g @ w @ g)
    v = v_of(s2, tau)
    return 2 * v * v / var if var > 0 else math.inf


def _embed(model: HandedModel, cov: np.ndarray, block: np.ndarray) -> np.ndarray:
    """``cov`` plus a 2 × 2 block on the (intercept, slope) terms of a straight line."""
    idx = [next(j for j, t in enumerate(model.terms) if (t.kind, t.power) == key) for key in (("const", 0), ("tpow", 1))]
    out = cov.copy()
    out[np.ix_(idx, idx)] += block
    return out


def _slopes_model(model: HandedModel, runs: HandedRuns, run: str | None, m: float) -> tuple[HandedModel, str]:
    """Random intercept and slope: the run's (intercept, slope) variance joins the coefficients' covariance."""
    assert runs.slope_cov is not None and runs.theta_cov is not None and runs.pev is not None
    s2 = runs.within_sd**2
    beta = runs.beta.copy()
    if run is None:
        xc = (model.x_min + model.x_max) / 2
        z = np.array([1.0, xc])
        v = float(z @ runs.slope_cov @ z) + s2 / m
        g = np.array([1.0 / m, 1.0, 2.0 * xc, xc * xc])
        var = float(g @ runs.theta_cov @ g)
        nu = min(2 * v * v / var if var > 0 else math.inf, float(runs.run_sizes.sum()) - 2)
        cov = _embed(model, runs.cov, runs.slope_cov)
        what = (f"a new {runs.column} (its own intercept and slope; t on {nu:.3g} df, Satterthwaite 1946 at the "
                f"middle of the calibrated range, x = {xc:.4g})")
    else:
        i = _run_index(runs, run)
        assert runs.slope_blups is not None
        idx = [next(j for j, t in enumerate(model.terms) if (t.kind, t.power) == key) for key in (("const", 0), ("tpow", 1))]
        beta[idx] += runs.slope_blups[i]
        cov = _embed(model, runs.cov, runs.pev[i])
        nu = float(runs.run_sizes.sum()) - 2 * len(runs.labels)
        what = f"{runs.column} {run!r} (its own intercept and slope offsets; t on the within-run {nu:.0f} df)"
    out = dataclasses.replace(model, beta=beta, cov=cov, sigma=math.sqrt(s2), df_resid=nu)  # type: ignore[arg-type]
    return out, f"intervals for a reading from {what}"


def _run_index(runs: HandedRuns, run: str) -> int:
    if run not in runs.labels:
        shown = ", ".join(repr(s) for s in runs.labels[:8])
        raise UsageError(f"--run {run!r} is not a {runs.column} of the calibration ({shown}); "
                         "leave --run out for a new one")
    return runs.labels.index(run)


def model_for_run(model: HandedModel, runs: HandedRuns, run: str | None, replicates: int) -> tuple[HandedModel, str]:
    """The model ``predict``/``inverse`` use for a reading from a new run (``run`` None) or a known run.

    Returns it and one line saying what the intervals include. ``sigma`` is set so that σ²/m is the
    reading's variance for m = ``replicates``; ``df_resid`` is Satterthwaite's ν.
    """
    s2, tau, m = runs.within_sd**2, runs.between_sd**2, float(replicates)
    if runs.slope_cov is not None:
        return _slopes_model(model, runs, run, m)
    beta = runs.beta.copy()
    if run is None:
        def v_of(a: float, b: float) -> float:
            return b + a / m
        what = f"a new {runs.column} (between-run SD {runs.between_sd:.4g} included)"
    else:
        i = _run_index(runs, run)
        n_i = float(runs.run_sizes[i])
        const = [j for j, t in enumerate(model.terms) if t.kind == "const"]
        if not const:
            raise UsageError("--run needs a model with an intercept")
        beta[const[0]] += float(runs.blups[i])

        def v_of(a: float, b: float) -> float:
            return a * b / (a + n_i * b) + a / m
        what = f"{runs.column} {run!r} (its own offset, BLUP {float(runs.blups[i]):.4g})"
    v = v_of(s2, tau)
    nu = satterthwaite(v_of, s2, tau, runs.var_cov)
    nu = min(nu, float(runs.run_sizes.sum()) - len(beta))
    out = dataclasses.replace(model, beta=beta, cov=runs.cov, sigma=math.sqrt(v * m), df_resid=nu)  # type: ignore[arg-type]
    return out, (f"intervals for a reading from {what}; t on {nu:.3g} df (Satterthwaite 1946; the coefficients' "
                 "variance is in the interval, not in the df)")
