"""Properties every lack-of-fit computation must have, on random replicated data.

Tolerances: identities that involve the same arithmetic in another order to 1e-10 relative;
comparisons with an independent computation (numpy lstsq on rows, pandas groupby) to 1e-9
relative; statsmodels references to 1e-9 relative.
"""

from __future__ import annotations

import math
import warnings

import bendwise.engine as engine
import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from bendwise.engine.stats.design import poly_design
from bendwise.engine.stats.groups import compute_group_stats
from bendwise.engine.stats.linalg import fit_design
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy import stats as sps
from statsmodels.stats.anova import anova_lm

REPEATABLE = settings(
    max_examples=25,
    deadline=None,
    derandomize=True,
    database=None,
    suppress_health_check=[HealthCheck.too_slow],
)


def close(a: float, b: float, rel: float, abs_: float = 0.0) -> bool:
    return math.isclose(a, b, rel_tol=rel, abs_tol=abs_)


@st.composite
def frames(draw, weighted: bool = False) -> pd.DataFrame:
    seed = draw(st.integers(0, 2**32 - 1))
    c = draw(st.integers(3, 8))
    bend = draw(st.sampled_from([0.0, 0.2, 3.0]))
    rng = np.random.default_rng(seed)
    levels = np.sort(rng.choice(np.arange(-20, 40), size=c, replace=False)).astype(float) / 4
    reps = rng.integers(2, 5, size=c)
    x = np.repeat(levels, reps)
    u = (x - levels.mean()) / np.ptp(levels)
    y = 10 + 5 * u + bend * u**2 + 0.3 * rng.standard_normal(x.size)
    frame = pd.DataFrame({"x": x, "y": y})
    if weighted:
        frame["w"] = rng.uniform(0.3, 3.0, size=x.size)
    return frame


def _check(frame: pd.DataFrame, **kw):
    return engine.check(engine.make_study(frame, y="y", x="x", **kw))


# ----------------------------------------------------------------------------- the split


@REPEATABLE
@given(frames())
def test_sse_splits_into_lack_and_pure_error(frame):
    result = _check(frame)
    lof = result.lack_of_fit
    # independent pieces: SSE from numpy lstsq on the rows, SS_pure from pandas groupby
    x, y = frame["x"].to_numpy(), frame["y"].to_numpy()
    design = np.column_stack([np.ones_like(x), x])
    beta, *_ = np.linalg.lstsq(design, y, rcond=None)
    sse = float(((y - design @ beta) ** 2).sum())
    dev = frame["y"] - frame.groupby("x")["y"].transform("mean")
    ss_pure = float((dev**2).sum())
    assert close(lof.ss_pure, ss_pure, 1e-9)
    assert close(result.fit.sse, sse, 1e-9)
    assert close(lof.ss_lack + lof.ss_pure, sse, 1e-9)
    # SS_lack = Σ n_j (ȳ_j − ŷ_j)² from the per-level rows
    ss_lack = sum(r.n * r.residual**2 for r in result.level_rows)
    assert close(lof.ss_lack, ss_lack, 1e-9, abs_=1e-12 * sse)
    assert lof.df_lack + lof.df_pure == result.fit.df_resid
    # the ANOVA rows carry the same split
    rows = {r.source: r for r in result.anova}
    assert close(rows["lack of fit"].ss + rows["pure error"].ss, rows["residual"].ss, 1e-12)


# ----------------------------------------------------------------------------- invariances


@REPEATABLE
@given(frames(weighted=True), st.integers(0, 10_000), st.booleans())
def test_row_order_does_not_matter(frame, seed, weighted):
    kw = {"weights": "w"} if weighted else {}
    a = _check(frame, **kw)
    b = _check(frame.sample(frac=1.0, random_state=seed).reset_index(drop=True), **kw)
    for u, v in zip(a.fit.coefficients, b.fit.coefficients, strict=True):
        assert close(u.estimate, v.estimate, 1e-10, abs_=1e-12)
        assert close(u.se, v.se, 1e-10)
    assert close(a.fit.sse, b.fit.sse, 1e-10)
    assert close(a.lack_of_fit.f, b.lack_of_fit.f, 1e-10, abs_=1e-12)
    assert close(a.lack_of_fit.p, b.lack_of_fit.p, 1e-10, abs_=1e-300)
    assert close(a.criteria.aicc, b.criteria.aicc, 1e-10)


@REPEATABLE
@given(
    frames(),
    st.sampled_from([-4.0, 0.5, 2.0, 256.0, -3.7, 0.001]),
    st.sampled_from([0.0, -128.0, 1024.0]),
)
def test_affine_change_of_x(frame, scale, shift):
    a = _check(frame)
    moved = frame.assign(x=scale * frame["x"] + shift)
    b = _check(moved)
    # Tolerance: 1e-9, plus what rounding the moved x itself costs (exact for the binary scales
    # and shifts; for 0.001·x + 1024 each value carries eps·|shift| of noise against a spread
    # of |scale|·ptp(x)).
    kappa = np.finfo(float).eps * abs(shift) / (abs(scale) * np.ptp(frame["x"]))
    rel = 1e-9 + 100 * kappa
    assert close(a.fit.sse, b.fit.sse, rel)
    assert close(a.lack_of_fit.f, b.lack_of_fit.f, rel, abs_=1e-10)
    assert close(a.lack_of_fit.p, b.lack_of_fit.p, rel, abs_=1e-300)
    assert close(a.mandel.statistic, b.mandel.statistic, 10 * rel, abs_=1e-9)
    a0, a1 = a.fit.coefficients
    b0, b1 = b.fit.coefficients
    assert close(b1.estimate, a1.estimate / scale, rel)  # slope scales by 1/scale
    assert close(b1.se, a1.se / abs(scale), rel)
    assert close(b1.t, a1.t * math.copysign(1, scale), rel)
    # intercept moves to b0 = a0 − a1·shift/scale
    expect = a0.estimate - a1.estimate * shift / scale
    assert close(b0.estimate, expect, rel, abs_=rel * abs(a1.estimate * shift / scale))


# ----------------------------------------------------------------------------- grouped = full data


@REPEATABLE
@given(frames(weighted=True), st.integers(1, 3), st.booleans())
def test_group_statistics_fit_equals_row_fit(frame, degree, weighted):
    x, y = frame["x"].to_numpy(), frame["y"].to_numpy()
    w = frame["w"].to_numpy() if weighted else None
    codes, levels = pd.factorize(x, sort=True)
    levels = np.asarray(levels, float)
    stats = compute_group_stats(codes.astype(np.intp), levels.size, y, w)
    fit = fit_design(stats, poly_design(levels, degree, name="x"))
    # independent: numpy lstsq on the rows in raw powers (|x| ≤ 10, degree ≤ 3: well conditioned)
    rows = np.vander(x, degree + 1, increasing=True)
    sw = np.ones_like(y) if w is None else np.sqrt(w)
    beta, *_ = np.linalg.lstsq(rows * sw[:, None], y * sw, rcond=None)
    sse = float((((y - rows @ beta) * sw) ** 2).sum())
    assert close(fit.sse, sse, 1e-9, abs_=1e-12 * float((y * y).sum()))
    if levels.size <= degree:
        # more terms than settings: the fit must say so (rank and aliased terms), not invent them
        assert fit.rank == levels.size
        assert len(fit.aliased) == degree + 1 - levels.size
        return
    ours = np.array([c.estimate for c in fit.coefficients])
    np.testing.assert_allclose(ours, beta, rtol=1e-8, atol=1e-10 * np.abs(beta).max())
    assert fit.rank == degree + 1
    assert fit.df_resid == len(y) - degree - 1


# ----------------------------------------------------------------------------- tolerance grouping


def _near_replicates(seed: int = 1) -> pd.DataFrame:
    """Five settings 0, 2.5, 5, 7.5, 10, each hit four times with a jitter of at most ±0.1."""
    rng = np.random.default_rng(seed)
    cluster = np.repeat(np.arange(5), 4)
    x = np.array([0.0, 2.5, 5.0, 7.5, 10.0])[cluster] + rng.uniform(-0.1, 0.1, cluster.size)
    y = 1 + 2 * x + 0.3 * x**2 + rng.standard_normal(cluster.size)
    return pd.DataFrame({"x": x, "y": y, "g": cluster})


@pytest.mark.parametrize("tolerance", ["0.3", 0.3, "5%"])
def test_tolerance_merges_near_values_and_says_approximate(tolerance):
    frame = _near_replicates()
    assert frame["x"].nunique() == 20  # no exact repeats at all
    study = engine.make_study(frame, y="y", x="x", tolerance=tolerance)
    result = engine.check(study)
    assert study.c == 5
    # the five groups are exactly the five clusters
    pairs = pd.crosstab(study.x_codes, frame["g"].to_numpy())
    assert ((pairs > 0).sum(axis=1) == 1).all() and ((pairs > 0).sum(axis=0) == 1).all()
    assert result.grouped_approximately
    lof = result.lack_of_fit
    assert lof.testable and lof.approximate
    assert "approximate" in result.verdict
    assert result.as_json()["lack_of_fit"]["approximate"] is True
    # reference: Christensen (1989), from memory — the near-replicate test is the exact F of the
    # line against the line plus cluster indicators; computed with statsmodels anova_lm
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = anova_lm(smf.ols("y ~ x", frame).fit(), smf.ols("y ~ x + C(g)", frame).fit()).iloc[1]
    assert (lof.df_lack, lof.df_pure) == (int(ref["df_diff"]), int(ref["df_resid"]))
    assert close(lof.f, ref["F"], 1e-9)
    assert close(lof.p, ref["Pr(>F)"], 1e-9, abs_=1e-300)
    # the line itself is still the full-data line
    line = smf.ols("y ~ x", frame).fit()  # reference: statsmodels ols
    assert close(result.fit.coefficients[1].estimate, line.params["x"], 1e-9)
    assert close(result.fit.sse, line.ssr, 1e-9)


def test_relative_tolerance_is_a_share_of_the_x_range():
    frame = _near_replicates()
    # range ≈ 10, so 5% ≈ 0.5 merges the clusters, 0.5% ≈ 0.05 leaves most values apart
    assert engine.make_study(frame, y="y", x="x", tolerance="5%").c == 5
    narrow = engine.make_study(frame, y="y", x="x", tolerance="0.5%")
    assert narrow.c > 10
    wide = engine.make_study(frame.assign(x=frame["x"] * 100), y="y", x="x", tolerance="5%")
    assert wide.c == 5  # scaling x leaves a relative tolerance's grouping unchanged
    absolute = engine.make_study(frame.assign(x=frame["x"] * 100), y="y", x="x", tolerance="0.3")
    assert absolute.c > 10  # while an absolute one no longer merges


def test_tolerance_that_merges_nothing_keeps_the_exact_test():
    frame = pd.DataFrame({"x": np.repeat([1.0, 2.0, 3.0, 4.0], 3)})
    rng = np.random.default_rng(3)
    frame["y"] = frame["x"] + rng.standard_normal(12)
    exact = _check(frame)
    tolerant = _check(frame, tolerance="0.1")
    assert not tolerant.grouped_approximately
    assert not tolerant.lack_of_fit.approximate
    assert tolerant.lack_of_fit.kind == exact.lack_of_fit.kind == "pure error"
    assert close(tolerant.lack_of_fit.f, exact.lack_of_fit.f, 1e-12)


# ----------------------------------------------------------------------------- spread test


def test_spread_test_with_only_duplicate_pairs_is_not_run():
    """With two rows per level both deviations from the level median are equal, so the
    Brown–Forsythe within-level sum of squares is exactly 0 and F is a ratio of rounding noise
    (scipy.stats.levene prints ~1e29 here). The test must be reported as not runnable."""
    frame = pd.DataFrame({"x": [1.0, 1, 2, 2, 3, 3, 4, 4], "y": [1.0, 1.2, 2.0, 2.3, 2.9, 3.1, 4.4, 4.0]})
    spread = _check(frame).spread
    assert not spread.testable, f"F = {spread.statistic} from rounding noise"
    assert spread.reason


def test_spread_test_with_one_larger_level_still_runs():
    frame = pd.DataFrame(
        {"x": [1.0, 1, 1, 2, 2, 3, 3, 4, 4], "y": [1.0, 1.2, 1.1, 2.0, 2.3, 2.9, 3.1, 4.4, 4.0]}
    )
    spread = _check(frame).spread
    ref = sps.levene(
        [1.0, 1.2, 1.1], [2.0, 2.3], [2.9, 3.1], [4.4, 4.0], center="median"
    )  # reference: scipy.stats.levene(center='median')
    assert spread.testable
    assert close(spread.statistic, ref.statistic, 1e-9)
    assert close(spread.p, ref.pvalue, 1e-9)
