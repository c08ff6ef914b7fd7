"""Statistics of coarse groups derived from finer ones (no second pass over the rows) equal the
statistics computed from the rows directly.

The algebra (pooled sums of squares = within + between, Chan, Golub & LeVeque 1983) is common
practice; the reference here is the engine's own two-pass computation on the rows, which the
other engine tests hold against statsmodels.
"""

from __future__ import annotations

import bendwise.engine.stats.study as study_module
import numpy as np
import pandas as pd
import pytest
from bendwise.engine import make_study
from bendwise.engine.stats.groups import compute_group_stats, narrow_group_stats, pool_group_stats
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st


def _close(a: np.ndarray, b: np.ndarray, scale: float, rel: float = 1e-10) -> None:
    np.testing.assert_allclose(a, b, rtol=rel, atol=rel * scale)


def _same(derived, direct, *, ss_scale: float) -> None:
    np.testing.assert_array_equal(derived.count, direct.count)
    _close(derived.wsum, direct.wsum, float(np.abs(direct.wsum).max()))
    # the mean with its low digits: what the fits use
    _close(derived.mean + derived.mean_lo, direct.mean + direct.mean_lo, ss_scale ** 0.5)
    _close(derived.ss, direct.ss, ss_scale)
    _close(derived.base_mean, direct.base_mean, 1.0 + float(np.abs(direct.base_mean).max(initial=0)))
    if direct.cross is not None:
        assert derived.cross is not None
        _close(derived.cross, direct.cross, ss_scale + float(np.abs(direct.cross).max()))
    else:
        assert derived.cross is None
    if direct.zmin is not None:
        np.testing.assert_array_equal(derived.zmin, direct.zmin)
        np.testing.assert_array_equal(derived.zmax, direct.zmax)
    assert derived.sum_log_w == pytest.approx(direct.sum_log_w, rel=1e-12, abs=1e-12)


@st.composite
def tables(draw):
    n = draw(st.integers(6, 60))
    levels = draw(st.integers(2, 5))
    cats = draw(st.integers(1, 4))
    offset = draw(st.sampled_from([0.0, 1e8, -3e5, 1e-9]))
    scale = draw(st.sampled_from([1.0, 1e-6, 1e4]))
    seed = draw(st.integers(0, 2**31 - 1))
    rng = np.random.default_rng(seed)
    x_codes = rng.integers(0, levels, n)
    cat = rng.integers(0, cats, n)
    z = offset + scale * np.round(rng.normal(size=n), draw(st.sampled_from([1, 3, 12])))
    if draw(st.booleans()):
        z[:] = z[0]  # an exact fit: every row the same
    w = rng.uniform(0.2, 3.0, n) if draw(st.booleans()) else None
    bases = np.column_stack([rng.normal(20, 2, n), rng.uniform(0, 1, n)])
    return x_codes, cat, z, w, bases, scale


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(tables())
def test_pooled_equals_direct(case):
    x_codes, cat, z, w, bases, scale = case
    # fine groups: (x level, category); coarse: x level
    _, fine = np.unique(np.column_stack([x_codes, cat]), axis=0, return_inverse=True)
    fine = fine.ravel()
    f_c = int(fine.max()) + 1
    _, coarse = np.unique(x_codes, return_inverse=True)
    c = int(coarse.max()) + 1
    parent = np.empty(f_c, dtype=np.intp)
    parent[fine] = coarse
    fine_stats = compute_group_stats(fine, f_c, z, w, bases, extremes=True)
    # below n·(64 ε |z|)² a sum of squares counts as rounding (groups.drop_rounding) in both
    ss_scale = float(len(z)) * (scale**2 + (64 * np.finfo(float).eps * float(np.abs(z).max())) ** 2 / 1e-10)
    for with_bases in (True, False):
        for extremes in (True, False):
            derived = pool_group_stats(fine_stats, parent, c, bases=with_bases, extremes=extremes)
            direct = compute_group_stats(coarse, c, z, w, bases if with_bases else None, extremes=extremes)
            _same(derived, direct, ss_scale=ss_scale)
            if not extremes:
                assert derived.zmin is None
    narrowed = narrow_group_stats(fine_stats, bases=False, extremes=False)
    _same(narrowed, compute_group_stats(fine, f_c, z, w), ss_scale=ss_scale)


def _frame(n: int = 400, seed: int = 3) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = rng.integers(1, 7, n).astype(float)
    batch = np.array(["a", "b", "c"])[rng.integers(0, 3, n)]
    t1 = rng.normal(20, 2, n)
    y = 1e6 + 2 * x + 0.1 * x**2 + 0.3 * t1 + (batch == "b") + rng.normal(0, 0.2, n)
    return pd.DataFrame({"x": x, "y": y, "t1": t1, "batch": batch, "w": rng.uniform(0.5, 2, n)})


@pytest.mark.parametrize("weights", [None, "w"])
def test_study_derives_instead_of_passing_again(monkeypatch, weights):
    """One pass at the finest grouping serves the coarser requests; the answers do not depend on
    the order in which they are asked for."""
    frame = _frame()
    calls = []
    real = study_module.compute_group_stats

    def counting(*args, **kw):
        calls.append(args[1])
        return real(*args, **kw)

    monkeypatch.setattr(study_module, "compute_group_stats", counting)
    fine_first = make_study(frame, y="y", x="x", covariates=["t1", "batch"], weights=weights)
    z = fine_first.y
    key = ("z", "identity")
    bases = fine_first.covariate("t1").values[:, None]
    bkey = ("nums", ("t1",))
    wkey = weights
    kw = {"weights": fine_first.weights, "weights_key": wkey}
    fine = fine_first.group_stats(z, key, by=("batch",), bases=bases, bases_key=bkey, extremes=True, **kw)
    derived = [
        fine_first.group_stats(z, key, **kw),
        fine_first.group_stats(z, key, by=("batch",), **kw),
        fine_first.group_stats(z, key, bases=bases, bases_key=bkey, **kw),
        fine_first.group_stats(z, key, extremes=True, **kw),
    ]
    assert len(calls) == 1 and calls[0] == fine.c  # one pass, at the finest grouping
    calls.clear()
    direct_study = make_study(frame, y="y", x="x", covariates=["t1", "batch"], weights=weights)
    kw_d = {"weights": direct_study.weights, "weights_key": wkey}
    direct = [
        direct_study.group_stats(z, key, **kw_d),
        direct_study.group_stats(z, key, by=("batch",), **kw_d),
        direct_study.group_stats(z, key, bases=bases, bases_key=bkey, **kw_d),
        direct_study.group_stats(z, key, extremes=True, **kw_d),
    ]
    assert len(calls) == 4  # coarse first: nothing finer to derive from, every request is a pass
    for a, b in zip(derived, direct, strict=True):
        _same(a, b, ss_scale=float(len(z)) * 0.04)


@pytest.mark.parametrize("t_name", ["identity", "log", "reciprocal", "boxcox"])
def test_extremes_of_a_transform_from_those_of_y(t_name):
    """Per-group smallest and largest g(y), taken from those of y for a monotone g (decreasing
    ones swap them), equal the extremes computed from the transformed rows."""
    from bendwise.engine.stats.transforms import IDENTITY, LOG, RECIPROCAL, boxcox

    t = {"identity": IDENTITY, "log": LOG, "reciprocal": RECIPROCAL, "boxcox": boxcox(-0.7)}[t_name]
    frame = _frame()
    study = make_study(frame, y="y", x="x", covariates=["t1", "batch"])
    z = np.asarray(t.forward(study.y), dtype=float)
    got = study.group_stats(z, ("z", t.key()), by=("batch",), extremes=True, transform=t)
    codes, c = study.group_codes(("batch",))
    want = compute_group_stats(codes, c, z, extremes=True)
    np.testing.assert_allclose(got.zmin, want.zmin, rtol=1e-14)
    np.testing.assert_allclose(got.zmax, want.zmax, rtol=1e-14)
    assert (got.zmin <= got.zmax).all()
