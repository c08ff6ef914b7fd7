"""The Brown–Forsythe spread test through the shortcut medians (each level's median of g(y) from
the two middle y values, for a monotone g) equals scipy.stats.levene(center="median") on the
transformed rows (scipy is the reference), for every response transform the tree uses, with
ties, odd and even counts, and weights constant within levels."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from bendwise.engine import make_study
from bendwise.engine.stats.transforms import IDENTITY, LOG, RECIPROCAL, SQRT, boxcox
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy import stats as sps

TRANSFORMS = [IDENTITY, LOG, SQRT, RECIPROCAL, boxcox(0.37), boxcox(-1.2)]


@st.composite
def tables(draw):
    levels = draw(st.integers(3, 5))
    counts = [draw(st.integers(2, 7))] + [draw(st.integers(1, 7)) for _ in range(levels - 1)]
    # offsets up to 10³: at 10⁶ a Box–Cox λ = −1.2 leaves differences at the rounding level, where
    # neither this test nor scipy's has digits to compare
    offset = draw(st.sampled_from([1.0, 50.0, 1e3]))
    digits = draw(st.sampled_from([0, 1, 6]))  # 0 digits: many ties
    rng = np.random.default_rng(draw(st.integers(0, 2**31 - 1)))
    x = np.repeat(np.arange(levels, dtype=float), counts)
    y = offset + np.round(rng.gamma(2.0, 1.0 + x, size=x.size), digits) + 0.5
    return pd.DataFrame({"x": x, "y": y}), rng.uniform(0.3, 3.0, levels)


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(tables(), st.sampled_from(TRANSFORMS), st.booleans())
def test_shortcut_medians_match_scipy(case, t, weighted):
    frame, w_level = case
    study = make_study(frame, y="y", x="x")
    z = np.asarray(t.forward(study.y), dtype=float)
    w = w_level[study.x_codes] if weighted else None
    key = (t.key(), "w" if weighted else None)
    got = study.spread_by_level(z, key, w, transform=t, level_weights=w_level if weighted else None)
    assert study._deviation_sums(z, t, w, w_level if weighted else None) is not None  # the shortcut ran
    zz = z if w is None else np.sqrt(w) * z
    groups = [zz[study.x_codes == g] for g in range(study.c)]
    groups = [g for g in groups if g.size >= 2]
    if not got.testable:
        assert "replicates" in (got.reason or "") or "do not vary" in (got.reason or "")
        return
    want = sps.levene(*groups, center="median")
    # a small F is a difference of near-equal spreads: compare to an absolute floor as well
    assert got.statistic == pytest.approx(want.statistic, rel=1e-6, abs=1e-9)
    assert got.p == pytest.approx(want.pvalue, rel=1e-6, abs=1e-9)


def test_no_shortcut_with_row_weights_or_a_sign_change():
    """Per-row weights of the user's break the median shortcut, and so does 1/y across 0: the
    study falls back to sorting the rows."""
    frame = pd.DataFrame({"x": np.repeat([1.0, 2.0, 3.0], 4), "y": np.arange(12.0) - 5.5,
                          "w": np.linspace(0.5, 2, 12)})
    study = make_study(frame, y="y", x="x")
    assert study._deviation_sums(1.0 / study.y, RECIPROCAL, None, None) is None
    assert study._deviation_sums(study.y, IDENTITY, None, None) is not None
    weighted = make_study(frame, y="y", x="x", weights="w")
    assert weighted._deviation_sums(weighted.y, IDENTITY, weighted.weights, np.ones(3)) is None
