"""The bundled demo CSVs: reproducible from their generator, and showing what they claim to show."""

from __future__ import annotations

import importlib.util
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from statsmodels.stats.anova import anova_lm

DATASETS = Path(__file__).resolve().parents[2] / "datasets"
NAMES = (
    "sensor_calibration.csv",
    "sensor_calibration_run2.csv",
    "process_trial.csv",
    "straight_line.csv",
    "no_replicates.csv",
    "multi_day_calibration.csv",
)


def _load_generator():
    spec = importlib.util.spec_from_file_location(
        "bendwise_make_datasets", DATASETS / "make_datasets.py"
    )
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def _read(name: str) -> pd.DataFrame:
    return pd.read_csv(DATASETS / name)


def _lack_of_fit_p(df: pd.DataFrame, reduced: str, full: str) -> float:
    """p-value of the extra-sum-of-squares F test: reduced model against one mean per group."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        table = anova_lm(smf.ols(reduced, df).fit(), smf.ols(full, df).fit())
    return float(table["Pr(>F)"].iloc[1])


@pytest.fixture(scope="module")
def regenerated(tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("regen")
    assert _load_generator().main(["--out", str(out)]) == 0
    return out


@pytest.mark.parametrize("name", NAMES)
def test_generator_reproduces_committed_file(regenerated: Path, name: str) -> None:
    assert (regenerated / name).read_bytes() == (DATASETS / name).read_bytes()


def test_generator_leaves_no_temp_files(regenerated: Path) -> None:
    assert sorted(p.name for p in regenerated.iterdir()) == sorted(NAMES)


def test_headers_are_plain_column_names() -> None:
    expected = {
        "sensor_calibration.csv": "standard_id,conc_mg_l,signal_mv,run_day,temp_c",
        "sensor_calibration_run2.csv": "standard_id,conc_mg_l,signal_mv,run_day,temp_c",
        "process_trial.csv": "run_id,setpoint_c,yield_pct,work_shift",
        "straight_line.csv": "dose_ug,response_au",
        "no_replicates.csv": "load_kn,strain_um",
        "multi_day_calibration.csv": "day,conc_ug_l,repeat,absorbance",
    }
    for name, header in expected.items():
        first = (DATASETS / name).read_text(encoding="ascii").splitlines()[0]
        assert first == header


def test_sensor_calibration_bends_and_a_quadratic_fixes_it() -> None:
    df = _read("sensor_calibration.csv")
    assert 21 <= len(df) <= 24
    assert df["conc_mg_l"].nunique() in (7, 8)
    assert df.groupby("conc_mg_l").size().eq(3).all()
    assert set(df["run_day"]) == {"day1", "day2", "day3"}
    assert df["temp_c"].between(20.5, 25.5).all()
    assert df["temp_c"].nunique() > 5

    line_p = _lack_of_fit_p(df, "signal_mv ~ conc_mg_l", "signal_mv ~ C(conc_mg_l)")
    quad_p = _lack_of_fit_p(
        df, "signal_mv ~ conc_mg_l + I(conc_mg_l**2)", "signal_mv ~ C(conc_mg_l)"
    )
    assert line_p < 0.01
    assert quad_p > 0.05

    # Saturating: the top step gains less per mg/L than the bottom steps.
    means = df.groupby("conc_mg_l")["signal_mv"].mean()
    slopes = np.diff(means.to_numpy()) / np.diff(means.index.to_numpy())
    assert slopes[-1] < 0.7 * slopes[0]

    # Spread grows with the level.
    sd = df.groupby("conc_mg_l")["signal_mv"].std()
    assert sd.iloc[-3:].mean() > 3 * sd.iloc[:2].mean()
    assert np.corrcoef(means.to_numpy(), sd.to_numpy())[0, 1] > 0.5


def test_process_trial_needs_the_shift_not_a_curve() -> None:
    df = _read("process_trial.csv")
    assert df.groupby("setpoint_c").size().eq(4).all()
    assert 5 <= df["setpoint_c"].nunique() <= 6
    # Unbalanced: the shift mix differs between setpoints.
    mix = pd.crosstab(df["setpoint_c"], df["work_shift"])
    assert len({tuple(row) for row in mix.to_numpy()}) > 1

    line_p = _lack_of_fit_p(df, "yield_pct ~ setpoint_c", "yield_pct ~ C(setpoint_c)")
    cov_p = _lack_of_fit_p(
        df, "yield_pct ~ setpoint_c + C(work_shift)", "yield_pct ~ C(setpoint_c) + C(work_shift)"
    )
    quad_p = _lack_of_fit_p(
        df, "yield_pct ~ setpoint_c + I(setpoint_c**2)", "yield_pct ~ C(setpoint_c)"
    )
    assert line_p < 0.01
    assert cov_p > 0.05
    assert quad_p < 0.05  # curvature is not the answer here


def test_straight_line_passes_comfortably() -> None:
    df = _read("straight_line.csv")
    assert df["dose_ug"].nunique() == 6
    assert df.groupby("dose_ug").size().eq(3).all()
    p = _lack_of_fit_p(df, "response_au ~ dose_ug", "response_au ~ C(dose_ug)")
    assert p > 0.2


def test_no_replicates_has_distinct_loads_and_mild_curvature() -> None:
    df = _read("no_replicates.csv")
    assert 15 <= len(df) <= 20
    assert df["load_kn"].is_unique
    fit = smf.ols("strain_um ~ load_kn + I(load_kn**2)", df).fit()
    assert fit.params.iloc[2] > 0
    assert fit.pvalues.iloc[2] < 0.01
    # Mild: the straight line still explains nearly everything.
    assert smf.ols("strain_um ~ load_kn", df).fit().rsquared > 0.99


def test_multi_day_calibration_is_a_line_shifted_by_day() -> None:
    df = _read("multi_day_calibration.csv")
    assert df.groupby(["day", "conc_ug_l"]).size().eq(3).all()
    assert df["day"].nunique() == 5 and df["conc_ug_l"].nunique() == 6
    # The days differ by a visible offset: day means (same levels every day) differ far beyond
    # what the within-day scatter allows (statsmodels anova_lm, day after the line).
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        table = anova_lm(smf.ols("absorbance ~ conc_ug_l + C(day)", df).fit())
    assert float(table.loc["C(day)", "PR(>F)"]) < 1e-10
    # Within days the line holds: line + day against one mean per day × level cell.
    p = _lack_of_fit_p(df, "absorbance ~ conc_ug_l + C(day)", "absorbance ~ C(day) * C(conc_ug_l)")
    assert p > 0.05
