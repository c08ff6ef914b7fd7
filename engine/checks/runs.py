"""Calibrations spread over several runs (days, batches, instruments): the lack-of-fit test
within runs, whether the curve's shape differs between runs, and the between-run and within-run
standard deviations.

Lack of fit within runs. Every model has one offset per run (runs are blocks). The line
y ~ x + run is compared with the additive cell-means model run + level; the denominator is the
pure error within run × level cells (replicates measured in the same run at the same level).
The shape test compares run + level with one mean per run × level cell, against the same pure
error. Both come from cell counts, cell means and within-cell sums of squares: a model whose
columns are constant within cells has SSE = pure error + Σ n_cell (mean_cell − fitted_cell)².
When no cell is replicated, the run × level interaction stands in as the error of the lack-of-fit
test (said in ``kind``) and the shape test cannot run.

Variance components. y = b0 + b1·x + u_run + e with u ~ N(0, σ_b²), e ~ N(0, σ_w²), fitted by
REML. When every run measured the same settings the same number of times, the REML estimates
have a closed form (within-run residual mean square; between-run mean square of run means,
truncated at 0 with the pooled estimate then). Otherwise REML is maximised numerically from
per-run sums (n, Σx, Σy, Σx², Σxy, Σy²), which are sufficient for this model. The interval for
σ_b is the profile REML likelihood interval (σ_w profiled out; χ²₁ cut-off), in either case.

See docs/METHODS.md "Calibrations over several runs". Sources: Kutner, Nachtsheim, Neter & Li (2005) §3.7 and ch. 21; Searle, Casella & McCulloch
(1992) ch. 6 for REML; Pawitan (2001) ch. 2 for profile-likelihood intervals.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from ..errors import DataError, UsageError
from ..read.columns import NA_TEXT, resolve_column
from ..stats.dist import f_sf
from .results import LackOfFit

__all__ = ["RunFactor", "RunsResult", "VarianceParts", "check_runs", "run_factor", "validate_runs_column",
           "reml_loglik", "run_sums", "sd_interval_ends", "MAX_RUNS", "INTERVAL_LEVEL"]

MAX_RUNS = 30
"""More distinct runs than this: the column is refused (an identifier or a measurement?)."""
INTERVAL_LEVEL = 0.95
"""Level of the interval for the between-run SD."""


@dataclass(frozen=True, slots=True)
class RunFactor:
    """The runs column as integer codes 0..k−1 with a label per code."""

    name: str
    codes: np.ndarray
    labels: tuple[str, ...]

    @property
    def count(self) -> int:
        """Number of runs."""
        return len(self.labels)


def validate_runs_column(frame, column: str, y: str, x: str) -> str:
    """Check the runs column on the raw table before cleaning; returns its exact name.

    Refuses (one line each): the response or predictor itself, a column with no values, a single
    run, a numeric column with many distinct values, and more than ``MAX_RUNS`` runs.
    """
    import pandas as pd

    col = resolve_column(frame, column, "runs column")
    for other, role in ((y, "response"), (x, "predictor")):
        if col == resolve_column(frame, other, f"{role} column"):
            raise UsageError(f"runs column {col!r} is the {role}; give the column that names the day, batch or instrument")
    text = frame[col].astype("string").str.strip()
    present = text[~(text.isna() | text.isin(NA_TEXT).fillna(False))]
    if present.empty:
        raise DataError(f"runs column {col!r} has no values (all {len(text)} rows missing); fill it in or choose another column")
    distinct = present.unique()
    k = len(distinct)
    if k < 2:
        raise DataError(
            f"runs column {col!r} names a single run ({str(distinct[0])!r}): between-run variation needs at least "
            "2 runs (3 or more for a useful estimate); drop --runs or add the other runs"
        )
    numeric = bool(pd.to_numeric(present, errors="coerce").notna().all())
    if numeric and (k > MAX_RUNS or 2 * k > len(present)):
        raise DataError(
            f"runs column {col!r} is numeric with {k} distinct values in {len(present)} rows: it looks like a "
            "measurement, not a day, batch or instrument; choose the column that names the runs"
        )
    if k > MAX_RUNS:
        raise DataError(
            f"runs column {col!r} has {k} distinct runs (at most {MAX_RUNS}); is it an identifier? "
            "Choose the column that names the day, batch or instrument"
        )
    return col


def run_factor(study, column: str) -> RunFactor:
    """The runs column of a study (admitted as a covariate) as codes and labels."""
    cov = next((c for c in study.covariates if c.name == column), None)
    if cov is None:
        raise UsageError(f"runs column {column!r} is not part of this analysis; load it with the study")
    if cov.kind == "categorical":
        codes, labels = np.asarray(cov.values, dtype=np.intp), tuple(cov.levels)
    else:
        uniq, codes = np.unique(cov.values, return_inverse=True)
        labels = tuple(f"{v:g}" for v in uniq)
    used = np.unique(codes)
    if len(used) < 2:
        raise DataError(f"runs column {column!r} has a single run in the rows used; between-run variation needs at least 2")
    if len(used) < len(labels):  # a run lost all its rows in cleaning
        remap = np.full(len(labels), -1, dtype=np.intp)
        remap[used] = np.arange(len(used))
        codes, labels = remap[codes], tuple(labels[i] for i in used)
    return RunFactor(column, np.asarray(codes, dtype=np.intp), labels)


# ----- cells: run × level sufficient statistics ------------------------------------------------


@dataclass(frozen=True, slots=True)
class Cells:
    """Occupied run × level cells: their run, level, x, count, mean and within-cell SS."""

    run: np.ndarray
    level: np.ndarray
    x: np.ndarray
    count: np.ndarray
    mean: np.ndarray
    ss: np.ndarray
    k: int
    c: int

    @property
    def n(self) -> int:
        """Rows."""
        return int(self.count.sum())


def cell_stats(y: np.ndarray, level: np.ndarray, level_x: np.ndarray, runs: RunFactor) -> Cells:
    """Counts, means (centred on the overall mean) and within-cell SS of the occupied cells."""
    k, c = runs.count, len(level_x)
    key = runs.codes * c + level
    occupied, inv = np.unique(key, return_inverse=True)
    count = np.bincount(inv).astype(float)
    yc = y - y.mean()
    mean = np.bincount(inv, weights=yc) / count
    ss = np.bincount(inv, weights=(yc - mean[inv]) ** 2)
    lev = occupied % c
    return Cells(occupied // c, lev, np.asarray(level_x, dtype=float)[lev], count, mean, ss, k, c)


def _cells_sse(cells: Cells, design: np.ndarray) -> tuple[float, int]:
    """Weighted SSE of the cell means on ``design`` (rows = cells) and the design's rank."""
    w = np.sqrt(cells.count)
    a = design * w[:, None]
    b = cells.mean * w
    coef, _, rank, _ = np.linalg.lstsq(a, b, rcond=None)
    resid = b - a @ coef
    return float(resid @ resid), int(rank)


def _dummies(codes: np.ndarray, k: int, drop_first: bool = False) -> np.ndarray:
    out = (codes[:, None] == np.arange(k)[None, :]).astype(float)
    return out[:, 1:] if drop_first else out


def _connected(cells: Cells) -> list[set[int]]:
    """Groups of runs linked through shared levels (one group when runs and levels are crossed)."""
    parent = list(range(cells.k + cells.c))

    def find(i: int) -> int:
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    for r, lv in zip(cells.run.tolist(), cells.level.tolist(), strict=True):
        parent[find(r)] = find(cells.k + lv)
    groups: dict[int, set[int]] = {}
    for r in range(cells.k):
        groups.setdefault(find(r), set()).add(r)
    return list(groups.values())


def _require_crossed(cells: Cells, runs: RunFactor, x_name: str) -> None:
    """Refuse designs where the runs cannot be separated from the line or from the levels."""
    levels_per_run = np.bincount(cells.run, minlength=cells.k)
    if int(levels_per_run.max()) < 2:
        raise DataError(
            f"runs column {runs.name!r} is not crossed with {x_name!r}: each run measured a single level, so the "
            "slope cannot be told apart from the run offsets; measure several levels in each run"
        )
    groups = _connected(cells)
    if len(groups) > 1:
        a, b = (runs.labels[min(g)] for g in groups[:2])
        raise DataError(
            f"runs column {runs.name!r} is not crossed with {x_name!r}: runs {a!r} and {b!r} share no level, even "
            "through other runs, so run offsets and level means cannot be separated; measure common levels in every run"
        )


# ----- lack of fit within runs and shape across runs -------------------------------------------


def _f_test(ss_num: float, df_num: int, ss_den: float, df_den: int, kind: str) -> LackOfFit:
    ss_num = max(ss_num, 0.0)
    f = (ss_num / df_num) / (ss_den / df_den)
    return LackOfFit(True, None, kind, ss_num, ss_den, df_num, df_den, f, f_sf(f, df_num, df_den))


def within_run_tests(cells: Cells) -> tuple[LackOfFit, LackOfFit]:
    """Lack of fit of the line with run offsets, and the run × level interaction (shape differs)."""
    run_cols = _dummies(cells.run, cells.k)
    xc = cells.x - float(np.average(cells.x, weights=cells.count))
    sse_line, rank_line = _cells_sse(cells, np.column_stack([run_cols, xc]))
    sse_add, rank_add = _cells_sse(cells, np.column_stack([run_cols, _dummies(cells.level, cells.c, True)]))
    m, n = len(cells.count), cells.n
    pure, df_pure = float(cells.ss.sum()), n - m
    df_lack, df_shape = rank_add - rank_line, m - rank_add
    kind = "pure error within run × level cells; runs as blocks"
    scale = max(float(cells.count @ cells.mean**2) + pure, 1e-300)
    if df_lack <= 0:
        lof = LackOfFit(False, "needs at least 3 levels of x to test the line's shape within runs", kind)
    elif df_pure > 0 and pure > 1e-13 * scale:
        lof = _f_test(sse_line - sse_add, df_lack, pure, df_pure, kind)
    elif df_shape > 0 and sse_add > 1e-13 * scale:
        lof = _f_test(sse_line - sse_add, df_lack, sse_add + pure, df_shape + df_pure,
                      "run × level interaction as error (no level was repeated within a run); runs as blocks")
    else:
        lof = LackOfFit(False, "no level was repeated within a run and the run × level cells leave no residual "
                        "variation: nothing to compare the lack of fit with", kind)
    shape_kind = "run × level interaction against pure error within cells"
    if df_shape <= 0:
        shape = LackOfFit(False, "every run × level cell is needed to fit runs plus levels: no interaction left to test", shape_kind)
    elif df_pure <= 0 or not pure > 1e-13 * scale:
        shape = LackOfFit(False, "no level was repeated within a run (or the repeats agree exactly): pure error is "
                          "needed to test whether the shape differs between runs", shape_kind)
    else:
        shape = _f_test(sse_add, df_shape, pure, df_pure, shape_kind)
    return lof, shape


# ----- variance components by REML ---------------------------------------------------------------


@dataclass(frozen=True, slots=True)
class RunSums:
    """Per-run sums of centred x and y: sufficient statistics of the random-intercept line."""

    n: np.ndarray
    sx: np.ndarray
    sy: np.ndarray
    sxx: np.ndarray
    sxy: np.ndarray
    syy: np.ndarray
    wxx: np.ndarray
    """Σ(x − run mean of x)² in each run (and likewise below): the within-run sums."""
    wxy: np.ndarray
    wyy: np.ndarray
    x_mean: float
    y_mean: float


def run_sums(x: np.ndarray, y: np.ndarray, codes: np.ndarray, k: int) -> RunSums:
    """Per-run sums of x and y centred on their overall means, and within-run sums of squares."""
    xm, ym = float(x.mean()), float(y.mean())
    xc, yc = x - xm, y - ym

    def s(v: np.ndarray | None) -> np.ndarray:
        return np.bincount(codes, weights=v, minlength=k)

    n, sx, sy = s(None), s(xc), s(yc)
    xw, yw = xc - (sx / n)[codes], yc - (sy / n)[codes]
    return RunSums(n, sx, sy, s(xc * xc), s(xc * yc), s(yc * yc), s(xw * xw), s(xw * yw), s(yw * yw), xm, ym)


def _gls_parts(rs: RunSums, sigma2: float, tau: float) -> tuple[np.ndarray, np.ndarray, float, float]:
    """X'V⁻¹X, X'V⁻¹y, y'V⁻¹y and log|V| for V = σ²I + τJ within each run.

    Written as within-run sums / σ² plus run totals / (σ² + n·τ), which has no cancellation when τ ≫ σ².
    """
    d = 1.0 / (sigma2 + rs.n * tau)
    inv = 1.0 / sigma2
    mx, my = rs.sx / rs.n, rs.sy / rs.n
    a01 = float((rs.sx * d).sum())
    a = np.array([[float((rs.n * d).sum()), a01],
                  [a01, inv * float(rs.wxx.sum()) + float((rs.sx * mx * d).sum())]])
    b = np.array([float((rs.sy * d).sum()), inv * float(rs.wxy.sum()) + float((rs.sx * my * d).sum())])
    yy = inv * float(rs.wyy.sum()) + float((rs.sy * my * d).sum())
    logdet = float(((rs.n - 1) * math.log(sigma2)).sum() + np.log(sigma2 + rs.n * tau).sum())
    return a, b, yy, logdet


def reml_loglik(rs: RunSums, sigma2: float, tau: float) -> float:
    """REML log-likelihood of the random-intercept line at within variance σ² and between variance τ."""
    a, b, yy, logdet = _gls_parts(rs, sigma2, tau)
    sign, logdet_a = np.linalg.slogdet(a)
    if sign <= 0:
        return -math.inf
    q = yy - float(b @ np.linalg.solve(a, b))
    n = float(rs.n.sum())
    return -0.5 * (logdet + logdet_a + q + (n - 2) * math.log(2 * math.pi))


def _profile_sigma2(rs: RunSums, tau: float) -> tuple[float, float]:
    """Maximise the REML log-likelihood over σ² at a fixed τ; returns (σ², log-likelihood)."""
    from scipy.optimize import minimize_scalar

    n, k = float(rs.n.sum()), len(rs.n)
    total = float(rs.syy.sum()) / max(n - 2, 1)
    within = _within_sse(rs) / max(n - k - 1, 1)
    # the best σ² lies between a fraction of the within-run mean square (large τ) and the total
    lo, hi = math.log(within * 1e-4 + 1e-300), math.log(max(total, within) * 10 + 1e-300)
    res = minimize_scalar(lambda t: -reml_loglik(rs, math.exp(t), tau), bounds=(lo, hi), method="bounded",
                          options={"xatol": 1e-10})
    return math.exp(res.x), -float(res.fun)


def _reml_numeric(rs: RunSums) -> tuple[float, float]:
    """REML (σ_w², σ_b²) by maximising over the ratio γ = σ_b²/σ_w² (σ_w² profiled analytically)."""
    from scipy.optimize import minimize_scalar

    n = float(rs.n.sum())

    def profiled(g: float) -> tuple[float, float]:
        a, b, yy, _ = _gls_parts(rs, 1.0, g)
        q = yy - float(b @ np.linalg.solve(a, b))
        s2 = q / (n - 2)
        return s2, reml_loglik(rs, s2, g * s2)

    # a grid over log γ finds the peak's neighbourhood; Brent then polishes it; γ = 0 (the boundary)
    # is compared last
    grid = np.linspace(-25.0, 35.0, 121)
    values = [profiled(math.exp(t))[1] for t in grid]
    i = int(np.argmax(values))
    lo, hi = grid[max(i - 1, 0)], grid[min(i + 1, len(grid) - 1)]
    res = minimize_scalar(lambda t: -profiled(math.exp(t))[1], bounds=(lo, hi), method="bounded",
                          options={"xatol": 1e-10})
    g = math.exp(float(res.x))
    if profiled(0.0)[1] >= profiled(g)[1]:
        g = 0.0
    s2, _ = profiled(g)
    return s2, g * s2


def _balanced(cells: Cells) -> bool:
    """True when every run measured the same settings the same number of times."""
    table = np.zeros((cells.k, cells.c))
    table[cells.run, cells.level] = cells.count
    return bool((table == table[0]).all())


def _reml_balanced(rs: RunSums, k: int) -> tuple[float, float]:
    """Closed-form REML for a balanced design: ANOVA mean squares, truncated at 0 as REML is."""
    n = float(rs.n.sum())
    nr = float(rs.n[0])
    ms_w = _within_sse(rs) / (n - k - 1)
    run_means = rs.sy / rs.n
    ms_b = nr * float(((run_means - run_means.mean()) ** 2).sum()) / (k - 1)
    if ms_b >= ms_w:
        return ms_w, (ms_b - ms_w) / nr
    sxx, sxy = float(rs.sxx.sum()), float(rs.sxy.sum())
    return (float(rs.syy.sum()) - sxy**2 / sxx) / (n - 2), 0.0


def _profile_interval(rs: RunSums, sigma2: float, tau: float, level: float) -> tuple[float, float | None]:
    """Profile REML likelihood interval for σ_b: where twice the drop from the maximum reaches χ²₁."""
    from scipy.stats import chi2

    top = reml_loglik(rs, sigma2, tau)
    cut = 0.5 * float(chi2.ppf(level, 1))

    def drop(sd_b: float) -> float:
        return top - _profile_sigma2(rs, sd_b * sd_b)[1] - cut

    return sd_interval_ends(drop, math.sqrt(tau), math.sqrt(sigma2))


def sd_interval_ends(drop: Callable[[float], float], sd_hat: float, sd_within: float) -> tuple[float, float | None]:
    """Ends of a profile-likelihood interval for a between-run SD: where ``drop`` (the loss of
    log-likelihood past the cut-off) crosses 0 below and above ``sd_hat``; 0 when the lower end
    reaches the boundary, None when the upper end is not found within 60 doublings."""
    from scipy.optimize import brentq

    low = 0.0 if drop(0.0) <= 0 else brentq(drop, 0.0, sd_hat, xtol=1e-12 * max(sd_hat, 1e-300))
    step = max(sd_hat, sd_within)
    hi = sd_hat + step
    for _ in range(60):
        if drop(hi) > 0:
            return low, brentq(drop, sd_hat, hi, xtol=1e-12 * hi)
        hi += step
        step *= 2
    return low, None


def _within_sse(rs: RunSums) -> float:
    """Residual SS of the line with one offset per run (pooled within-run regression)."""
    sxx_w, sxy_w, syy_w = float(rs.wxx.sum()), float(rs.wxy.sum()), float(rs.wyy.sum())
    return max(syy_w - sxy_w**2 / sxx_w, 0.0) if sxx_w > 0 else 0.0


def _require_within_scatter(rs: RunSums, n: int, k: int, name: str) -> None:
    """Refuse designs that leave nothing to estimate the within-run SD from."""
    if n - k - 1 <= 0:
        raise DataError(
            f"runs column {name!r}: {n} rows in {k} runs leave no within-run degrees of freedom once the line and the "
            "run offsets are fitted; measure more rows in each run"
        )
    if not _within_sse(rs) > 1e-24 * max(float(rs.syy.sum()), 1e-300):
        raise DataError(
            f"runs column {name!r}: the line with run offsets fits every row exactly (no scatter within runs), so the "
            "within-run SD is 0 and the variance parts are undefined; check for duplicated or rounded values"
        )


@dataclass(frozen=True, slots=True)
class VarianceParts:
    """REML estimates of the random-intercept line."""

    within_sd: float
    between_sd: float
    interval: tuple[float, float | None]
    method: str
    interval_method: str
    intercept: float
    slope: float
    cov: np.ndarray
    """Covariance of (intercept, slope) at the REML estimates."""


def variance_parts(rs: RunSums, cells: Cells) -> VarianceParts:
    """σ_w, σ_b (REML), the profile interval for σ_b and the GLS line at the estimates."""
    if _balanced(cells):
        s2, tau = _reml_balanced(rs, cells.k)
        method = "REML, closed form (balanced: every run measured the same settings equally often)"
    else:
        s2, tau = _reml_numeric(rs)
        method = "REML, maximised numerically from per-run sums (unbalanced runs)"
    interval = _profile_interval(rs, s2, tau, INTERVAL_LEVEL)
    a, b, _, _ = _gls_parts(rs, s2, tau)
    cov = np.linalg.inv(a)
    beta = cov @ b
    slope = float(beta[1])
    intercept = float(beta[0]) + rs.y_mean - slope * rs.x_mean
    j = np.array([[1.0, -rs.x_mean], [0.0, 1.0]])  # back from centred x to the original intercept
    return VarianceParts(math.sqrt(s2), math.sqrt(tau), interval, method,
                         f"profile REML likelihood, {INTERVAL_LEVEL:.0%} (χ²₁ cut-off, σ_w profiled out)",
                         intercept, slope, j @ cov @ j.T)


# ----- the result ---------------------------------------------------------------------------------


@dataclass(frozen=True, slots=True)
class RunsResult:
    """What ``check --runs`` adds: run count, variance parts and the two within-run tests."""

    column: str
    labels: tuple[str, ...]
    cells: int
    empty_cells: int
    parts: VarianceParts
    lack_of_fit: LackOfFit
    shape_differs: LackOfFit
    run_means: tuple[float, ...]
    """Mean response of each run (raw, not adjusted for the levels it measured)."""
    balanced: bool
    df_runs: int
    n0: float
    """Effective rows per run for the between-run mean square (equals the run size when balanced)."""
    df_within: int

    @property
    def count(self) -> int:
        """Number of runs."""
        return len(self.labels)

    def as_json(self) -> dict:
        """``runs`` in ``check --json``."""
        lo, hi = self.parts.interval
        return {
            "column": self.column,
            "count": self.count,
            "labels": list(self.labels),
            "between_sd": self.parts.between_sd,
            "within_sd": self.parts.within_sd,
            "between_sd_interval": {"low": lo, "high": hi, "level": INTERVAL_LEVEL,
                                    "method": self.parts.interval_method},
            "method": self.parts.method,
            "intercept": self.parts.intercept,
            "slope": self.parts.slope,
            "cells": self.cells,
            "empty_cells": self.empty_cells,
            "lack_of_fit": self.lack_of_fit.as_json(),
            "shape_differs": self.shape_differs.as_json(),
        }


def check_runs(study, column: str) -> RunsResult:
    """Within-run lack of fit, shape across runs and variance components for ``column``."""
    if study.weights is not None:
        raise UsageError("--runs does not take --weights: the run analysis is unweighted; drop one of them")
    if study.approximate_groups:
        raise UsageError("--runs needs exact settings of x: the tolerance merged distinct values; drop --tolerance")
    runs = run_factor(study, column)
    cells = cell_stats(study.y, study.x_codes, study.x_level_values, runs)
    _require_crossed(cells, runs, study.x_name)
    lof, shape = within_run_tests(cells)
    rs = run_sums(study.x, study.y, runs.codes, runs.count)
    n, k = cells.n, runs.count
    _require_within_scatter(rs, n, k, runs.name)
    parts = variance_parts(rs, cells)
    n0 = (n - float((rs.n**2).sum()) / n) / (k - 1)
    return RunsResult(
        column=runs.name, labels=runs.labels, cells=len(cells.count), empty_cells=k * cells.c - len(cells.count),
        parts=parts, lack_of_fit=lof, shape_differs=shape,
        run_means=tuple(float(v) for v in rs.sy / rs.n + rs.y_mean), balanced=_balanced(cells),
        df_runs=k - 1, n0=n0, df_within=n - k - 1,
    )
