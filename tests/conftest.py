"""Fixtures shared by the whole suite: where things are, and the demo sensor calibration as a
frame, a study and a grown tree (depth 2). Trees are built once per test module, as the modules
did on their own before; a test that expands nodes changes only its own module's tree.

The ``slow`` marker (pyproject.toml) tags the simulation checks; ``python -m pytest -m "not slow"``
is the quick loop described in DEVELOPERS.md.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest

REPO = Path(__file__).resolve().parents[1]
DATASETS = REPO / "datasets"
SENSOR = DATASETS / "sensor_calibration.csv"
SENSOR_Y, SENSOR_X, SENSOR_COVARIATES = "signal_mv", "conc_mg_l", ("run_day", "temp_c")


@pytest.fixture(scope="session")
def repo() -> Path:
    """The repository's root folder."""
    return REPO


@pytest.fixture(scope="module")
def sensor() -> pd.DataFrame:
    """The demo sensor calibration table (invented data, see datasets/README.md)."""
    return pd.read_csv(SENSOR)


@pytest.fixture(scope="module")
def sensor_study(sensor):
    """The demo calibration as a study: signal on concentration, run day and temperature as covariates."""
    import bendwise.engine as engine
    return engine.make_study(sensor, y=SENSOR_Y, x=SENSOR_X, covariates=list(SENSOR_COVARIATES))


@pytest.fixture(scope="module")
def sensor_tree(sensor_study):
    """The demo calibration's remedy tree grown to depth 2."""
    import bendwise.engine as engine
    return engine.grow(sensor_study, depth=2)
