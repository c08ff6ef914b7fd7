"""Detection and quantitation limits (``check --limits``).

References: a published worked example (Miller & Miller, *Statistics and Chemometrics for
Analytical Chemistry*, the fluorescence calibration of the chapter on calibration: standards 0–12
pg/mL, slope 1.93, intercept 1.52, s_y/x 0.4329, s_a 0.2950, detection limit 0.67 pg/mL from
3·s_y/x/b — values from memory); statsmodels OLS ``get_prediction`` for the one-sided
prediction band of Hubaux & Vos; statsmodels MixedLM and a dense covariance for the new-run band.
"""

from __future__ import annotations

import math
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import statsmodels.formula.api as smf
from bendwise.engine import make_study
from bendwise.engine.checks.limits import limits_one_run, limits_with_runs
from bendwise.engine.checks.runs import check_runs, run_factor
from scipy.stats import t as t_dist

DEMO = Path(__file__).resolve().parents[2] / "datasets" / "multi_day_calibration.csv"

# Miller & Miller's fluorescence calibration (from memory): x in pg/mL, y in fluorescence units
MM_X = np.arange(0.0, 13.0, 2.0)
MM_Y = np.array([2.1, 5.0, 9.0, 12.6, 17.3, 21.0, 24.7])


def test_published_worked_example_from_memory():
    lm = limits_one_run(MM_X, MM_Y)
    assert lm.slope == pytest.approx(1.93, abs=5e-3)
    assert lm.intercept == pytest.approx(1.52, abs=5e-3)
    assert lm.sigma_residual == pytest.approx(0.4329, abs=5e-4)
    assert lm.sigma_intercept == pytest.approx(0.2950, abs=5e-4)
    # the book's detection limit uses 3·s/b; ours is the ICH 3.3·s/b: the ratio is exact
    assert lm.lod_residual * 3 / 3.3 == pytest.approx(0.67, abs=5e-3)
    assert lm.loq_residual == pytest.approx(10 / 3.3 * lm.lod_residual, rel=1e-12)


def _band(x, y, at, alpha):
    """statsmodels OLS: the upper and lower one-sided (1 − alpha) prediction limits at ``at``."""
    fit = sm.OLS(y, sm.add_constant(x)).fit()
    frame = fit.get_prediction(np.array([[1.0, at]])).summary_frame(alpha=2 * alpha)
    return float(frame["obs_ci_upper"].iloc[0]), float(frame["obs_ci_lower"].iloc[0])


@pytest.mark.parametrize("flip", [False, True])
def test_hubaux_vos_limits_sit_on_the_statsmodels_prediction_band(flip):
    y = -MM_Y if flip else MM_Y
    lm = limits_one_run(MM_X, y)
    upper, lower = _band(MM_X, y, 0.0, 0.05)
    assert lm.y_critical == pytest.approx(lower if flip else upper, rel=1e-10)
    assert lm.x_critical == pytest.approx(abs(lm.y_critical - lm.intercept) / abs(lm.slope), rel=1e-12)
    # at x_D the β-side prediction limit reaches the critical level
    up_d, low_d = _band(MM_X, y, lm.x_detection, 0.05)
    assert (up_d if flip else low_d) == pytest.approx(lm.y_critical, rel=1e-9)
    assert 0 < lm.x_critical < lm.x_detection


def test_a_flat_noisy_line_has_no_detection_limit_and_says_why():
    x = np.repeat([0.0, 1.0, 2.0], 2)
    y = np.array([0.0, 1.0, 0.2, 1.1, 0.3, 1.2])
    lm = limits_one_run(x, y)
    assert lm.x_detection is None and "not reached" in lm.note


def _demo_runs():
    df = pd.read_csv(DEMO)
    study = make_study(df, y="absorbance", x="conc_ug_l", covariates=["day"])
    r = check_runs(study, "day")
    return df, study, r, limits_with_runs(study.x, study.y, run_factor(study, "day"), r)


def test_new_run_limits_use_the_mixedlm_band_with_satterthwaite_df():
    df, study, r, lm = _demo_runs()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        m = smf.mixedlm("absorbance ~ conc_ug_l", df, groups=df["day"]).fit(reml=True, method="bfgs", gtol=1e-12)
        # balanced: the ANOVA mean squares of runs (after the line) and within runs, statsmodels anova_lm
        from statsmodels.stats.anova import anova_lm
        t = anova_lm(smf.ols("absorbance ~ conc_ug_l + C(day)", df).fit())
    ms_b, ms_w = float(t.loc["C(day)", "mean_sq"]), float(t.loc["Residual", "mean_sq"])
    n0 = 18.0
    total = ms_b / n0 + (1 - 1 / n0) * ms_w
    df_s = total**2 / ((ms_b / n0) ** 2 / 4 + ((1 - 1 / n0) * ms_w) ** 2 / float(t.loc["Residual", "df"]))
    assert lm.df == pytest.approx(df_s, rel=1e-6)
    var_b, var_w = float(m.cov_re.iloc[0, 0]), m.scale
    assert lm.sigma_residual == pytest.approx(math.sqrt(var_b + var_w), rel=1e-6)
    cov = np.asarray(m.cov_params())[:2, :2]  # balanced: equals (X'V⁻¹X)⁻¹
    b = m.fe_params.to_numpy()

    def sd(x):
        g = np.array([1.0, x])
        return math.sqrt(var_b + var_w + g @ cov @ g)

    ta = t_dist.ppf(0.95, df_s)
    assert lm.y_critical == pytest.approx(b[0] + ta * sd(0.0), rel=1e-6)
    assert b[0] + b[1] * lm.x_detection - ta * sd(lm.x_detection) == pytest.approx(lm.y_critical, rel=1e-6)
    # the intercept form: SD of each day's own intercept (numpy polyfit per day)
    ints = [np.polyfit(g["conc_ug_l"], g["absorbance"], 1)[1] for _, g in df.groupby("day")]
    assert lm.sigma_intercept == pytest.approx(np.std(ints, ddof=1), rel=1e-9)
    assert lm.lod_intercept == pytest.approx(3.3 * np.std(ints, ddof=1) / b[1], rel=1e-6)


def test_day_offsets_raise_the_limits_for_a_new_run():
    _, study, _, new = _demo_runs()
    one = limits_one_run(study.x, study.y)
    assert new.x_detection > one.x_detection
    assert new.lod_intercept > one.lod_intercept
