"""Fits from group statistics agree with full-data statsmodels fits on random replicated data.

Every reference number is computed here by statsmodels (formula API, full rows). Tolerances:
coefficients, standard errors, SSE, lack-of-fit F and p, log-likelihood and criteria to 1e-9
relative (plus a tiny absolute floor stated beside each comparison where a value can be ~0).
Hypothesis runs derandomized with no example database, so every CI run sees the same cases.
"""

from __future__ import annotations

import math
import warnings

import bendwise.engine as engine
import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from bendwise.engine.checks.lack_of_fit import lack_of_fit, nested_f
from bendwise.engine.stats.groups import compute_group_stats
from bendwise.engine.stats.linalg import Column, Design, fit_design, poly_map
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from statsmodels.stats.anova import anova_lm

REL = 1e-9

REPEATABLE = settings(
    max_examples=40,
    deadline=None,
    derandomize=True,
    database=None,
    suppress_health_check=[HealthCheck.too_slow],
)


def close(ours: float, ref: float, rel: float = REL, abs_: float = 0.0) -> bool:
    return math.isclose(ours, ref, rel_tol=rel, abs_tol=abs_)


# ----------------------------------------------------------------------------- data


@st.composite
def replicated_frames(draw, weighted: bool = False) -> pd.DataFrame:
    """A straight line (sometimes bent) observed at 3–9 settings, 1–4 rows each, ≥ 1 repeat."""
    seed = draw(st.integers(0, 2**32 - 1))
    c = draw(st.integers(3, 9))
    offset = draw(st.sampled_from([0.0, -40.0, 12.5, 1000.0]))
    step = draw(st.sampled_from([0.1, 1.0, 2.5, 30.0]))
    bend = draw(st.sampled_from([0.0, 0.0, 0.05, 1.0]))
    noise = draw(st.sampled_from([0.05, 1.0, 7.0]))
    rng = np.random.default_rng(seed)
    grid = np.sort(rng.choice(np.arange(60), size=c, replace=False)).astype(float)
    levels = offset + step * grid
    reps = rng.integers(1, 5, size=c)
    if (reps == 1).all():
        reps[rng.integers(c)] = 2
    x = np.repeat(levels, reps)
    u = (x - levels.mean()) / (np.ptp(levels) or 1.0)
    y = 3.0 - 2.0 * u + bend * 10 * u**2 + noise * rng.standard_normal(x.size)
    frame = pd.DataFrame({"x": x, "y": y})
    if weighted:
        frame["w"] = rng.uniform(0.2, 5.0, size=x.size)
    return frame.sample(frac=1.0, random_state=seed % 1000).reset_index(drop=True)


def _coef_pairs(fit):
    """(ours, statsmodels term) per coefficient: intercept then x."""
    ours = fit.coefficients
    assert [c.name for c in ours] == ["intercept", "x"]
    return [(ours[0], "Intercept"), (ours[1], "x")]


def _compare_line(result, res, lof_ref, k_params: int):
    fit = result.fit
    for coef, term in _coef_pairs(fit):
        assert close(coef.estimate, res.params[term], abs_=1e-12 * abs(res.params).max()), term
        assert close(coef.se, res.bse[term]), term
    assert close(fit.sse, res.ssr)
    assert fit.df_resid == int(res.df_resid)
    # log-likelihood: reference statsmodels llf (includes ½Σ log w for WLS)
    assert close(fit.loglik, res.llf, abs_=1e-9)
    # criteria with k = p + 1 (σ counted); statsmodels' own aic counts only the p betas
    n = int(res.nobs)
    k = k_params + 1
    aic = -2 * res.llf + 2 * k
    assert result.criteria.k == k
    assert close(result.criteria.loglik, res.llf, abs_=1e-9)
    assert close(result.criteria.aic, aic, abs_=1e-9)
    assert close(result.criteria.aic, res.aic + 2, abs_=1e-9)  # reference: statsmodels aic (k = p)
    assert close(result.criteria.bic, -2 * res.llf + k * math.log(n), abs_=1e-9)
    if n - k - 1 > 0:
        assert close(result.criteria.aicc, aic + 2 * k * (k + 1) / (n - k - 1), abs_=1e-9)
    else:
        assert result.criteria.aicc is None
    lof = result.lack_of_fit
    # reference: statsmodels anova_lm(line, cell means) — row 1 holds the F test
    if lof_ref is None:
        assert not lof.testable
        return
    assert lof.testable, lof.reason
    assert lof.df_lack == int(lof_ref["df_diff"])
    assert lof.df_pure == int(lof_ref["df_resid"])
    assert close(lof.ss_pure, lof_ref["ssr"])
    assert close(lof.ss_lack, lof_ref["ss_diff"], abs_=1e-12 * res.ssr)
    assert close(lof.f, lof_ref["F"], abs_=1e-10)
    assert close(lof.p, lof_ref["Pr(>F)"], abs_=1e-300)


def _anova_row(reduced, full):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # statsmodels warns on the NaN first row only
        table = anova_lm(reduced, full)
    return table.iloc[1]


# ----------------------------------------------------------------------------- OLS and WLS


@REPEATABLE
@given(replicated_frames())
def test_line_and_lack_of_fit_match_ols(frame):
    study = engine.make_study(frame, y="y", x="x")
    result = engine.check(study)
    res = smf.ols("y ~ x", frame).fit()  # reference: statsmodels ols
    cells = smf.ols("y ~ C(x)", frame).fit()  # reference: statsmodels cell-means model
    n, c = len(frame), frame["x"].nunique()
    ref = _anova_row(res, cells) if c > 2 and n > c else None
    _compare_line(result, res, ref, k_params=2)
    assert result.levels == c
    assert result.n == n


@REPEATABLE
@given(replicated_frames(weighted=True))
def test_weighted_line_and_lack_of_fit_match_wls(frame):
    study = engine.make_study(frame, y="y", x="x", weights="w")
    result = engine.check(study)
    res = smf.wls("y ~ x", frame, weights=frame["w"]).fit()  # reference: statsmodels wls
    cells = smf.wls("y ~ C(x)", frame, weights=frame["w"]).fit()  # reference: statsmodels wls
    n, c = len(frame), frame["x"].nunique()
    ref = _anova_row(res, cells) if c > 2 and n > c else None
    _compare_line(result, res, ref, k_params=2)


def test_weighted_loglik_differs_from_unweighted_by_the_weight_term():
    """Guards the WLS comparison above against a log-likelihood that ignores the weights."""
    rng = np.random.default_rng(7)
    x = np.repeat([1.0, 2.0, 3.0, 4.0], 3)
    frame = pd.DataFrame({"x": x, "y": 1 + x + rng.standard_normal(12), "w": rng.uniform(0.5, 4, 12)})
    ours = engine.check(engine.make_study(frame, y="y", x="x", weights="w")).fit.loglik
    res = smf.wls("y ~ x", frame, weights=frame["w"]).fit()  # reference: statsmodels wls llf
    assert close(ours, res.llf)
    assert abs(0.5 * np.log(frame["w"]).sum()) > 1e-3  # the term is not negligible here


# ----------------------------------------------------------------------------- covariates


@st.composite
def frames_with_covariates(draw, z_within: bool) -> pd.DataFrame:
    """x at 4–7 settings, a 3-level category, and a numeric z (per (x, cat) group or per row)."""
    seed = draw(st.integers(0, 2**32 - 1))
    c = draw(st.integers(4, 7))
    bend = draw(st.sampled_from([0.0, 0.3, 2.0]))
    rng = np.random.default_rng(seed)
    levels = np.sort(rng.choice(np.arange(1, 40), size=c, replace=False)).astype(float)
    n = int(rng.integers(3 * c, 6 * c))
    x = rng.choice(levels, size=n)
    x[:c] = levels  # every setting present
    cat = rng.choice(np.array(["a", "b", "c"]), size=n)
    cat[:3] = ["a", "b", "c"]  # every category present
    if z_within:
        z = rng.normal(5.0, 2.0, size=n)
    else:
        keys = pd.Series(x).astype(str) + "|" + pd.Series(cat)
        codes, uniq = pd.factorize(keys)
        z = rng.normal(5.0, 2.0, size=len(uniq))[codes]
    shift = {"a": 0.0, "b": 1.5, "c": -2.0}
    u = (x - levels.mean()) / np.ptp(levels)
    y = 1.0 + 4.0 * u + bend * u**2 + 0.7 * z + np.array([shift[k] for k in cat])
    y = y + 0.5 * rng.standard_normal(n)
    return pd.DataFrame({"x": x, "cat": cat, "z": z, "y": y})


def _covariate_design(frame: pd.DataFrame, z_within: bool):
    """Groups = (x, cat); columns 1, x (centred, scaled), cat[b], cat[c], z; raw-basis map."""
    keys = frame["x"].astype(str) + "|" + frame["cat"]
    codes, uniq = pd.factorize(keys, sort=True)
    codes = codes.astype(np.intp)
    c = len(uniq)
    first = np.array([np.flatnonzero(codes == g)[0] for g in range(c)])
    gx = frame["x"].to_numpy(float)[first]
    gcat = frame["cat"].to_numpy()[first]
    centre, scale = float(gx.mean()), float(np.ptp(gx) / 2)
    cols = [Column(np.ones(c)), Column((gx - centre) / scale)]
    cols += [Column((gcat == k).astype(float)) for k in ("b", "c")]
    to_raw = np.eye(5, dtype=np.longdouble)
    to_raw[:2, :2] = poly_map(1, centre, scale)
    z = frame["z"].to_numpy(float)
    y = frame["y"].to_numpy(float)
    if z_within:
        cols.append(Column(np.ones(c), base=0))
        stats = compute_group_stats(codes, c, y, bases=z[:, None])
    else:
        cols.append(Column(z[first]))
        stats = compute_group_stats(codes, c, y)
    names = ("intercept", "x", "cat[b]", "cat[c]", "z")
    design = Design(tuple(cols), names, to_raw)
    return stats, design, codes, first


REF_TERMS = ("Intercept", "x", "C(cat)[T.b]", "C(cat)[T.c]", "z")


def _compare_coefficients(fit, res):
    for coef, term in zip(fit.coefficients, REF_TERMS, strict=True):
        assert close(coef.estimate, res.params[term], abs_=1e-12 * abs(res.params).max()), term
        assert close(coef.se, res.bse[term]), term
    assert close(fit.sse, res.ssr)
    assert fit.df_resid == int(res.df_resid)
    assert close(fit.loglik, res.llf, abs_=1e-9)  # reference: statsmodels llf


@REPEATABLE
@given(frames_with_covariates(z_within=False))
def test_group_level_numeric_and_categorical_regressors(frame):
    stats, design, codes, _ = _covariate_design(frame, z_within=False)
    fit = fit_design(stats, design)
    res = smf.ols("y ~ x + z + C(cat)", frame).fit()  # reference: statsmodels ols
    _compare_coefficients(fit, res)
    # classical pure-error test, grouping by every predictor variable (x, cat; z is constant there)
    frame = frame.assign(g=codes)
    n, c = len(frame), stats.c
    lof = lack_of_fit(stats, fit)
    if c > fit.rank and n > c:
        ref = _anova_row(res, smf.ols("y ~ C(g)", frame).fit())  # reference: anova_lm vs cell means
        assert lof.testable, lof.reason
        assert (lof.df_lack, lof.df_pure) == (int(ref["df_diff"]), int(ref["df_resid"]))
        assert close(lof.f, ref["F"], abs_=1e-10)
        assert close(lof.p, ref["Pr(>F)"], abs_=1e-300)
    else:
        assert not lof.testable


@REPEATABLE
@given(frames_with_covariates(z_within=True))
def test_within_varying_covariate_keeps_the_fast_path(frame):
    stats, design, codes, first = _covariate_design(frame, z_within=True)
    fit = fit_design(stats, design)
    res = smf.ols("y ~ x + z + C(cat)", frame).fit()  # reference: statsmodels ols
    _compare_coefficients(fit, res)
    # shape in x: the model against x as a factor plus the same covariates
    gx = frame["x"].to_numpy(float)[first]
    gcat = frame["cat"].to_numpy()[first]
    xs = np.unique(gx)
    cols = [Column((gx == v).astype(float)) for v in xs]
    cols += [Column((gcat == k).astype(float)) for k in ("b", "c")]
    cols.append(Column(np.ones(stats.c), base=0))
    p_full = len(cols)
    factor = Design(tuple(cols), tuple(f"t{j}" for j in range(p_full)), np.eye(p_full, dtype=np.longdouble))
    full = fit_design(stats, factor)
    ours = nested_f(fit.sse, fit.df_resid, full.sse, full.df_resid, "shape in x")
    ref_full = smf.ols("y ~ C(x) + z + C(cat)", frame).fit()  # reference: statsmodels ols
    assert close(full.sse, ref_full.ssr)
    ref = _anova_row(res, ref_full)  # reference: statsmodels anova_lm
    assert ours.testable
    assert (ours.df_lack, ours.df_pure) == (int(ref["df_diff"]), int(ref["df_resid"]))
    assert close(ours.f, ref["F"], abs_=1e-10)
    assert close(ours.p, ref["Pr(>F)"], abs_=1e-300)


@pytest.mark.parametrize("z_within", [False, True])
def test_covariate_fit_is_not_the_fit_without_it(z_within):
    """The covariate comparison above could pass vacuously if z were ignored; it is not."""
    rng = np.random.default_rng(11)
    n = 40
    x = np.repeat([1.0, 2.0, 3.0, 4.0, 5.0], 8)
    cat = np.tile(["a", "b", "c", "a", "b", "c", "a", "b"], 5)
    z = rng.normal(0, 3, n) if z_within else np.repeat(rng.normal(0, 3, 5), 8)
    frame = pd.DataFrame({"x": x, "cat": cat, "z": z, "y": x + 2 * z + rng.standard_normal(n)})
    stats, design, _, _ = _covariate_design(frame, z_within=z_within)
    fit = fit_design(stats, design)
    with_z = smf.ols("y ~ x + z + C(cat)", frame).fit()  # reference: statsmodels ols
    without_z = smf.ols("y ~ x + C(cat)", frame).fit()  # reference: statsmodels ols
    assert close(fit.sse, with_z.ssr)
    assert not close(fit.sse, without_z.ssr, rel=1e-3)
