"""Power of the lack-of-fit and x² tests, detectable bends and the design search.

Tolerances: closed-form checks to 1e-9 relative; Monte Carlo rejection rates within 3.5
simulation standard errors of the computed power (seeded, so the outcome is fixed).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from bendwise.engine.errors import UsageError
from bendwise.engine.plan.power import (
    CURVATURE,
    LACK_OF_FIT,
    design_power,
    detectable_delta,
    search_designs,
    sigma_from_pure_error,
    spaced_levels,
)
from scipy import stats

# ---------------------------------------------------------------- simulation of the real tests


def _simulate(levels, reps, means, sigma, alpha, n_sim, seed):
    """Rejection rates of both tests on normal data drawn at the design.

    The tests are run the textbook way on the expanded data, independently of engine.plan:
    lack of fit = [(SSE_line − SS_pure)/(c−2)] / [SS_pure/(n−c)], and the x² test =
    (SSE_line − SSE_quad) / [SSE_quad/(n−3)].
    """
    # reference: definitions in METHODS.md ("Pure-error lack of fit", "Mandel's fitting test");
    # critical values from scipy.stats.f
    levels = np.asarray(levels, float)
    reps = np.broadcast_to(np.asarray(reps), levels.shape)
    x = np.repeat(levels, reps)
    mu = np.repeat(np.asarray(means, float), reps)
    n, c = x.size, levels.size
    rng = np.random.default_rng(seed)
    y = mu + sigma * rng.standard_normal((n_sim, n))

    def sse(columns):
        q, _ = np.linalg.qr(np.column_stack(columns))
        resid = y - (y @ q) @ q.T
        return np.sum(resid**2, axis=1)

    xs = (x - x.mean()) / x.std()
    sse_line = sse([np.ones(n), xs])
    sse_quad = sse([np.ones(n), xs, xs**2])
    starts = np.concatenate([[0], np.cumsum(reps)[:-1]])
    group_mean = np.add.reduceat(y, starts, axis=1) / reps
    ss_pure = np.sum((y - np.repeat(group_mean, reps, axis=1)) ** 2, axis=1)

    f_quad = (sse_line - sse_quad) / (sse_quad / (n - 3))
    rej_quad = float(np.mean(f_quad > stats.f.isf(alpha, 1, n - 3)))
    if n == c:  # no pure error: only the x² test exists
        return None, rej_quad
    f_lack = ((sse_line - ss_pure) / (c - 2)) / (ss_pure / (n - c))
    rej_lack = float(np.mean(f_lack > stats.f.isf(alpha, c - 2, n - c)))
    return rej_lack, rej_quad


def _true_means(dp, intercept=3.0, slope=0.25):
    """Any straight line plus the design's deviations: the tests cannot see the line part."""
    return intercept + slope * np.asarray(dp.levels) + np.asarray(dp.deviations)


SIM_CASES = [
    # (levels, replicates, delta, means, sigma, seed)
    ((0, 5, 10, 20, 40), 3, 0.6, None, 0.6, 11),  # quadratic bend, equal replicates
    ((0, 1, 2, 3), 2, 1.1, None, 1.0, 12),  # smallest useful design
    ((1, 2, 4, 8, 16), (2, 4, 2, 3, 5), None, [0, 1, 1.3, 1.45, 1.5], 0.35, 13),  # sharp knee
    ((0, 1, 2, 3, 4, 5), 3, 0.45, [0, 0, 0, 0, 0.2, 1.0], 0.45, 14),  # late kink, rescaled
]


@pytest.mark.parametrize(("levels", "reps", "delta", "means", "sigma", "seed"), SIM_CASES)
def test_power_matches_monte_carlo(levels, reps, delta, means, sigma, seed):
    n_sim = 5000
    dp = design_power(levels, reps, delta=delta, means=means, sigma=sigma, alpha=0.05)
    rej_lack, rej_quad = _simulate(levels, reps, _true_means(dp), sigma, 0.05, n_sim, seed)
    for computed, observed in (
        (dp.lack_of_fit.power, rej_lack),
        (dp.curvature.power, rej_quad),
    ):
        se = math.sqrt(computed * (1 - computed) / n_sim)
        assert abs(observed - computed) <= 3.5 * se, (computed, observed, se)
    # the cases are chosen so the check has teeth: power well away from 0 and 1
    assert 0.1 < dp.lack_of_fit.power < 0.95


def test_non_quadratic_curve_needs_the_doubly_noncentral_denominator():
    # The sharp knee puts much of the curve into the x² test's residual; ignoring that
    # overstates power by far more than the simulation error, so the Monte Carlo test above
    # checks the doubly noncentral computation.
    levels, reps, _, means, sigma, _ = SIM_CASES[2]
    dp = design_power(levels, reps, means=means, sigma=sigma)
    cv = dp.curvature
    assert cv.den_noncentrality > 5
    # reference: scipy.stats.ncf (singly noncentral, i.e. denominator noncentrality ignored)
    naive = stats.ncf.sf(cv.critical_f, cv.df_num, cv.df_den, cv.noncentrality)
    assert naive - cv.power > 3.5 * math.sqrt(cv.power * (1 - cv.power) / 5000)


def test_curvature_power_without_replicates_matches_monte_carlo():
    # the calibration-style design: 10 levels, one measurement each; only the x² test applies
    levels = spaced_levels(10, 0, 9)
    dp = design_power(levels, 1, delta=0.5, sigma=0.3, tests=[CURVATURE])
    assert dp.lack_of_fit is None
    n_sim = 5000
    _, rej = _simulate(levels, 1, _true_means(dp), 0.3, 0.05, n_sim, 21)
    p = dp.curvature.power
    assert 0.1 < p < 0.95
    assert abs(rej - p) <= 3.5 * math.sqrt(p * (1 - p) / n_sim)


# ---------------------------------------------------------------- closed forms and limits


def test_hand_computed_noncentrality_against_scipy_ncf():
    # x = 0,1,2,3 and μ = x²: the line through the means is −1 + 3x, deviations (1, −1, −1, 1),
    # so δ = 1 and with 2 replicates and σ = 2: λ = 2·(1+1+1+1)/4 = 2 (hand computation).
    dp = design_power([0, 1, 2, 3], 2, delta=1.0, sigma=2.0, alpha=0.05)
    np.testing.assert_allclose(dp.deviations, [1, -1, -1, 1], atol=1e-12)
    for tp, (d1, d2) in ((dp.lack_of_fit, (2, 4)), (dp.curvature, (1, 5))):
        assert (tp.df_num, tp.df_den) == (d1, d2)
        assert tp.noncentrality == pytest.approx(2.0, rel=1e-12)
        assert tp.den_noncentrality == 0.0
        # reference: scipy.stats.ncf and scipy.stats.f
        crit = stats.f.isf(0.05, d1, d2)
        assert tp.critical_f == pytest.approx(crit, rel=1e-12)
        assert tp.power == pytest.approx(stats.ncf.sf(crit, d1, d2, 2.0), rel=1e-10)


@pytest.mark.parametrize("alpha", [0.01, 0.05, 0.1])
def test_tiny_bend_gives_power_alpha(alpha):
    dp = design_power([0, 2, 5, 9, 14], 4, delta=1e-7, sigma=1.0, alpha=alpha)
    assert dp.lack_of_fit.power == pytest.approx(alpha, abs=1e-9)
    assert dp.curvature.power == pytest.approx(alpha, abs=1e-9)
    assert dp.lack_of_fit.power >= alpha  # approached from above


def test_more_replicates_never_lower_power():
    levels = (0, 5, 10, 20, 40)
    for delta in (0.3, 1.0, 2.5):
        lack = [design_power(levels, r, delta=delta).lack_of_fit.power for r in range(2, 11)]
        curv = [
            design_power(levels, r, delta=delta, tests=[CURVATURE]).curvature.power
            for r in range(1, 11)
        ]
        for seq in (lack, curv):
            # strictly rising until power is 1 to machine precision
            assert all(b > a or a > 1 - 1e-9 for a, b in zip(seq, seq[1:], strict=False)), seq
            assert all(b >= a for a, b in zip(seq, seq[1:], strict=False)), seq
    # one more observation at any single level, from an unbalanced start, for a non-quadratic curve
    means = [0.0, 1.0, 1.7, 2.0, 2.1]
    base = [2, 3, 2, 4, 2]
    p0 = design_power(levels, base, means=means, sigma=0.5)
    for j in range(5):
        more = list(base)
        more[j] += 1
        p1 = design_power(levels, more, means=means, sigma=0.5)
        assert p1.lack_of_fit.power >= p0.lack_of_fit.power
        assert p1.curvature.power >= p0.curvature.power


def test_quadratic_bend_shape_and_size():
    levels = (0.5, 1.0, 3.0, 7.0, 7.5, 20.0)
    dp = design_power(levels, [2, 5, 2, 2, 3, 4], delta=0.37, sigma=0.2)
    dev = np.asarray(dp.deviations)
    assert np.max(np.abs(dev)) == pytest.approx(0.37, rel=1e-12)
    x = np.asarray(levels)
    # deviations are measured from the unweighted line: orthogonal to 1 and x
    assert abs(dev.sum()) < 1e-12 and abs(dev @ x) < 1e-10
    # and they are a quadratic: third differences of a quadratic fit vanish
    assert np.allclose(np.polyval(np.polyfit(x, dev, 2), x), dev, atol=1e-12)
    # for a pure quadratic all lack of fit is curvature
    assert dp.curvature.noncentrality == pytest.approx(dp.lack_of_fit.noncentrality, rel=1e-10)
    assert dp.curvature.den_noncentrality == 0.0


def test_large_offsets_in_x_do_not_lose_precision():
    # levels around 1e6: a naive x² column would be ill-conditioned
    a = design_power([0, 1, 2, 3, 4], 3, delta=1.0)
    b = design_power([1e6 + v for v in (0, 1, 2, 3, 4)], 3, delta=1.0)
    assert b.lack_of_fit.power == pytest.approx(a.lack_of_fit.power, rel=1e-9)
    assert b.curvature.power == pytest.approx(a.curvature.power, rel=1e-9)


def test_three_levels_make_both_tests_the_same():
    # with c = 3 the quadratic passes through the three means, so the tests coincide
    dp = design_power([0, 1, 3], 4, delta=0.8, sigma=0.5)
    assert (dp.lack_of_fit.df_num, dp.lack_of_fit.df_den) == (1, 9)
    assert (dp.curvature.df_num, dp.curvature.df_den) == (1, 9)
    assert dp.curvature.power == pytest.approx(dp.lack_of_fit.power, rel=1e-10)


def test_curvature_test_beats_lack_of_fit_for_a_quadratic():
    # METHODS.md: the 1-df test is more powerful against a quadratic bend when c ≥ 4
    for c in range(4, 10):
        dp = design_power(spaced_levels(c, 0, 1), 3, delta=0.7)
        assert dp.curvature.power > dp.lack_of_fit.power


def test_given_means_split_into_curvature_and_rest():
    dp = design_power([0, 1, 2, 3, 4], 3, means=[0, 1, 1, 1, 0], sigma=1.0)
    # hand computation: deviations from the line are (−0.6, 0.4, 0.4, 0.4, −0.6),
    # λ_lack = 3·(0.36·2 + 0.16·3) = 3.6
    np.testing.assert_allclose(dp.deviations, [-0.6, 0.4, 0.4, 0.4, -0.6], atol=1e-12)
    assert dp.delta == pytest.approx(0.6)
    assert dp.lack_of_fit.noncentrality == pytest.approx(3.6, rel=1e-12)
    total = dp.curvature.noncentrality + dp.curvature.den_noncentrality
    assert total == pytest.approx(dp.lack_of_fit.noncentrality, rel=1e-12)
    assert dp.curvature.den_noncentrality > 0


def test_noncentralities_match_statsmodels_on_noise_free_data():
    # reference: statsmodels ols (formula API) — on data equal to the true means, the line's SSR
    # is σ²·λ_lack, SSR(line) − SSR(line + x²) (the partial-F numerator, 1 df) is σ²·λ_x², and
    # SSR(line + x²) is σ² times the x² test's denominator noncentrality.
    import pandas as pd
    from statsmodels.formula.api import ols

    levels = [0.2, 1.0, 2.5, 4.0, 6.0, 9.0]
    reps = [3, 2, 5, 2, 4, 3]
    means = [1.0, 2.9, 5.1, 6.0, 6.3, 6.1]
    sigma = 0.35
    dp = design_power(levels, reps, means=means, sigma=sigma)
    data = pd.DataFrame({"x": np.repeat(levels, reps), "y": np.repeat(means, reps)})
    line = ols("y ~ x", data).fit()
    quad = ols("y ~ x + I(x**2)", data).fit()
    s2 = sigma**2
    assert dp.lack_of_fit.noncentrality * s2 == pytest.approx(line.ssr, rel=1e-9)
    assert dp.curvature.noncentrality * s2 == pytest.approx(line.ssr - quad.ssr, rel=1e-9)
    assert dp.curvature.den_noncentrality * s2 == pytest.approx(quad.ssr, rel=1e-9)

    # and for a quadratic bend the residual of the quadratic fit is zero
    dq = design_power(levels, reps, delta=0.5, sigma=sigma)
    yq = np.repeat(np.asarray(dq.deviations) + 2.0 - 0.1 * np.asarray(levels), reps)
    qd = pd.DataFrame({"x": np.repeat(levels, reps), "y": yq})
    ql = ols("y ~ x", qd).fit()
    qq = ols("y ~ x + I(x**2)", qd).fit()
    assert dq.curvature.noncentrality * s2 == pytest.approx(ql.ssr - qq.ssr, rel=1e-9)
    assert qq.ssr < 1e-20 * ql.ssr + 1e-24


# ---------------------------------------------------------------- detectable δ and search


@pytest.mark.parametrize("test", [LACK_OF_FIT, CURVATURE])
@pytest.mark.parametrize(
    ("levels", "reps", "means"),
    [
        ((0, 5, 10, 20, 40), 3, None),
        ((1, 2, 4, 8, 16), (2, 4, 2, 3, 5), [3.0, 4.8, 6.6, 7.9, 8.6]),
    ],
)
def test_detectable_delta_reproduces_target(test, levels, reps, means):
    for target in (0.5, 0.8, 0.95):
        d = detectable_delta(
            levels, reps, test=test, target=target, sigma=0.7, alpha=0.05, means=means
        )
        assert d is not None and d > 0
        dp = design_power(levels, reps, delta=d, means=means, sigma=0.7, alpha=0.05)
        got = getattr(dp, test).power
        assert got == pytest.approx(target, abs=1e-8)
        # smallest: a little less falls short
        lower = design_power(levels, reps, delta=d * 0.999, means=means, sigma=0.7)
        assert getattr(lower, test).power < target


def test_detectable_delta_scales_with_sigma():
    a = detectable_delta([0, 1, 2, 3, 4], 3, test=LACK_OF_FIT, sigma=1.0)
    b = detectable_delta([0, 1, 2, 3, 4], 3, test=LACK_OF_FIT, sigma=2.5)
    assert b == pytest.approx(2.5 * a, rel=1e-9)


def test_search_over_spaced_levels_picks_the_cheapest():
    ps = search_designs(span=(0, 40), delta=0.6, sigma=0.4, alpha=0.05, target=0.8)
    assert len(ps.rows) == 9 * 9
    assert {r.level_count for r in ps.rows} == set(range(4, 13))
    assert {r.replicates for r in ps.rows} == set(range(2, 11))
    for test in (LACK_OF_FIT, CURVATURE):
        ch = getattr(ps, test)
        assert ch is not None and ch.power >= 0.8
        for r in ps.rows:
            if r.total < ch.design.total:
                assert r.power(test) < 0.8
            if r.total == ch.design.total and r.power(test) >= 0.8:
                assert r.power(test) <= ch.power
        # the planned bend is caught with at least the target, so the detectable one is smaller
        assert ch.detectable_delta is not None and ch.detectable_delta <= 0.6
        dp = design_power(
            ch.design.levels, ch.design.replicates, delta=ch.detectable_delta, sigma=0.4
        )
        assert getattr(dp, test).power == pytest.approx(0.8, abs=1e-8)
    # each row agrees with a direct computation
    r = ps.rows[17]
    dp = design_power(r.levels, r.replicates, delta=0.6, sigma=0.4)
    assert r.power_lack_of_fit == dp.lack_of_fit.power
    assert r.power_curvature == dp.curvature.power


def test_search_with_fixed_levels_varies_replicates_only():
    levels = (0, 5, 10, 20, 40)
    ps = search_designs(levels=levels, delta=1.0, sigma=1.0, target=0.9)
    assert ps.fixed_levels
    assert [r.replicates for r in ps.rows] == list(range(2, 11))
    assert all(r.levels == tuple(map(float, levels)) for r in ps.rows)
    assert ps.lack_of_fit is not None and ps.curvature is not None
    assert ps.curvature.design.total <= ps.lack_of_fit.design.total


def test_search_reports_none_when_nothing_reaches_target():
    ps = search_designs(levels=(0, 1, 2, 3), delta=0.05, sigma=1.0, target=0.9)
    assert ps.lack_of_fit is None and ps.curvature is None


# ---------------------------------------------------------------- σ from pure error


def test_sigma_upper_bound_covers_at_its_level():
    # reference: common practice — SS_pure/σ² ~ χ²(df); check the bound's coverage by simulation
    rng = np.random.default_rng(5)
    sigma, df, conf = 1.3, 7, 0.9
    ss = sigma**2 * rng.chisquare(df, size=4000)
    covered = [sigma <= sigma_from_pure_error(s, df, conf).sigma for s in ss]
    rate = float(np.mean(covered))
    assert abs(rate - conf) <= 3.5 * math.sqrt(conf * (1 - conf) / ss.size)


def test_sigma_estimate_without_bound():
    est = sigma_from_pure_error(8.0, 8)
    assert est.sigma == est.estimate == pytest.approx(1.0)
    assert est.upper is None and est.confidence is None
    with_bound = sigma_from_pure_error(8.0, 8, 0.95)
    assert with_bound.sigma == with_bound.upper > with_bound.estimate


# ---------------------------------------------------------------- refusals


BAD = [
    (lambda: design_power([0, 1], 3, delta=1), "levels", "2 distinct"),
    (lambda: design_power([0, 1, 1], 3, delta=1), "levels", "listed twice"),
    (lambda: design_power([0, "abc", 2], 3, delta=1), "levels", "'abc'"),
    (lambda: design_power([0, None, 2], 3, delta=1), "levels", "None"),
    (lambda: design_power([0, float("nan"), 2], 3, delta=1), "levels", "nan"),
    (lambda: design_power([0, 1, 2], 3, delta=0), "delta", "0"),
    (lambda: design_power([0, 1, 2], 3, delta=-0.5), "delta", "-0.5"),
    (lambda: design_power([0, 1, 2], 3, delta=1, sigma=0), "sigma", "0"),
    (lambda: design_power([0, 1, 2], 3, delta=1, sigma=-2), "sigma", "-2"),
    (lambda: design_power([0, 1, 2], 0, delta=1), "replicates", "0"),
    (lambda: design_power([0, 1, 2], [2, 0, 2], delta=1), "replicates", "0"),
    (lambda: design_power([0, 1, 2], 2.5, delta=1), "replicates", "2.5"),
    (lambda: design_power([0, 1, 2], [2, 2], delta=1), "replicates", "2 counts"),
    (lambda: design_power([0, 1, 2, 3], 1, delta=1), "replicates", "no pure error"),
    (lambda: design_power([0, 1, 2], 3, delta=1, alpha=1.5), "alpha", "1.5"),
    (lambda: design_power([0, 1, 2], 3), "delta", "not given"),
    (lambda: design_power([0, 1, 2], 3, means=[1, 2, 3]), "means", "straight line"),
    (lambda: design_power([0, 1, 2], 3, means=[1, 2]), "means", "2 values"),
    (lambda: design_power([0, 1, 2], 3, means=[1, "x", 2]), "means", "'x'"),
    (lambda: detectable_delta([0, 1, 2], 3, test=LACK_OF_FIT, target=1.2), "target power", "1.2"),
    (lambda: detectable_delta([0, 1, 2], 3, test=LACK_OF_FIT, target=0), "target power", "0"),
    (lambda: detectable_delta([0, 1, 2], 3, test=CURVATURE, target=0.03), "target power", "0.03"),
    (lambda: detectable_delta([0, 1, 2], 3, test="other"), "test", "'other'"),
    (lambda: search_designs(levels=[0, 1, 2], delta=1, target=1.0), "target power", "1.0"),
    (lambda: search_designs(span=(0, 1), delta=1, means=[1, 2, 3]), "means", "fixed levels"),
    (lambda: search_designs(delta=1), "levels", "none or both"),
    (lambda: design_power([0, 1, 2], 3, delta=1, tests=["omnibus"]), "test", "'omnibus'"),
    (lambda: search_designs(levels=[0, 1, 2], delta=1, replicates=[0, 2]), "replicates", "0"),
    (lambda: spaced_levels(2, 0, 1), "levels", "2"),
    (lambda: spaced_levels(5, 3, 1), "range", "3"),
    (lambda: sigma_from_pure_error(1.0, 0), "pure error", "0"),
    (lambda: sigma_from_pure_error(0.0, 4), "pure error", "0.0"),
    (lambda: sigma_from_pure_error(1.0, 4, 1.0), "sigma upper", "1.0"),
]


@pytest.mark.parametrize(("call", "name", "value"), BAD)
def test_bad_input_is_refused_with_a_one_line_message(call, name, value):
    with pytest.raises(UsageError) as info:
        call()
    msg = str(info.value)
    assert "\n" not in msg
    assert msg.startswith(name + ":"), msg
    assert value in msg, msg
    assert ";" in msg  # says what to do after the semicolon
