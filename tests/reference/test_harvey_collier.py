"""The O(n) Harvey–Collier test equals statsmodels' ``linear_harvey_collier`` (skip=3), which
updates (X′X)⁻¹ row by row; ours takes running sums, so 10⁶ rows cost a second, not a minute."""

from __future__ import annotations

import numpy as np
import pytest
from bendwise.engine.checks.replicate_free import harvey_collier


@pytest.mark.parametrize("n", [6, 12, 40, 300, 3000])
@pytest.mark.parametrize("curve", [0.0, 0.05])
def test_equals_statsmodels(n, curve):
    import statsmodels.api as sm
    from statsmodels.stats.diagnostic import linear_harvey_collier

    rng = np.random.default_rng(n)
    x = np.sort(rng.uniform(0, 10, n))
    y = 1 + 2 * x + curve * x**2 + rng.normal(0, 1, n)
    # reference: statsmodels linear_harvey_collier on the OLS fit, rows in x order
    ref = linear_harvey_collier(sm.OLS(y, np.column_stack([np.ones(n), x])).fit(), skip=3)
    t, p = harvey_collier(x, y)
    assert t == pytest.approx(float(ref.statistic), rel=1e-8, abs=1e-10)
    assert p == pytest.approx(float(ref.pvalue), rel=1e-6, abs=1e-300)


def test_tied_first_rows_are_refused_like_statsmodels():
    x = np.array([1.0, 1.0, 1.0, 2.0, 3.0, 4.0])
    with pytest.raises(ValueError):
        harvey_collier(x, x * 2.0)


def test_large_offset_keeps_its_answer():
    """y ≈ 5·10⁵ on x ≈ 10⁶: the running sums about the first row stay exact enough."""
    rng = np.random.default_rng(3)
    x = np.sort(rng.uniform(1e6, 1e6 + 1, 400))
    noise = rng.normal(0, 0.01, 400)
    t_far, _ = harvey_collier(x, 5e5 + 0.3 * x + noise)
    t_near, _ = harvey_collier(x - 1e6, 0.3 * (x - 1e6) + noise)
    assert t_far == pytest.approx(t_near, rel=1e-6)
