"""Detection and quantitation limits from a calibration line.

Two families, each for one run (the straight line on all rows) and, when runs are given, with the
between-run variance added:

* ICH Q2 forms: detection limit 3.3·σ/b₁ and quantitation limit 10·σ/b₁, once with σ = the
  residual SD of the line and once with σ = the SD of the intercept. For one run the SD of the
  intercept is its standard error; with runs it is the SD of the intercepts of each run's own line
  (the spread of intercepts between runs, as ICH Q2 describes it).
* Hubaux & Vos (1970), from the one-sided prediction band of a new single measurement: the
  critical level y_C is the upper (1 − α) prediction limit at x = 0, x_C = (y_C − b₀)/b₁ is the
  content it corresponds to on the line, and the detection limit x_D is the content whose lower
  (1 − β) prediction limit equals y_C. With runs, the prediction variance is σ_b² + σ_w² plus the
  variance of the REML line, and the t quantile uses Satterthwaite's degrees of freedom for
  σ_b² + σ_w² from the between- and within-run mean squares (approximate).

A falling line (b₁ < 0) is handled by mirroring the response, so the limits stay positive.

See docs/METHODS.md "Calibrations over several runs". Sources: ICH Q2(R1) (2005) §6–7; Hubaux & Vos (1970), Analytical Chemistry 42, 849–855;
Satterthwaite (1946).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from ..cautions import CAUTION
from ..errors import DataError
from .runs import RunFactor, RunsResult

__all__ = ["Limits", "LimitsReport", "limits_one_run", "limits_with_runs", "DEFAULT_ALPHA", "DEFAULT_BETA"]

DEFAULT_ALPHA = 0.05
"""False-positive rate at the critical level."""
DEFAULT_BETA = 0.05
"""False-negative rate at the detection limit."""


@dataclass(frozen=True, slots=True)
class Limits:
    """Limits of one kind (one run, or with the between-run variance)."""

    basis: str
    slope: float
    intercept: float
    sigma_residual: float
    sigma_intercept: float | None
    sigma_intercept_words: str
    lod_residual: float | None
    loq_residual: float | None
    lod_intercept: float | None
    loq_intercept: float | None
    y_critical: float
    x_critical: float
    x_detection: float | None
    df: float
    note: str | None = None

    def as_json(self) -> dict:
        """JSON shape of one set of limits."""
        return {
            "basis": self.basis,
            "slope": self.slope,
            "intercept": self.intercept,
            "ich_q2": {
                "residual_sd": {"sigma": self.sigma_residual, "detection": self.lod_residual,
                                "quantitation": self.loq_residual},
                "intercept_sd": {"sigma": self.sigma_intercept, "meaning": self.sigma_intercept_words,
                                 "detection": self.lod_intercept, "quantitation": self.loq_intercept},
            },
            "hubaux_vos": {"y_critical": self.y_critical, "x_critical": self.x_critical,
                           "x_detection": self.x_detection, "df": self.df},
            "note": self.note,
        }


@dataclass(frozen=True, slots=True)
class LimitsReport:
    """Limits for one run and, with runs, with the between-run variance added."""

    alpha: float
    beta: float
    one_run: Limits
    with_runs: Limits | None

    def as_json(self) -> dict:
        """``limits`` in ``check --json``."""
        return {
            "alpha": self.alpha,
            "beta": self.beta,
            "one_run": self.one_run.as_json(),
            "with_runs": None if self.with_runs is None else self.with_runs.as_json(),
            "caution": CAUTION,
        }


def _hubaux_vos(b0: float, b1: float, sd_pred: Callable[[float], float], t_a: float, t_b: float,
                ) -> tuple[float, float, float | None, str | None]:
    """(y_C, x_C, x_D, note) for the line b0 + b1·x and prediction SD ``sd_pred(x)``."""
    from scipy.optimize import brentq

    sign, slope = (1.0, b1) if b1 > 0 else (-1.0, -b1)
    margin = t_a * sd_pred(0.0)
    y_c = b0 + sign * margin
    x_c = margin / slope

    def gap(x: float) -> float:
        return slope * x - t_b * sd_pred(x) - margin

    hi = max(x_c, 1e-300) * 2
    for _ in range(200):
        if gap(hi) > 0:
            return y_c, x_c, brentq(gap, 0.0, hi, xtol=1e-14 * hi, rtol=1e-14), None
        hi *= 2
        if not math.isfinite(hi):
            break
    return y_c, x_c, None, ("the detection limit is not reached: the line is too flat for its scatter "
                            "(the lower prediction limit never rises to the critical level)")


def _ich(sigma: float | None, slope: float) -> tuple[float | None, float | None]:
    if sigma is None:
        return None, None
    return 3.3 * sigma / abs(slope), 10.0 * sigma / abs(slope)


def limits_one_run(x: np.ndarray, y: np.ndarray, *, alpha: float = DEFAULT_ALPHA,
                   beta: float = DEFAULT_BETA) -> Limits:
    """Limits from the ordinary least-squares line on all rows (one run)."""
    from scipy.stats import t as t_dist

    n = len(x)
    xm, ym = float(x.mean()), float(y.mean())
    sxx = float(((x - xm) ** 2).sum())
    b1 = float(((x - xm) * (y - ym)).sum()) / sxx
    b0 = ym - b1 * xm
    resid = y - b0 - b1 * x
    df = n - 2
    if df <= 0:
        raise DataError(f"limits need at least 3 rows to estimate the scatter about the line (have {n})")
    s = math.sqrt(float(resid @ resid) / df)
    if not (s > 0 and b1 != 0 and math.isfinite(s / b1)):
        what = "has slope 0" if b1 == 0 else "passes through every row exactly"
        raise DataError(f"the calibration line {what}: detection and quantitation limits are undefined here")
    se_b0 = s * math.sqrt(1.0 / n + xm * xm / sxx)

    def sd_pred(v: float) -> float:
        return s * math.sqrt(1.0 + 1.0 / n + (v - xm) ** 2 / sxx)

    t_a, t_b = float(t_dist.ppf(1 - alpha, df)), float(t_dist.ppf(1 - beta, df))
    y_c, x_c, x_d, note = _hubaux_vos(b0, b1, sd_pred, t_a, t_b)
    lod_r, loq_r = _ich(s, b1)
    lod_i, loq_i = _ich(se_b0, b1)
    return Limits("one run: the straight line on all rows", b1, b0, s, se_b0,
                  "standard error of the intercept", lod_r, loq_r, lod_i, loq_i, y_c, x_c, x_d, float(df), note)


def _run_intercepts(x: np.ndarray, y: np.ndarray, runs: RunFactor) -> tuple[float | None, int]:
    """SD of the intercepts of each run's own line (runs with at least two distinct x values)."""
    values = []
    for r in range(runs.count):
        xr, yr = x[runs.codes == r], y[runs.codes == r]
        if len(xr) < 3 or np.ptp(xr) == 0:
            continue
        b1, b0 = np.polyfit(xr, yr, 1)
        values.append(float(b0))
    if len(values) < 2:
        return None, len(values)
    return float(np.std(values, ddof=1)), len(values)


def limits_with_runs(x: np.ndarray, y: np.ndarray, runs: RunFactor, result: RunsResult, *,
                     alpha: float = DEFAULT_ALPHA, beta: float = DEFAULT_BETA) -> Limits:
    """Limits for a measurement in a new run: between-run variance added to the within-run scatter."""
    from scipy.stats import t as t_dist

    p = result.parts
    var_b, var_w = p.between_sd**2, p.within_sd**2
    total = var_b + var_w
    n0 = result.n0
    ms_b, ms_w = var_w + n0 * var_b, var_w
    denom = (ms_b / n0) ** 2 / result.df_runs + ((1 - 1 / n0) * ms_w) ** 2 / result.df_within
    df = total**2 / denom if denom > 0 else float(result.df_within)

    def sd_pred(v: float) -> float:
        g = np.array([1.0, v])
        return math.sqrt(total + float(g @ p.cov @ g))

    t_a, t_b = float(t_dist.ppf(1 - alpha, df)), float(t_dist.ppf(1 - beta, df))
    y_c, x_c, x_d, note = _hubaux_vos(p.intercept, p.slope, sd_pred, t_a, t_b)
    sd_int, used = _run_intercepts(x, y, runs)
    lod_r, loq_r = _ich(math.sqrt(total), p.slope)
    lod_i, loq_i = _ich(sd_int, p.slope)
    words = f"SD of the intercepts of each run's own line ({used} runs)"
    if sd_int is None:
        words = "not available: fewer than 2 runs measured 3 or more rows at 2 or more levels"
    return Limits("a new run: between-run variance added (REML line, σ = √(σ_b² + σ_w²))", p.slope, p.intercept,
                  math.sqrt(total), sd_int, words, lod_r, loq_r, lod_i, loq_i, y_c, x_c, x_d, df, note)
