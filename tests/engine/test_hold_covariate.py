"""A calibration whose model uses the run day: a new day is refused with the way out named, a
known day can be held for every row, and ``average`` gives the equal-weight average curve over
the days (held to statsmodels' prediction at the averaged design row)."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

REPO = Path(__file__).resolve().parents[2]


def _cli(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "bendwise.tui.cli", *args], capture_output=True, text=True, cwd=REPO,
                          timeout=300)


@pytest.fixture(scope="module")
def day_export(tmp_path_factory):
    """Three invented days with clear shifts: the suggestion keeps the day."""
    rng = np.random.default_rng(20261205)
    rows = []
    for d, shift in (("d1", 0.0), ("d2", 1.5), ("d3", -1.0)):
        for x in (1.0, 2.0, 4.0, 6.0, 8.0, 10.0):
            for _ in range(3):
                rows.append({"x": x, "y": 2.0 + 1.2 * x + shift + rng.normal(0, 0.2), "day": d})
    folder = tmp_path_factory.mktemp("days")
    data = folder / "cal.csv"
    pd.DataFrame(rows).to_csv(data, index=False)
    out = _cli("export", str(data), "-y", "y", "-x", "x", "--covariates", "day", "--suggested", "--depth", "1",
               "-o", str(folder / "model"))
    assert out.returncode == 0, out.stderr
    return data, folder / "model", out


def test_export_says_the_model_needs_a_known_day(day_export):
    _, _, out = day_export
    assert "day" in out.stdout.splitlines()[0]  # the suggested model keeps the day
    assert "needs a known 'day'" in out.stderr and "--hold day=average" in out.stderr


def test_a_new_day_is_refused_naming_the_way_out(day_export, tmp_path):
    _, model, _ = day_export
    new = tmp_path / "new.csv"
    new.write_text("x,day\n3,d4\n", encoding="utf-8")
    out = _cli("apply", str(model), str(new))
    assert out.returncode != 0
    assert "category 'd4'" in out.stderr and "--hold day=average" in out.stderr
    assert "Traceback" not in out.stderr


def test_average_over_days_matches_statsmodels(day_export, tmp_path):
    import statsmodels.api as sm

    data, model, _ = day_export
    new = tmp_path / "new.csv"
    new.write_text("x\n3\n7.5\n", encoding="utf-8")
    out = _cli("apply", str(model), str(new), "--hold", "day=average", "--json")
    assert out.returncode == 0, out.stderr
    doc = json.loads(out.stdout)
    assert doc["held"] == {"day": "average"}
    # reference: statsmodels OLS of y on x and day, predicted at the design row averaged over days
    frame = pd.read_csv(data)
    design = np.column_stack([np.ones(len(frame)), frame["day"] == "d2", frame["day"] == "d3", frame["x"]])
    fit = sm.OLS(frame["y"].to_numpy(), design.astype(float)).fit()
    for row, x in zip(doc["rows"], (3.0, 7.5), strict=True):
        exog = np.array([[1.0, 1 / 3, 1 / 3, x]])  # intercept, day d2, day d3, x: each day weighted 1/3
        pred = fit.get_prediction(exog).summary_frame(alpha=0.05)
        assert row["fit"] == pytest.approx(float(pred["mean"].iloc[0]), rel=1e-9)
        assert row["ci_low"] == pytest.approx(float(pred["mean_ci_lower"].iloc[0]), rel=1e-9)
        assert row["pi_high"] == pytest.approx(float(pred["obs_ci_upper"].iloc[0]), rel=1e-9)


def test_a_held_known_day_equals_that_day_in_the_table(day_export, tmp_path):
    _, model, _ = day_export
    held, listed = tmp_path / "held.csv", tmp_path / "listed.csv"
    held.write_text("y\n8\n", encoding="utf-8")
    listed.write_text("y,day\n8,d2\n", encoding="utf-8")
    a = json.loads(_cli("apply", str(model), str(held), "--inverse", "--hold", "day=d2", "--json").stdout)
    b = json.loads(_cli("apply", str(model), str(listed), "--inverse", "--json").stdout)
    for key in ("x", "low", "high"):
        assert a["rows"][0][key] == pytest.approx(b["rows"][0][key], rel=1e-12)


@pytest.mark.parametrize("hold, message", [
    ("day=d9", "never saw category 'd9'"),
    ("batch=average", "no covariate 'batch'"),
    ("day", "write NAME=VALUE"),
])
def test_bad_holds_are_one_line(day_export, tmp_path, hold, message):
    _, model, _ = day_export
    new = tmp_path / "new.csv"
    new.write_text("x\n3\n", encoding="utf-8")
    out = _cli("apply", str(model), str(new), "--hold", hold)
    assert out.returncode == 2 and message in out.stderr and len(out.stderr.strip().splitlines()) == 1
