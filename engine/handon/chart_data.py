"""Ready-to-draw chart data of a scored node (numbers only; the app draws them)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from ..stats.results import AnovaRow
from ..stats.rows import Rows

if TYPE_CHECKING:
    from ..stats.study import Study
    from ..tree.scoring import NodeScore

__all__ = ["node_anova", "ResidualChart", "CurveChart", "residual_chart", "curve_chart", "thin_indices", "MAX_CHART_POINTS"]


MAX_CHART_POINTS = 2000
"""Terminal charts have a few thousand cells; more points only cost drawing time."""


def node_anova(score: NodeScore) -> tuple[AnovaRow, ...]:
    """model / residual / lack of fit / pure error (or richer-model residual) / total.

    On the node's fitted scale (transformed and weighted as the node is). The lack-of-fit
    rows come from the node's shape-in-x test; for a node without covariates that is the
    classical pure-error split (Kutner et al. 2005 §3.7) and matches ``check`` at the root.
    """
    from ..stats.dist import f_sf

    fit, lof = score.fit, score.lack_of_fit
    df_model = fit.rank - 1
    ss_model = max(fit.ss_total - fit.sse, 0.0)
    ms_resid = fit.sse / fit.df_resid if fit.df_resid > 0 else None
    f_model = (ss_model / df_model) / ms_resid if ms_resid and df_model > 0 else None
    rows = [
        AnovaRow("model", df_model, ss_model, ss_model / df_model if df_model > 0 else None, f_model,
                 f_sf(f_model, df_model, fit.df_resid) if f_model is not None else None),
        AnovaRow("residual", fit.df_resid, fit.sse, ms_resid, None, None),
    ]
    if lof.testable and lof.df_lack and lof.df_pure:
        pure = "pure error" if "pure error" in lof.kind else "x-as-factor residual"
        rows.append(AnovaRow("lack of fit", lof.df_lack, lof.ss_lack, lof.ss_lack / lof.df_lack, lof.f, lof.p))  # type: ignore[operator, arg-type]
        rows.append(AnovaRow(pure, lof.df_pure, lof.ss_pure, lof.ss_pure / lof.df_pure, None, None))  # type: ignore[operator, arg-type]
    rows.append(AnovaRow("total", fit.df_resid + fit.rank - 1, fit.ss_total, None, None, None))
    return tuple(rows)


def thin_indices(n: int, max_points: int = MAX_CHART_POINTS) -> np.ndarray:
    """Evenly spaced row indices (all rows when there are few): deterministic, no sampling noise."""
    if n <= max_points:
        return np.arange(n)
    return np.unique(np.linspace(0, n - 1, max_points).astype(np.intp))


@dataclass(frozen=True, slots=True, eq=False)
class ResidualChart:
    """Residuals by level: the rows, each level's mean residual and ± its replicate SD."""

    x: np.ndarray
    """x of the drawn rows (thinned)."""
    residual: np.ndarray
    """Their residuals on the fitted scale (√w-weighted)."""
    level_x: np.ndarray
    """x of each level."""
    level_mean: np.ndarray
    """Mean residual per level (the lack-of-fit signal)."""
    level_low: np.ndarray
    """Mean − replicate SD (equal to the mean where a level has one row)."""
    level_high: np.ndarray
    """Mean + replicate SD."""
    rows_total: int
    """Rows in the study (the chart may draw fewer)."""
    scale: str
    """What the residuals are measured on, e.g. 'log y', 'y, weighted'."""


@dataclass(frozen=True, slots=True, eq=False)
class CurveChart:
    """The node's fitted curve on the original y scale over the data."""

    x: np.ndarray
    """x of the drawn rows (thinned)."""
    y: np.ndarray
    """Their y."""
    level_x: np.ndarray
    """x of each level."""
    level_fitted: np.ndarray
    """Fitted y per level (median back-transform; NaN where undefined)."""
    rows_total: int
    """Rows in the study."""
    note: str | None
    """Caveat, e.g. covariates held at reference values."""


def residual_chart(study: Study, score: NodeScore, max_points: int = MAX_CHART_POINTS) -> ResidualChart:
    """Chart data from :func:`engine.scoring.residuals_by_level`, thinned for drawing."""
    from ..tree.residuals import residuals_by_level

    r = residuals_by_level(study, score)
    idx = thin_indices(r.x.size, max_points)
    sd = np.where(np.isfinite(r.level_sd), r.level_sd, 0.0)
    scale = score.spec.response.short(study.y_name)
    if score.spec.weights is not None or study.weights is not None:
        scale += ", weighted"
    return ResidualChart(r.x[idx], r.residual[idx], r.level_x, r.level_mean, r.level_mean - sd, r.level_mean + sd,
                         study.n, scale)


def curve_chart(study: Study, score: NodeScore, max_points: int = MAX_CHART_POINTS) -> CurveChart:
    """Data points and the fitted curve per level, both on the original y scale."""
    note = None
    if score.spec.covariates:
        note = "covariates held at reference values (first category, mean of numeric)"
    every = study.rows()
    if isinstance(every, Rows):
        idx = thin_indices(study.n, max_points)
        px, py = every.x[idx], every.y[idx]
    else:  # rows read through the SQL engine: a seeded random sample of them
        sample = study.row_sample(max_points)
        px, py = sample.x, sample.y
    return CurveChart(px, py, np.asarray(score.level_x, dtype=float),
                      np.asarray(score.level_fitted_y, dtype=float), study.n, note)
