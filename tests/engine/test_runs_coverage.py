"""Coverage by simulation: 95 % inverse intervals for a reading from a NEW run.

Each simulated calibration: k runs (days) × 6 levels × 3 replicates from y = 0.02 + 0.05·x + u + e,
u ~ N(0, 0.015²) per run, e ~ N(0, 0.01²). The run model (REML random intercept from per-run sums,
``engine.tree.runs_node``) is handed to ``apply``'s code (``model_for_run`` + ``inverse_predict``);
a reading from a new run at a true x drawn uniformly over the range is inverted, and we count how
often the 95 % set holds the true x. The fixed-day model (day as a fixed covariate, applied to a new
day with the average over the calibration days, the best a fixed-day model can do) is scored the same
way with the ordinary least-squares Fieller set (``fieller_line``). A fixed random stream per test; no reference package
needed: the truth is known by construction.
"""

from __future__ import annotations

import numpy as np
import pytest
from bendwise.engine.handon.inverse import fieller_line, inverse_predict
from bendwise.engine.handon.runs_spec import HandedRuns, model_for_run
from bendwise.engine.handon.specfile import HandedModel
from bendwise.engine.stats.dist import t_ppf
from bendwise.engine.stats.transforms import IDENTITY
from bendwise.engine.tree.runs_node import design_sums, gls_at, profile_fit, variance_cov
from bendwise.engine.tree.scoring import Term

LEVELS = np.array([0.0, 2.0, 5.0, 10.0, 15.0, 20.0])
B0, B1, SD_B, SD_W, REPS = 0.02, 0.05, 0.015, 0.01, 3


def _calibration(rng: np.random.Generator, k: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    codes = np.repeat(np.arange(k), len(LEVELS) * REPS)
    x = np.tile(np.repeat(LEVELS, REPS), k)
    y = B0 + B1 * x + rng.normal(0, SD_B, k)[codes] + rng.normal(0, SD_W, len(x))
    return x, y, codes


def _handed(beta: np.ndarray, cov: np.ndarray, sigma: float, df: float, n: int) -> HandedModel:
    return HandedModel("1.0", "y", "x", IDENTITY, IDENTITY, (Term("const"), Term("tpow", 1)), beta, cov, sigma,
                       df, n, (), None, 1.0, None, float(LEVELS[0]), float(LEVELS[-1]), 1, np.zeros(2))  # type: ignore[arg-type]


def _covered_runs(x, y, codes, k, x0, y0) -> bool:
    xd = np.column_stack([np.ones_like(x), x])
    ds = design_sums(xd, y, codes, k)
    s2, tau, _ = profile_fit(ds, reml=True)
    beta, cov, blups = gls_at(ds, s2, tau)
    runs = HandedRuns("day", tuple(f"d{i}" for i in range(k)), ds.n, float(np.sqrt(tau)), float(np.sqrt(s2)),
                      beta, cov, variance_cov(ds, s2, tau), blups)
    model, _ = model_for_run(_handed(beta, cov, 1.0, 10, len(y)), runs, None, 1)
    r = inverse_predict(model, np.array([y0]))[0]
    return any(lo is not None and hi is not None and lo <= x0 <= hi for lo, hi in r.pieces) or (
        r.low is not None and r.high is not None and r.low <= x0 <= r.high)


def _covered_fixed(x, y, codes, k, x0, y0) -> bool:
    """Day as a fixed covariate; a new day read with the average of the calibration days' curves."""
    dummies = (codes[:, None] == np.arange(1, k)[None, :]).astype(float)
    xd = np.column_stack([np.ones_like(x), x, dummies])
    coef, *_ = np.linalg.lstsq(xd, y, rcond=None)
    resid = y - xd @ coef
    df = len(y) - xd.shape[1]
    s2 = float(resid @ resid) / df
    cov = s2 * np.linalg.inv(xd.T @ xd)
    avg = np.zeros(xd.shape[1])
    avg[0] = 1.0
    avg[2:] = 1.0 / k  # equal-weight average over the k days (the reference day's offset is 0)
    slope = np.zeros(xd.shape[1])
    slope[1] = 1.0
    b0, b1 = float(avg @ coef), float(coef[1])
    v00, v01, v11 = float(avg @ cov @ avg), float(avg @ cov @ slope), float(cov[1, 1])
    kind, pieces = fieller_line(y0 - b0, b1, v00, v01, v11, s2, t_ppf(0.975, df))
    return any(lo <= x0 <= hi for lo, hi in pieces)


def coverage(n_sims: int, k: int, stream: int) -> tuple[float, float]:
    """(run model, fixed-day model) coverage of 95 % inverse intervals for a new run."""
    rng = np.random.default_rng(stream)
    hit_r = hit_f = 0
    for _ in range(n_sims):
        x, y, codes = _calibration(rng, k)
        x0 = rng.uniform(LEVELS[0], LEVELS[-1])
        y0 = B0 + B1 * x0 + rng.normal(0, SD_B) + rng.normal(0, SD_W)
        hit_r += _covered_runs(x, y, codes, k, x0, y0)
        hit_f += _covered_fixed(x, y, codes, k, x0, y0)
    return hit_r / n_sims, hit_f / n_sims


def test_new_run_intervals_cover_a_small_quick_version():
    runs, fixed = coverage(200, 5, stream=11)
    assert 0.89 <= runs <= 0.99
    assert fixed < 0.85  # a fixed day model leaves the between-day SD out of the interval


@pytest.mark.slow
@pytest.mark.parametrize("k", [4, 5, 6, 8])
def test_new_run_intervals_cover_95_percent(k):
    runs, fixed = coverage(1000, k, stream=100 + k)
    assert 0.93 <= runs <= 0.97
    assert fixed < 0.85


