"""Residuals of a scored node grouped by x level, for charts, reports and the smearing sample."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..stats.rows import NoRows
from ..stats.study import Study
from .scoring import NodeScore, _frame, _stats, build_design, predict_terms

__all__ = ["LevelResiduals", "residuals_by_level"]


@dataclass(frozen=True, slots=True, eq=False)
class LevelResiduals:
    """Residuals of a node grouped by x level, for charts (fitted scale, weighted by √w)."""

    x: np.ndarray
    """x of every row."""
    residual: np.ndarray
    """√w·(z − ẑ) of every row."""
    level_x: np.ndarray
    """x of each level."""
    level_mean: np.ndarray
    """Mean residual per level (the lack-of-fit signal)."""
    level_sd: np.ndarray
    """Replicate SD per level (pure-error spread; NaN with one row)."""


def residuals_by_level(study: Study, score: NodeScore, max_rows: int = 100_000) -> LevelResiduals:
    """Row residuals of a scored node (a sample of ``max_rows`` evenly spaced rows when larger).

    A study without rows (the SQL engine) gives the residuals of a seeded random sample of
    ``max_rows`` rows, predicted from the raw terms as ``bendwise apply`` predicts.
    """
    if isinstance(study.rows(), NoRows):
        return _sampled_residuals(study, score, max_rows)
    spec = score.spec
    fr = _frame(study, spec)
    stats = _stats(study, spec, fr)
    design, _ = build_design(study, spec, fr)
    to_raw = design.to_raw.astype(float)
    beta_raw = np.array([0.0 if c.name in score.fit.aliased else c.estimate for c in score.fit.coefficients])
    beta_w = np.linalg.solve(to_raw, beta_raw)
    idx = np.arange(study.n)
    if study.n > max_rows:
        idx = np.linspace(0, study.n - 1, max_rows).astype(np.intp)
    codes, _ = study.group_codes(fr.by)
    cols = []
    for col in design.columns:
        v = col.group[codes[idx]]
        if col.base is not None:
            v = v * fr.bases[idx, col.base]  # type: ignore[index]
        cols.append(v)
    zhat = np.column_stack(cols) @ beta_w
    w = np.ones(idx.size) if fr.w is None else fr.w[idx]
    assert fr.z is not None, "row residuals need the rows"
    e = np.sqrt(w) * (fr.z[idx] - zhat)
    xc = study.x_codes[idx]
    cnt = np.bincount(xc, minlength=study.c).astype(float)
    with np.errstate(all="ignore"):
        mean = np.bincount(xc, weights=e, minlength=study.c) / cnt
        dev = e - mean[xc]
        sd = np.sqrt(np.bincount(xc, weights=dev * dev, minlength=study.c) / (cnt - 1))
    _ = stats
    return LevelResiduals(study.x[idx], e, study.x_level_values.copy(), mean, np.where(cnt > 1, sd, np.nan))


def _sampled_residuals(study: Study, score: NodeScore, k: int) -> LevelResiduals:
    """√w·(z − ẑ) on a seeded random sample of rows read through the SQL engine, by x level."""
    spec = score.spec
    rows = study.row_sample(k)
    beta = np.array([0.0 if c.name in score.fit.aliased else c.estimate for c in score.fit.coefficients])
    t = np.asarray(spec.predictor.forward(rows.x), dtype=float)
    zhat = predict_terms(score.terms, beta, t, rows.covariates)
    z = np.asarray(spec.response.forward(rows.y), dtype=float)
    xc = study.x_codes_for_values(rows.x)  # type: ignore[attr-defined]
    w = np.ones(z.size)
    fr = _frame(study, spec)
    if fr.w_level is not None:
        w = np.asarray(fr.w_level, dtype=float)[xc]
    if rows.weights is not None:  # the user's weights, read with the sample
        w = w * rows.weights
    e = np.sqrt(w) * (z - zhat)
    cnt = np.bincount(xc, minlength=study.c).astype(float)
    with np.errstate(all="ignore"):
        mean = np.bincount(xc, weights=e, minlength=study.c) / cnt
        dev = e - mean[xc]
        sd = np.sqrt(np.bincount(xc, weights=dev * dev, minlength=study.c) / (cnt - 1))
    return LevelResiduals(rows.x, e, study.x_level_values.copy(), mean, np.where(cnt > 1, sd, np.nan))
