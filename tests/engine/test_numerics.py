"""Small numerical helpers of the remedy tree against scipy (reference: scipy.interpolate
.CubicSpline with its default not-a-knot ends, scipy.optimize.brentq)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from bendwise.engine.stats.numerics import CubicSpline as EngineSpline
from bendwise.engine.stats.numerics import brentq as engine_brentq
from hypothesis import given, settings
from hypothesis import strategies as st


@given(st.integers(4, 40), st.integers(0, 10_000))
@settings(max_examples=60, deadline=None, derandomize=True, database=None)
def test_spline_matches_scipy_cubic_spline(n, seed):
    from scipy.interpolate import CubicSpline  # reference

    rng = np.random.default_rng(seed)
    x = np.cumsum(rng.uniform(0.05, 1.0, n))
    y = rng.normal(0, 10, n) - 50 * (x - x.mean()) ** 2
    at = np.concatenate([x, rng.uniform(x[0] - 0.5, x[-1] + 0.5, 50)])
    ref = CubicSpline(x, y)(at)
    got = EngineSpline(x, y)(at)
    assert np.allclose(got, ref, rtol=1e-11, atol=1e-11 * np.abs(y).max())


@pytest.mark.parametrize(("f", "a", "b"), [
    (lambda v: v**3 - 2 * v - 5, 2.0, 3.0),            # Wallis's cubic (common practice)
    (lambda v: math.cos(v) - v, 0.0, 1.0),
    (lambda v: math.exp(v) - 1e3, 0.0, 10.0),
    (lambda v: (v - 0.3) ** 5, -1.0, 2.0),              # a flat (multiple) root
    (lambda v: math.atan(v - 7.25), -100.0, 50.0),
])
def test_brentq_matches_scipy(f, a, b):
    from scipy.optimize import brentq  # reference

    assert engine_brentq(f, a, b, xtol=1e-12) == pytest.approx(brentq(f, a, b, xtol=1e-12), abs=1e-11)


def test_brentq_refuses_a_bad_bracket():
    with pytest.raises(ValueError):
        engine_brentq(lambda v: v * v + 1.0, -1.0, 1.0)
    with pytest.raises(ValueError):
        engine_brentq(lambda v: math.nan, 0.0, 1.0)


def test_boxcox_grid_from_power_sums_matches_row_sums():
    # reference: the group statistics of each z = (y^λ − 1)/λ computed from the rows themselves
    # (engine.groups.compute_group_stats, two passes), for every λ of the tree's grid
    from bendwise.engine.stats.boxcox_grid import GRID_STEP, grid_group_stats_series
    from bendwise.engine.stats.groups import compute_group_stats
    from bendwise.engine.stats.power_sums import GRID_TOL

    rng = np.random.default_rng(9)
    n = 60_000
    codes = rng.integers(0, 8, n)
    temp = rng.normal(20.0, 2.0, n)
    y = np.exp(1.0 + 0.2 * codes + 0.01 * temp + rng.normal(0, 0.05, n))
    bases = temp[:, None]
    lams = np.round(np.arange(-3.0, 3.0 + 1e-9, GRID_STEP), 6)
    got = grid_group_stats_series(np.log(y), codes, 8, lams, bases, np.argsort(codes, kind="stable"))
    assert all(g is not None for g in got)  # a narrow response: the series covers the whole grid
    for lam, g in zip(lams, got, strict=True):
        z = np.log(y) if lam == 0 else np.expm1(lam * np.log(y)) / lam
        ref = compute_group_stats(codes, 8, z, None, bases)
        sd = np.sqrt(ref.ss / ref.count)
        assert np.all(np.abs(g.mean - ref.mean) <= 10 * GRID_TOL * sd), lam
        assert np.allclose(g.ss, ref.ss, rtol=10 * GRID_TOL, atol=0), lam
        assert np.allclose(g.cross, ref.cross, rtol=10 * GRID_TOL, atol=10 * GRID_TOL * np.abs(ref.cross).max()), lam
