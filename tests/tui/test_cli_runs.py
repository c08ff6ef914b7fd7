"""``bendwise check --runs COL`` and ``--limits`` on the command line: JSON keys only when asked,
the text sections, one-line errors, and odd data that never gives a traceback.

The numbers themselves are held to statsmodels in tests/engine/test_runs.py and test_limits.py;
here the JSON is compared with the engine result it prints.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from bendwise.tui.cli import main
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

DEMO = str(Path(__file__).resolve().parents[2] / "datasets" / "multi_day_calibration.csv")
ARGS = ["-y", "absorbance", "-x", "conc_ug_l"]


def run(argv: list[str], capsys) -> tuple[object, str, str]:
    """Exit status, stdout, stderr of one command-line run."""
    try:
        code: object = main(argv)
    except SystemExit as exc:
        code = exc.code
    except Exception as exc:  # noqa: BLE001 - surfaced as a failed assertion
        code = f"uncaught {type(exc).__name__}: {exc}"
    out, err = capsys.readouterr()
    return code, out, err


def test_json_gains_runs_and_limits_only_when_asked(capsys):
    code, plain, _ = run(["check", DEMO, *ARGS, "--json"], capsys)
    assert code == 0
    base = json.loads(plain)
    assert "runs" not in base and "limits" not in base
    code, out, _ = run(["check", DEMO, *ARGS, "--json", "--runs", "day"], capsys)
    with_runs = json.loads(out)
    assert code == 0 and "limits" not in with_runs
    assert {k: v for k, v in with_runs.items() if k != "runs"} == base
    r = with_runs["runs"]
    assert {"column", "count", "between_sd", "within_sd", "between_sd_interval", "method", "lack_of_fit",
            "shape_differs"} <= set(r)
    assert r["column"] == "day" and r["count"] == 5
    assert r["between_sd_interval"]["low"] < r["between_sd"] < r["between_sd_interval"]["high"]
    assert r["lack_of_fit"]["testable"] and "runs as blocks" in r["lack_of_fit"]["kind"]
    code, out, _ = run(["check", DEMO, *ARGS, "--json", "--limits"], capsys)
    lim = json.loads(out)["limits"]
    assert lim["with_runs"] is None and lim["one_run"]["hubaux_vos"]["x_detection"] > 0
    assert "validated" in lim["caution"]
    code, out, _ = run(["check", DEMO, *ARGS, "--json", "--limits", "--runs", "day"], capsys)
    both = json.loads(out)
    assert both["limits"]["with_runs"]["hubaux_vos"]["x_detection"] > both["limits"]["one_run"]["hubaux_vos"]["x_detection"]


def test_text_report_has_the_runs_and_limits_sections_and_ends_with_the_caution(capsys):
    code, plain, _ = run(["check", DEMO, *ARGS], capsys)
    code, out, _ = run(["check", DEMO, *ARGS, "--runs", "day", "--limits"], capsys)
    assert code == 0
    assert out.startswith(plain[: plain.index("Criteria")])
    assert "Runs  (day: 5 runs" in out and "between-run SD" in out and "within-run SD" in out
    assert "does the curve's shape differ between runs" in out
    assert "Hubaux–Vos" in out and "new run" in out and "validated procedure" in out
    assert out.rstrip().splitlines()[-1].startswith("Caution:")


def _csv(tmp_path, frame: pd.DataFrame, name: str = "t.csv") -> str:
    path = tmp_path / name
    frame.to_csv(path, index=False)
    return str(path)


BAD = {
    "one run": (pd.DataFrame({"d": ["a"] * 6, "x": [1, 1, 2, 2, 3, 3], "y": [1, 1.1, 2, 2.2, 3, 3.1]}), "single run"),
    "not crossed": (pd.DataFrame({"d": ["a", "a", "b", "b", "c", "c"], "x": [1, 1, 2, 2, 3, 3],
                                  "y": [1, 1.1, 2, 2.2, 3, 3.1]}), "not crossed"),
    "numeric many": (pd.DataFrame({"d": np.arange(12) * 0.5, "x": [1, 1, 2, 2, 3, 3] * 2,
                                   "y": np.arange(12) * 1.1 % 3}), "looks like a measurement"),
    "unknown column": (pd.DataFrame({"d": ["a", "b"] * 3, "x": [1, 1, 2, 2, 3, 3],
                                     "y": [1, 1.1, 2, 2.2, 3, 3.1]}), "not found"),
    "all missing": (pd.DataFrame({"d": [None] * 6, "x": [1, 1, 2, 2, 3, 3], "y": [1, 1.1, 2, 2.2, 3, 3.1]}), "no values"),
}


@pytest.mark.parametrize("name", list(BAD))
def test_bad_runs_input_is_one_line_and_exit_2(name, tmp_path, capsys):
    frame, words = BAD[name]
    col = "nope" if name == "unknown column" else "d"
    code, out, err = run(["check", _csv(tmp_path, frame), "-y", "y", "-x", "x", "--runs", col], capsys)
    assert code == 2 and out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("bendwise: error:") and words in lines[0]


def test_missing_run_cells_are_reported_on_stderr(tmp_path, capsys):
    frame = pd.read_csv(DEMO)
    frame.loc[[3, 40], "day"] = None
    code, out, err = run(["check", _csv(tmp_path, frame), *ARGS, "--runs", "day", "--json"], capsys)
    assert code == 0
    assert json.loads(out)["n"] == 88 and "day" in err and "missing" in err


FUZZ = settings(max_examples=int(__import__("os").environ.get("RUNS_FUZZ", 60)), deadline=None, derandomize=True, database=None,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])


@st.composite
def run_tables(draw) -> pd.DataFrame:
    """Small odd tables: 1–5 runs, 1–6 levels, 1–3 repeats, cells dropped, ties, constant runs."""
    k, c, reps = draw(st.integers(1, 5)), draw(st.integers(1, 6)), draw(st.integers(1, 3))
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    rows = [(f"r{r}", float(lv), 0.0) for r in range(k) for lv in range(c) for _ in range(reps)]
    frame = pd.DataFrame(rows, columns=["run", "x", "y"])
    scale = draw(st.sampled_from([1e-6, 1.0, 1e6]))
    frame["y"] = (frame["x"] * draw(st.sampled_from([0.0, 1.0, -2.0])) + rng.normal(0, 1, len(frame))) * scale
    if draw(st.booleans()):
        frame["y"] = frame["y"].round(draw(st.integers(-1, 2)) if scale == 1.0 else 12)
    keep = rng.random(len(frame)) > draw(st.sampled_from([0.0, 0.3, 0.6]))
    frame = frame[keep]
    if draw(st.booleans()) and len(frame):
        frame.loc[frame.index[0], "run"] = None
    if draw(st.booleans()):
        frame["run"] = frame["run"].str.slice(1)  # numeric-looking runs
    return frame.reset_index(drop=True)


@FUZZ
@given(frame=run_tables(), limits=st.booleans(), as_json=st.booleans())
def test_odd_tables_through_check_runs_never_give_a_traceback(frame, limits, as_json, tmp_path_factory, capsys):
    path = _csv(tmp_path_factory.mktemp("odd"), frame)
    argv = ["check", path, "-y", "y", "-x", "x", "--runs", "run"]
    argv += ["--limits"] if limits else []
    argv += ["--json"] if as_json else []
    code, out, err = run(argv, capsys)
    assert code in (0, 2), code
    if code == 2:
        errors = [ln for ln in err.splitlines() if ln.startswith("bendwise: error:")]
        assert len(errors) == 1 and out == ""
    elif as_json:
        assert "runs" in json.loads(out)


@pytest.mark.parametrize("extra, words", [(["--engine", "duckdb"], "in memory"), (["--tolerance", "5%"], "tolerance")])
def test_runs_refuses_the_sql_engine_and_a_merging_tolerance_in_one_line(extra, words, tmp_path, capsys):
    frame = pd.read_csv(DEMO)
    frame["conc_ug_l"] = frame["conc_ug_l"] + np.tile([0.0, 0.01, 0.02], 30)
    code, out, err = run(["check", _csv(tmp_path, frame), *ARGS, "--runs", "day", *extra], capsys)
    assert code == 2 and out == "" and err.count("\n") == 1 and words in err, err
