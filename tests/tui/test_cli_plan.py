"""`bendwise plan` from the command line: text, JSON, and one-line refusals with exit 2."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from bendwise.engine.plan.power import design_power, search_designs
from bendwise.tui.cli import main


def _run(capsys, *argv):
    code = main(["plan", *argv])
    out, err = capsys.readouterr()
    return code, out, err


def _pct(p):
    # the report rounds power down to whole percent
    return ">99%" if p >= 0.995 else f"{math.floor(p * 100)}%"


def test_text_report_for_one_design(capsys):
    code, out, err = _run(
        capsys, "--levels", "0,5,10,20,40", "--replicates", "3", "--delta", "0.6", "--sigma", "0.4"
    )
    assert code == 0 and err == ""
    dp = design_power([0, 5, 10, 20, 40], 3, delta=0.6, sigma=0.4)
    assert "15 measurements" in out
    assert "1.5 σ" in out  # 0.6 / 0.4
    lof_line = next(line for line in out.splitlines() if "lack of fit vs pure error" in line)
    curv_line = next(line for line in out.splitlines() if "curvature" in line)
    assert _pct(dp.lack_of_fit.power) in lof_line and "F(3, 10)" in lof_line
    assert _pct(dp.curvature.power) in curv_line and "F(1, 12)" in curv_line


def test_json_for_one_design_matches_engine(capsys):
    code, out, _ = _run(
        capsys,
        "--levels", "1,2,4,8,16",
        "--replicates", "2,4,2,3,5",
        "--means", "0,1,1.3,1.45,1.5",
        "--sigma", "0.35",
        "--alpha", "0.01",
        "--json",
    )  # fmt: skip
    assert code == 0
    doc = json.loads(out)
    dp = design_power(
        [1, 2, 4, 8, 16], [2, 4, 2, 3, 5], means=[0, 1, 1.3, 1.45, 1.5], sigma=0.35, alpha=0.01
    )
    d = doc["design"]
    assert doc["alpha"] == 0.01 and doc["units"] == "y"
    assert doc["sigma"] == {"value": 0.35, "source": "given"}
    assert d["total"] == 16 and d["shape"] == "given means"
    assert d["lack_of_fit"]["df"] == [3, 11]
    assert d["lack_of_fit"]["power"] == pytest.approx(dp.lack_of_fit.power, rel=1e-12)
    assert d["curvature"]["power"] == pytest.approx(dp.curvature.power, rel=1e-12)
    assert d["curvature"]["denominator_noncentrality"] > 0
    assert "search" not in doc


def test_delta_in_sigma_units_needs_no_sigma(capsys):
    code, out, _ = _run(
        capsys, "--levels", "4", "--range", "0,30", "--replicates", "2", "--delta-sd", "2", "--json"
    )
    assert code == 0
    doc = json.loads(out)
    assert doc["units"] == "sigma" and doc["sigma"] is None
    assert doc["design"]["levels"] == [0, 10, 20, 30]
    dp = design_power([0, 10, 20, 30], 2, delta=2.0)
    assert doc["design"]["lack_of_fit"]["power"] == pytest.approx(dp.lack_of_fit.power)


def test_no_replicates_reports_only_the_curvature_test(capsys):
    code, out, _ = _run(
        capsys, "--levels", "10", "--range", "0,9", "--replicates", "1", "--delta-sd", "1.5"
    )
    assert code == 0
    assert "no pure error" in out
    dp = design_power(list(range(10)), 1, delta=1.5, tests=["curvature"])
    assert _pct(dp.curvature.power) in out
    code, out, _ = _run(
        capsys,
        "--levels", "10", "--range", "0,9", "--replicates", "1", "--delta-sd", "1.5", "--json",
    )  # fmt: skip
    doc = json.loads(out)
    assert doc["design"]["lack_of_fit"] is None
    assert doc["design"]["curvature"]["df"] == [1, 7]


def test_search_over_a_range(capsys):
    argv = ["--range", "0,40", "--delta", "0.6", "--sigma", "0.4", "--target-power", "0.8"]
    code, out, err = _run(capsys, *argv)
    assert code == 0 and err == ""
    ps = search_designs(span=(0, 40), delta=0.6, sigma=0.4, target=0.8)
    lof, curv = ps.lack_of_fit, ps.curvature
    assert f"{lof.design.level_count} levels × {lof.design.replicates} = {lof.design.total}" in out
    assert (
        f"{curv.design.level_count} levels × {curv.design.replicates} = {curv.design.total}" in out
    )
    assert "smallest bend it catches with 80% power" in out
    # one grid row per level count, for each test
    assert sum(1 for line in out.splitlines() if line.strip().startswith("12 ")) == 2

    code, out, _ = _run(capsys, *argv, "--json")
    doc = json.loads(out)["search"]
    assert len(doc["designs"]) == 81
    c = doc["cheapest_lack_of_fit"]
    assert c["total"] == lof.design.total and c["replicates"] == lof.design.replicates
    assert c["detectable_delta"] == pytest.approx(lof.detectable_delta, rel=1e-9)
    assert c["detectable_delta_sd"] == pytest.approx(lof.detectable_delta / 0.4, rel=1e-9)
    assert doc["cheapest_curvature"]["total"] == curv.design.total


def test_search_with_fixed_levels_and_unreachable_target(capsys):
    argv = ["--levels", "0,1,2,3", "--delta-sd", "0.05", "--target-power", "0.9"]
    code, out, _ = _run(capsys, *argv)
    assert code == 0
    assert out.count("no design in the search reaches 90%") == 2
    code, out, _ = _run(capsys, *argv, "--json")
    doc = json.loads(out)["search"]
    assert doc["fixed_levels"] is True
    assert [row["replicates"] for row in doc["designs"]] == list(range(2, 11))
    assert doc["cheapest_lack_of_fit"] is None and doc["cheapest_curvature"] is None


BAD = [
    (["--levels", "0,5", "--replicates", "3", "--delta-sd", "1"], "levels: only 2 distinct"),
    (["--levels", "0,abc,5", "--replicates", "3", "--delta-sd", "1"], "'abc'"),
    (["--levels", "5", "--replicates", "3", "--delta-sd", "1"], "--levels: '5'"),
    (["--replicates", "3", "--delta-sd", "1"], "--levels: not given"),
    (["--levels", "0,5,10", "--replicates", "0", "--delta-sd", "1"], "replicates: 0"),
    (["--levels", "0,5,10", "--replicates", "two", "--delta-sd", "1"], "'two'"),
    (["--levels", "0,5,10", "--replicates", "3", "--delta-sd", "0"], "delta: 0"),
    (["--levels", "0,5,10", "--replicates", "3", "--delta", "-1", "--sigma", "1"], "delta: -1"),
    (["--levels", "0,5,10", "--replicates", "3", "--delta", "1", "--sigma", "0"], "--sigma: '0'"),
    (["--levels", "0,5,10", "--replicates", "3", "--delta", "1"], "--delta: in y units"),
    (["--levels", "0,5,10", "--delta-sd", "1", "--target-power", "1.5"], "target power: 1.5"),
    (["--levels", "0,5,10", "--delta-sd", "1", "--target-power", "0"], "target power: 0"),
    (["--levels", "0,5,10", "--replicates", "3", "--delta-sd", "1", "--alpha", "2"], "alpha: 2"),
    (["--levels", "0,5,10", "--replicates", "3", "--delta-sd", "x"], "--delta-sd: 'x'"),
    (["--levels", "0,5,10", "--replicates", "3"], "--delta: not given"),
    (["--levels", "0,5,10", "--delta-sd", "1"], "--replicates: not given"),
    (["--levels", "4", "--range", "9,1", "--replicates", "2", "--delta-sd", "1"], "range: 9"),
    (
        ["--levels", "0,5,10", "--replicates", "3", "--delta-sd", "1", "--sigma-upper", "0.9"],
        "--sigma-upper: needs --from-data",
    ),
]


@pytest.mark.parametrize(("argv", "fragment"), BAD)
def test_bad_input_exits_2_with_one_line(capsys, argv, fragment):
    code, out, err = _run(capsys, *argv)
    assert code == 2
    assert out == ""
    assert err.startswith("bendwise: error: ") and err.endswith("\n")
    assert err.count("\n") == 1, err
    assert fragment in err, err


# -------------------------------------------------------------- σ from existing data (engine core)


def _write_runs(tmp_path):
    rows = {
        0: [0.10, 0.18, 0.05],
        5: [1.21, 1.05, 1.12],
        10: [2.31, 2.18],
        20: [4.02, 4.25, 4.11],
        40: [7.60],
    }
    lines = ["conc,signal"] + [f"{x},{y}" for x, ys in rows.items() for y in ys]
    path = tmp_path / "runs.csv"
    path.write_text("\n".join(lines) + "\n")
    # hand computation of the pure error (common practice: pooled within-level SS)
    ss = sum(float(np.sum((np.array(ys) - np.mean(ys)) ** 2)) for ys in rows.values())
    df = sum(len(ys) - 1 for ys in rows.values())
    return path, ss, df


def test_sigma_from_existing_data(capsys, tmp_path):
    from scipy.stats import chi2

    path, ss, df = _write_runs(tmp_path)
    base = ["--levels", "0,5,10,20,40", "--replicates", "3", "--delta", "0.3"]
    data = ["--from-data", str(path), "-y", "signal", "-x", "conc"]
    code, out, _ = _run(capsys, *base, *data, "--json")
    assert code == 0
    sig = json.loads(out)["sigma"]
    assert sig["df"] == df == 7
    assert sig["value"] == pytest.approx(math.sqrt(ss / df), rel=1e-9)
    assert sig["source"] == "pure error"

    code, out, _ = _run(capsys, *base, *data, "--sigma-upper", "0.9", "--json")
    sig = json.loads(out)["sigma"]
    # reference: scipy.stats.chi2 — one-sided upper bound sqrt(SS / χ²_{0.1}(df))
    assert sig["value"] == pytest.approx(math.sqrt(ss / chi2.ppf(0.1, df)), rel=1e-9)
    assert sig["source"] == "upper bound" and sig["confidence"] == 0.9

    code, out, _ = _run(capsys, *base, *data, "--sigma-upper", "0.9")
    assert code == 0 and "90% upper bound" in out and "on 7 df" in out

    code, out, err = _run(capsys, *base, "--from-data", str(path), "-y", "nope", "-x", "conc")
    assert code == 2 and err.count("\n") == 1 and "nope" in err
    code, out, err = _run(capsys, *base, *data, "--sigma", "1")
    assert code == 2 and "not both" in err
