"""Ready-to-draw views of engine results for user interfaces (no UI imports).

The terminal app formats these and never does arithmetic on the data itself: column
summaries and replicate previews for choosing columns, the sum-of-squares split of any
node, and thinned point sets for terminal charts. pandas is imported lazily, as in
``engine.data``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from .results import AnovaRow

if TYPE_CHECKING:
    import pandas as pd

    from .scoring import NodeScore
    from .study import Study

__all__ = [
    "ColumnSummary",
    "ReplicatePreview",
    "describe_columns",
    "replicate_preview",
    "node_anova",
    "ResidualChart",
    "CurveChart",
    "residual_chart",
    "curve_chart",
    "thin_indices",
]

MAX_CHART_POINTS = 2000
"""Terminal charts have a few thousand cells; more points only cost drawing time."""


# ----- choosing columns ---------------------------------------------------------------

@dataclass(frozen=True, slots=True)
class ColumnSummary:
    """One column of a table, as seen before any column is chosen."""

    name: str
    """Column name as in the file."""
    kind: str
    """'numeric' (every non-missing value parses as a number) or 'text'."""
    distinct: int
    """Distinct non-missing values."""
    missing: int
    """Missing or blank cells."""
    non_numeric: int
    """Non-missing cells that are not numbers (0 for 'text' columns by convention)."""


@dataclass(frozen=True, slots=True)
class ReplicatePreview:
    """How a candidate predictor groups the rows into replicated settings."""

    column: str
    """The candidate predictor."""
    rows: int
    """Rows with a usable (numeric, finite) value."""
    levels: int
    """Distinct settings."""
    replicated_levels: int
    """Settings measured more than once."""
    min_replicates: int
    """Fewest rows at one setting (0 when there are no usable rows)."""
    max_replicates: int
    """Most rows at one setting."""
    counts: tuple[tuple[float, int], ...]
    """(setting, rows) for the first ``max_levels`` settings in increasing order."""
    more_levels: int
    """Settings not listed in ``counts``."""
    testable: bool
    """True when at least one setting is replicated and there are ≥ 3 settings."""
    note: str
    """The structure in words (what it allows)."""


def describe_columns(frame: pd.DataFrame) -> tuple[ColumnSummary, ...]:
    """Type, distinct values and missing count of every column (one pass per column)."""
    from .data import numeric_column

    out = []
    for name in frame.columns:
        series = frame[name]
        arr, missing, non_num, _ = numeric_column(series, str(name))
        n_missing = int(missing.sum())
        n_bad = int(non_num.sum())
        usable = len(series) - n_missing
        if usable > 0 and n_bad == 0:
            kind = "numeric"
            vals = arr[~missing]
            distinct = int(np.unique(vals[np.isfinite(vals)]).size + (~np.isfinite(vals)).any())
        else:
            kind = "text"
            distinct = int(series[~missing].astype("string").str.strip().nunique())
            n_bad = 0
        out.append(ColumnSummary(str(name), kind, distinct, n_missing, n_bad))
    return tuple(out)


def replicate_preview(frame: pd.DataFrame, column: str, max_levels: int = 12) -> ReplicatePreview:
    """Levels of ``column`` and the rows at each, to see whether pure error exists."""
    from .data import numeric_column

    arr, *_ = numeric_column(frame[column], column)
    vals = arr[np.isfinite(arr)]
    if vals.size == 0:
        return ReplicatePreview(column, 0, 0, 0, 0, 0, (), 0, False, "no numeric values: cannot be the predictor")
    uniq, counts = np.unique(vals, return_counts=True)
    c = int(uniq.size)
    replicated = int((counts > 1).sum())
    lo, hi = int(counts.min()), int(counts.max())
    shown = tuple((float(u), int(k)) for u, k in zip(uniq[:max_levels], counts[:max_levels], strict=True))
    testable = replicated > 0 and c >= 3
    if c < 2:
        note = "one setting only: a line needs at least 2 settings"
    elif replicated == 0:
        note = "no setting is repeated: the pure-error test cannot run (group with --tolerance, approximate)"
    elif c < 3:
        note = "2 settings: a line fits exactly through the means; nothing is left to test"
    else:
        reps = f"{lo} replicate(s) each" if lo == hi else f"{lo}–{hi} replicates"
        note = (f"{c} settings, {replicated} replicated ({reps}): lack of fit has {c - 2} and pure error "
                f"{int(vals.size) - c} degrees of freedom")
    return ReplicatePreview(column, int(vals.size), c, replicated, lo, hi, shown, max(c - max_levels, 0), testable, note)


# ----- the sum-of-squares split of any node ---------------------------------------------

def node_anova(score: NodeScore) -> tuple[AnovaRow, ...]:
    """model / residual / lack of fit / pure error (or richer-model residual) / total.

    On the node's fitted scale (transformed and weighted as the node is). The lack-of-fit
    rows come from the node's shape-in-x test; for a node without covariates that is the
    classical pure-error split (Kutner et al. 2005 §3.7) and matches ``check`` at the root.
    """
    from .dist import f_sf

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


# ----- charts ---------------------------------------------------------------------------

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
    from .scoring import residuals_by_level

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
    if study.has_rows:
        idx = thin_indices(study.n, max_points)
        px, py = study.x[idx], study.y[idx]
    else:  # rows read through the SQL engine: a seeded random sample of them
        rows = study.sample_rows(max_points)  # type: ignore[attr-defined]
        px, py = rows["x"], rows["y"]
    return CurveChart(px, py, np.asarray(score.level_x, dtype=float),
                      np.asarray(score.level_fitted_y, dtype=float), study.n, note)
