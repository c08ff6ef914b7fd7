"""Predictions from a handed-on spec against outside references.

- inverse prediction: the Miller & Miller fluorescence example (values as printed), and the exact
  Fieller interval against a direct numeric solution of its defining inequality;
- forward prediction: statsmodels ``get_prediction`` (mean confidence interval and observation
  prediction interval), to 1e-8 relative.
"""

from __future__ import annotations

import math
from pathlib import Path

import bendwise.engine as engine
import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from bendwise.engine.handon.export import build_spec
from bendwise.engine.handon.inverse import fieller_line, inverse_predict
from bendwise.engine.handon.predict import predict_forward
from bendwise.engine.handon.specfile import validate_spec
from scipy import optimize, stats

DATASETS = Path(__file__).resolve().parents[2] / "datasets"

# source: Miller & Miller, Statistics and Chemometrics for Analytical Chemistry, ch. 5,
# fluorescence calibration (data as listed in shared/reference/README.md)
MM_X = [0, 2, 4, 6, 8, 10, 12]
MM_Y = [2.1, 5.0, 9.0, 12.6, 17.3, 21.0, 24.7]


def _model(frame, y, x, *, covariates=(), weights=None, depth=0, pick=None):
    study = engine.make_study(frame, y=y, x=x, covariates=list(covariates), weights=weights, source="t.csv")
    tree = engine.grow(study, depth=depth)
    node = "root" if pick is None else next(n.id for n in tree.nodes.values() if n.score is not None and pick(n.spec))
    doc = build_spec(tree, node)
    return tree.nodes[node], validate_spec(doc)


@pytest.fixture(scope="module")
def mm():
    return _model(pd.DataFrame({"x": MM_X, "y": MM_Y}), "y", "x")[1]


# ----------------------------------------------------------------------------- inverse

def test_miller_and_miller_fluorescence(mm):
    b0, b1 = mm.beta
    # reference: Miller & Miller (book values from memory; reproduced): b = 1.9304, a = 1.5179, s = 0.43285
    assert abs(b1 - 1.9304) < 5e-5
    assert abs(b0 - 1.5179) < 5e-5
    assert abs(mm.sigma - 0.43285) < 5e-6
    rows = inverse_predict(mm, np.array([2.9, 13.5, 23.0]))
    # reference: Miller & Miller, x̂₀ = 0.72, 6.21, 11.13 and s_x0 = 0.26, 0.24, 0.26 (2 decimals as printed;
    # book values from memory)
    for row, x_book, s_book in zip(rows, (0.72, 6.21, 11.13), (0.26, 0.24, 0.26), strict=True):
        assert abs(row.x - x_book) <= 0.005 + 1e-12
        assert abs(row.s_x0 - s_book) <= 0.005 + 1e-12
        assert row.interval == "finite" and row.method.startswith("closed form")
        assert row.low < row.x < row.high


def _direct_fieller(x, y, y0, m, level):
    """The Fieller set's ends by root finding on its defining inequality (independent of the engine)."""
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    n = x.size
    b1, b0 = np.polyfit(x, y, 1)
    s2 = np.sum((y - b0 - b1 * x) ** 2) / (n - 2)
    sxx = np.sum((x - x.mean()) ** 2)
    t = stats.t.ppf(0.5 + level / 2, n - 2)

    def f(v):
        return (y0 - b0 - b1 * v) ** 2 - t * t * s2 * (1 / m + 1 / n + (v - x.mean()) ** 2 / sxx)

    xh = (y0 - b0) / b1
    span = 1e3 * (x.max() - x.min())
    return optimize.brentq(f, xh - span, xh, xtol=1e-14), optimize.brentq(f, xh, xh + span, xtol=1e-14), \
        t * t * s2 / (b1 * b1 * sxx)


@pytest.mark.parametrize("y0,m,level", [(2.9, 1, 0.95), (13.5, 3, 0.95), (23.0, 2, 0.99), (30.0, 1, 0.9)])
def test_fieller_interval_against_a_direct_numeric_solution(mm, y0, m, level):
    # reference: Fieller/Eisenhart (1939) interval = the x where the prediction band contains y0,
    # solved here directly with scipy brentq on the defining inequality
    lo, hi, g = _direct_fieller(MM_X, MM_Y, y0, m, level)
    assert g < 1
    (row,) = inverse_predict(mm, np.array([y0]), replicates=m, level=level)
    assert row.interval == "finite"
    assert row.low == pytest.approx(lo, rel=1e-9) and row.high == pytest.approx(hi, rel=1e-9)
    assert row.g == pytest.approx(g, rel=1e-9)
    # our grid-and-refine solver, used for every other model, finds the same set
    (num,) = inverse_predict(mm, np.array([y0]), replicates=m, level=level, method="numeric")
    assert num.interval == "finite"
    assert num.low == pytest.approx(lo, rel=1e-8) and num.high == pytest.approx(hi, rel=1e-8)
    assert num.x == pytest.approx(row.x, rel=1e-10)


def test_non_significant_slope_gives_no_finite_interval():
    # a slope lost in the noise: t²s²/(b1²Sxx) ≥ 1, so the Fieller set cannot be a finite interval
    x = np.repeat([1.0, 2.0, 3.0, 4.0, 5.0], 2)
    y = np.array([5.1, 4.6, 4.9, 5.3, 4.7, 5.2, 5.0, 4.8, 5.3, 4.9])
    node, model = _model(pd.DataFrame({"x": x, "y": y}), "y", "x")
    b1, b0 = np.polyfit(x, y, 1)
    s2 = np.sum((y - b0 - b1 * x) ** 2) / (x.size - 2)
    g = stats.t.ppf(0.975, x.size - 2) ** 2 * s2 / (b1 * b1 * np.sum((x - x.mean()) ** 2))
    assert g >= 1  # common practice: the textbook criterion for a finite interval is g < 1
    probes = np.array([y.mean(), 5.6, 6.5, 3.0])
    closed = inverse_predict(model, probes)
    numeric = inverse_predict(model, probes, method="numeric")
    for row in closed:
        assert row.interval in {"unbounded", "split"} and row.low is None and row.high is None
        assert row.note and "g =" in row.note
    assert [r.interval for r in closed] == ["unbounded", "split", "split", "split"]
    # the grid solver agrees where the set's ends lie inside its searched range (the first two
    # probes); further out it reports no x within the range it searched, never a finite interval
    assert [r.interval for r in numeric[:2]] == ["unbounded", "split"]
    (_, r1), (r2, _) = closed[1].pieces
    (_, n1), (n2, _) = numeric[1].pieces
    assert n1 == pytest.approx(r1, rel=1e-8) and n2 == pytest.approx(r2, rel=1e-8)
    for row in numeric[2:]:
        assert row.interval == "none" and "searched range" in row.note


def test_fieller_cases_by_sign():
    # b1 = 1, Var(b1) = 0.01, t = 2: g = 0.04 → finite
    assert fieller_line(0.5, 1.0, 0.01, 0.0, 0.01, 0.01, 2.0)[0] == "finite"
    # Var(b1) large: A < 0; near the mean every x fits, far away two half lines
    assert fieller_line(0.0, 1.0, 0.01, 0.0, 1.0, 0.01, 2.0) == ("unbounded", ((None, None),))
    kind, pieces = fieller_line(10.0, 1.0, 0.01, 0.0, 1.0, 0.01, 2.0)
    assert kind == "split" and pieces[0][0] is None and pieces[1][1] is None
    # A = 0 exactly: a half line
    kind, pieces = fieller_line(1.0, 2.0, 0.0, 0.0, 1.0, 0.5, 2.0)
    assert kind == "unbounded" and len(pieces) == 1 and (pieces[0][0] is None) != (pieces[0][1] is None)


def test_inverse_of_a_curve_respects_monotonicity():
    # a quadratic that bends over beyond the calibrated range: only the monotone branch is searched
    x = np.repeat([0.0, 1, 2, 3, 4, 5, 6], 3)
    rng = np.random.default_rng(7)
    y = 2 + 3 * x - 0.2 * x**2 + rng.normal(0, 0.05, x.size)
    node, model = _model(pd.DataFrame({"x": x, "y": y}), "y", "x", depth=1, pick=lambda s: s.degree == 2)
    b = model.beta
    vertex = -b[1] / (2 * b[2])
    assert 6 < vertex < 18  # the turning point lies in the extended search range
    (row,) = inverse_predict(model, np.array([10.0]))
    # reference: direct solution of the fitted quadratic on its rising branch (numpy roots)
    roots = np.roots([b[2], b[1], b[0] - 10.0])
    want = min(r.real for r in roots if abs(r.imag) < 1e-12)
    assert row.x == pytest.approx(want, rel=1e-9) and row.interval == "finite"
    (top,) = inverse_predict(model, np.array([b[0] + b[1] * vertex + b[2] * vertex**2 + 5.0]))
    assert top.x is None and top.interval in {"none", "unbounded"}


# ----------------------------------------------------------------------------- forward

def _frame_pred(res, new, level, weights=None):
    kw = {} if weights is None else {"weights": weights}
    return res.get_prediction(new, **kw).summary_frame(alpha=1 - level)


def _compare(pred, sf):
    np.testing.assert_allclose(pred.fit, sf["mean"], rtol=1e-8)
    np.testing.assert_allclose(pred.ci_low, sf["mean_ci_lower"], rtol=1e-8)
    np.testing.assert_allclose(pred.ci_high, sf["mean_ci_upper"], rtol=1e-8)
    np.testing.assert_allclose(pred.pi_low, sf["obs_ci_lower"], rtol=1e-8)
    np.testing.assert_allclose(pred.pi_high, sf["obs_ci_upper"], rtol=1e-8)


@pytest.mark.parametrize("level", [0.95, 0.9])
def test_straight_line_against_statsmodels(level):
    frame = pd.read_csv(DATASETS / "straight_line.csv")
    _, model = _model(frame, "response_au", "dose_ug")
    new = pd.DataFrame({"dose_ug": [0.0, 7.5, 25.0, 40.0, 55.0]})
    pred = predict_forward(model, new["dose_ug"].to_numpy(), level=level)
    # reference: statsmodels OLS get_prediction().summary_frame (mean CI and observation PI)
    _compare(pred, _frame_pred(smf.ols("response_au ~ dose_ug", frame).fit(), new, level))
    assert pred.outside_range.tolist() == [False, False, False, False, True]


def test_quadratic_with_a_category_against_statsmodels():
    frame = pd.read_csv(DATASETS / "process_trial.csv")
    node, model = _model(frame, "yield_pct", "setpoint_c", covariates=["work_shift"], depth=2,
                         pick=lambda s: s.degree == 2 and s.covariates == ("work_shift",) and not s.interactions
                         and s.response.kind == "identity" and s.predictor.kind == "identity" and s.weights is None)
    new = pd.DataFrame({"setpoint_c": [150.0, 163.0, 177.5, 200.0, 210.0],
                        "work_shift": ["night", "early", "late", "late", "early"]})
    pred = predict_forward(model, new["setpoint_c"].to_numpy(), {"work_shift": new["work_shift"].to_numpy()})
    # reference: statsmodels OLS with the same model written as a formula
    res = smf.ols("yield_pct ~ setpoint_c + I(setpoint_c ** 2) + C(work_shift)", frame).fit()
    _compare(pred, _frame_pred(res, new, 0.95))


def test_numeric_interaction_against_statsmodels():
    frame = pd.read_csv(DATASETS / "sensor_calibration.csv")
    node, model = _model(frame, "signal_mv", "conc_mg_l", covariates=["temp_c"], depth=2,
                         pick=lambda s: s.interactions == ("temp_c",) and s.degree == 1
                         and s.response.kind == "identity" and s.weights is None)
    new = pd.DataFrame({"conc_mg_l": [0.0, 12.0, 55.0, 80.0], "temp_c": [22.0, 23.5, 24.1, 21.9]})
    pred = predict_forward(model, new["conc_mg_l"].to_numpy(), {"temp_c": new["temp_c"].to_numpy()})
    # reference: statsmodels OLS, same model as a formula
    res = smf.ols("signal_mv ~ conc_mg_l + temp_c + conc_mg_l:temp_c", frame).fit()
    _compare(pred, _frame_pred(res, new, 0.95))


def test_user_weights_against_statsmodels():
    rng = np.random.default_rng(11)
    x = np.repeat([1.0, 2.0, 4.0, 8.0, 16.0], 3)
    w = 1.0 / (0.1 + 0.05 * x) ** 2
    y = 0.4 + 1.7 * x + rng.normal(0, 1, x.size) / np.sqrt(w)
    frame = pd.DataFrame({"x": x, "y": y, "w": w})
    _, model = _model(frame, "y", "x", weights="w")
    x0 = np.array([1.5, 9.0, 20.0])
    w0 = 1.0 / (0.1 + 0.05 * x0) ** 2
    pred = predict_forward(model, x0, user_w=w0)
    # reference: statsmodels WLS get_prediction with the new points' weights for the observation interval
    res = smf.wls("y ~ x", frame, weights=frame["w"]).fit()
    _compare(pred, _frame_pred(res, pd.DataFrame({"x": x0}), 0.95, weights=w0))
    # and inverse prediction with user weights is still the closed form, with s_x0 from the covariance
    (row,) = inverse_predict(model, np.array([12.0]), user_w=np.array([1.0]))
    b0, b1 = res.params
    assert row.method.startswith("closed form") and row.x == pytest.approx((12.0 - b0) / b1, rel=1e-10)
    cov = res.cov_params().to_numpy()
    var = res.scale + cov[0, 0] + 2 * row.x * cov[0, 1] + row.x**2 * cov[1, 1]
    assert row.s_x0 == pytest.approx(math.sqrt(var) / abs(b1), rel=1e-8)
