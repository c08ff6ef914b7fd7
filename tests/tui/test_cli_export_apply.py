"""`bendwise export` and `bendwise apply` from the command line: files, JSON rows, one-line refusals."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np
import pytest
from bendwise.engine.handon.specfile import load_spec
from bendwise.tui.cli import main

DATASETS = Path(__file__).resolve().parents[2] / "datasets"
SENSOR = str(DATASETS / "sensor_calibration.csv")
LINE = str(DATASETS / "straight_line.csv")


def _run(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture(scope="module")
def line_export(tmp_path_factory):
    """The straight-line demo exported once (root node)."""
    out = tmp_path_factory.mktemp("line") / "export"
    assert main(["export", LINE, "-y", "response_au", "-x", "dose_ug", "--node", "root", "-o", str(out)]) == 0
    return out


@pytest.fixture(scope="module")
def sensor_export(tmp_path_factory):
    """The suggested sensor model (run_day admitted; a curve, so inverse prediction is numeric)."""
    out = tmp_path_factory.mktemp("sensor") / "export"
    code = main(["export", SENSOR, "-y", "signal_mv", "-x", "conc_mg_l", "--covariates", "run_day",
                 "--suggested", "-o", str(out)])
    assert code == 0
    return out


@pytest.fixture(scope="module")
def log_category_export(tmp_path_factory):
    """log signal ~ conc + run_day, picked by its spec from the grow JSON and exported by id."""
    import contextlib
    import io

    base = ["-y", "signal_mv", "-x", "conc_mg_l", "--covariates", "run_day"]
    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        assert main(["grow", SENSOR, *base, "--json"]) == 0
    nodes = json.loads(buf.getvalue())["nodes"]
    node = next(n["id"] for n in nodes if n["spec"]["response"] == "log" and n["spec"]["covariates"] == ["run_day"]
                and n["spec"]["degree"] == 1 and n["spec"]["predictor"] == "identity" and not n["spec"]["interactions"]
                and n["spec"]["weights"] is None)
    out = tmp_path_factory.mktemp("logcat") / "export"
    with contextlib.redirect_stdout(io.StringIO()):
        assert main(["export", SENSOR, *base, "--node", node, "-o", str(out)]) == 0
    return out


def _csv(path: Path, header: str, *rows: str) -> str:
    path.write_text("\n".join([header, *rows]) + "\n", encoding="utf-8")
    return str(path)


# ----------------------------------------------------------------------------- export

def test_export_writes_three_files_and_lists_them(tmp_path, capsys):
    out = tmp_path / "exp"
    code, text, err = _run(capsys, "export", LINE, "-y", "response_au", "-x", "dose_ug", "--suggested",
                           "-o", str(out))
    assert code == 0 and err == ""
    from bendwise.engine.handon.html import html_available

    names = ["report.md", "reproduce.py", "spec.json"] + (["report.html"] if html_available() else [])
    assert sorted(p.name for p in out.iterdir()) == sorted(names)  # both reports by default with matplotlib
    for name in names:
        assert f"wrote {out / name}" in text
    assert "node root" in text and "Caution" in text
    doc = json.loads((out / "spec.json").read_text())
    assert doc["suggestion"]["exported_is_suggested"] is True


def test_export_refuses_an_existing_folder_without_force(line_export, capsys):
    args = ["export", LINE, "-y", "response_au", "-x", "dose_ug", "--node", "root", "-o", str(line_export)]
    code, _, err = _run(capsys, *args)
    assert code == 2 and "already exists" in err and "--force" in err and len(err.strip().splitlines()) == 1
    code, _, err = _run(capsys, *args, "--force")
    assert code == 0 and err == ""


def test_export_unknown_node_and_nothing_suggested(tmp_path, capsys):
    code, _, err = _run(capsys, "export", LINE, "-y", "response_au", "-x", "dose_ug", "--node", "n77",
                        "-o", str(tmp_path / "a"))
    assert code == 2 and "'n77' is not in the tree" in err
    # the straight line fails on the sensor data and depth 0 grows nothing else
    code, _, err = _run(capsys, "export", SENSOR, "-y", "signal_mv", "-x", "conc_mg_l", "--depth", "0",
                        "--suggested", "-o", str(tmp_path / "b"))
    assert code == 2 and "no candidate passes lack of fit" in err and "--node" in err
    assert not (tmp_path / "a").exists() and not (tmp_path / "b").exists()


def test_export_needs_a_node_choice(tmp_path, capsys):
    try:
        code = main(["export", LINE, "-y", "response_au", "-x", "dose_ug", "-o", str(tmp_path / "c")])
    except SystemExit as exc:  # argparse usage errors end the same way either through main or the exit
        code = exc.code
    assert code == 2
    assert "--node" in capsys.readouterr().err


def test_export_missing_data_file(tmp_path, capsys):
    code, _, err = _run(capsys, "export", str(tmp_path / "none.csv"), "-y", "a", "-x", "b", "--suggested",
                        "-o", str(tmp_path / "d"))
    assert code == 2 and "file not found" in err


# ----------------------------------------------------------------------------- apply, forward

def test_apply_forward_json_rows(line_export, tmp_path, capsys):
    new = _csv(tmp_path / "new.csv", "dose_ug", "0", "12.5", "40", "50")
    code, out, err = _run(capsys, "apply", str(line_export / "spec.json"), new, "--json")
    assert code == 0 and err == ""
    doc = json.loads(out)
    rows = doc["rows"]
    assert len(rows) == 4 and doc["mode"] == "forward"
    for key in ("x", "fit", "median", "ci_low", "ci_high", "pi_low", "pi_high", "outside_range"):
        assert all(key in r for r in rows)
    assert [r["outside_range"] for r in rows] == [False, False, False, True]
    for r in rows:
        assert r["pi_low"] < r["ci_low"] < r["fit"] < r["ci_high"] < r["pi_high"]
        assert r["fit"] == r["median"]  # no response transform: mean and median coincide
    _, model = load_spec(line_export / "spec.json")
    b0, b1 = model.beta
    assert rows[1]["fit"] == pytest.approx(b0 + b1 * 12.5, rel=1e-12)


def test_apply_text_flags_extrapolation(line_export, tmp_path, capsys):
    new = _csv(tmp_path / "new.csv", "dose_ug", "5", "60")
    code, out, _ = _run(capsys, "apply", str(line_export), new)
    assert code == 0 and "OUTSIDE" in out and "inside" in out and "Caution" in out


def test_apply_writes_csv_atomically_and_refuses_overwrite(line_export, tmp_path, capsys):
    new = _csv(tmp_path / "new.csv", "dose_ug", "1", "2")
    target = tmp_path / "pred.csv"
    code, out, _ = _run(capsys, "apply", str(line_export), new, "-o", str(target))
    assert code == 0 and "wrote 2 row(s)" in out
    with open(target, newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == 2 and {"x", "fit", "pi_low", "pi_high", "outside_range"} <= set(rows[0])
    code, _, err = _run(capsys, "apply", str(line_export), new, "-o", str(target))
    assert code == 2 and "--force" in err
    code, _, _ = _run(capsys, "apply", str(line_export), new, "-o", str(target), "--force")
    assert code == 0
    assert sorted(p.name for p in tmp_path.iterdir()) == ["new.csv", "pred.csv"]


def test_apply_with_covariate_and_transform(log_category_export, tmp_path, capsys):
    new = _csv(tmp_path / "new.csv", "conc_mg_l,run_day", "0,day1", "30,day2", "80,day3")
    code, out, err = _run(capsys, "apply", str(log_category_export), new, "--json")
    assert code == 0, err
    got = json.loads(out)["rows"]
    assert [r["run_day"] for r in got] == ["day1", "day2", "day3"]
    for r in got:
        # log scale: the smearing mean exceeds the back-transformed median; intervals stay positive
        assert r["fit"] > r["median"] > 0 and 0 < r["pi_low"] < r["median"] < r["pi_high"]
        assert r["ci_low"] < r["median"] < r["ci_high"]
    code, _, err = _run(capsys, "apply", str(log_category_export), _csv(tmp_path / "n2.csv", "conc_mg_l", "5"))
    assert code == 2 and "'run_day' not found" in err


# ----------------------------------------------------------------------------- apply, inverse

def test_apply_inverse_on_the_miller_example(tmp_path, capsys):
    # reference: Miller & Miller fluorescence example (book values from memory): x̂₀ 0.72, 6.21, 11.13;
    # s_x0 0.26, 0.24, 0.26 for y₀ = 2.9, 13.5, 23.0
    data = _csv(tmp_path / "mm.csv", "conc,signal", *[f"{x},{y}" for x, y in
                zip([0, 2, 4, 6, 8, 10, 12], [2.1, 5.0, 9.0, 12.6, 17.3, 21.0, 24.7], strict=True)])
    out_dir = tmp_path / "mm"
    assert main(["export", data, "-y", "signal", "-x", "conc", "--node", "root", "-o", str(out_dir)]) == 0
    capsys.readouterr()
    new = _csv(tmp_path / "y.csv", "signal", "2.9", "13.5", "23.0")
    code, out, err = _run(capsys, "apply", str(out_dir), new, "--inverse", "--json")
    assert code == 0, err
    rows = json.loads(out)["rows"]
    assert [round(r["x"], 2) for r in rows] == [0.72, 6.21, 11.13]
    assert [round(r["s_x0"], 2) for r in rows] == [0.26, 0.24, 0.26]
    for r in rows:
        assert {"y", "x", "low", "high", "interval"} <= set(r) and r["interval"] == "finite"
    # averaging 3 readings narrows the interval
    code, out, _ = _run(capsys, "apply", str(out_dir), new, "--inverse", "--replicates", "3", "--json")
    rows3 = json.loads(out)["rows"]
    for one, three in zip(rows, rows3, strict=True):
        assert three["high"] - three["low"] < one["high"] - one["low"]
        assert three["s_x0"] < one["s_x0"] and three["replicates"] == 3


def test_apply_inverse_text_on_a_curve(sensor_export, tmp_path, capsys):
    doc = json.loads((sensor_export / "spec.json").read_text())
    assert doc["model"]["degree"] >= 2  # a curve: solved numerically
    new = _csv(tmp_path / "y.csv", "signal_mv,run_day", "60,day1", "300,day1")  # extra columns are ignored
    code, out, err = _run(capsys, "apply", str(sensor_export), new, "--inverse")
    assert code == 0, err
    assert "finite" in out and "conc_mg_l estimate" in out
    code, out, _ = _run(capsys, "apply", str(sensor_export), new, "--inverse", "--json")
    rows = json.loads(out)["rows"]
    assert all(r["method"] == "numeric" and r["low"] < r["x"] < r["high"] for r in rows)


# ----------------------------------------------------------------------------- refusals

def _spec_copy(src: Path, dst: Path, change) -> str:
    doc = json.loads((src / "spec.json").read_text())
    change(doc)
    dst.write_text(json.dumps(doc), encoding="utf-8")
    return str(dst)


def test_unknown_major_version_is_refused(line_export, tmp_path, capsys):
    spec = _spec_copy(line_export, tmp_path / "s.json", lambda d: d.update(schema_version="3.0"))
    new = _csv(tmp_path / "new.csv", "dose_ug", "1")
    code, out, err = _run(capsys, "apply", spec, new)
    assert code == 2 and out == "" and "newer major version" in err and len(err.strip().splitlines()) == 1


def test_wrong_types_are_refused(line_export, tmp_path, capsys):
    spec = _spec_copy(line_export, tmp_path / "s.json", lambda d: d["fit"].update(sigma="big"))
    new = _csv(tmp_path / "new.csv", "dose_ug", "1")
    code, _, err = _run(capsys, "apply", spec, new)
    assert code == 2 and "fit.sigma" in err


def test_missing_files_and_columns(line_export, tmp_path, capsys):
    new = _csv(tmp_path / "new.csv", "dose", "1")
    code, _, err = _run(capsys, "apply", str(line_export), new)
    assert code == 2 and "'dose_ug' not found" in err
    code, _, err = _run(capsys, "apply", str(line_export), new, "--inverse")
    assert code == 2 and "'response_au' not found" in err
    code, _, err = _run(capsys, "apply", str(tmp_path / "nope.json"), new)
    assert code == 2 and "spec file not found" in err
    code, _, err = _run(capsys, "apply", str(line_export), str(tmp_path / "nope.csv"))
    assert code == 2 and "file not found" in err


def test_bad_values_in_new_data(line_export, log_category_export, tmp_path, capsys):
    new = _csv(tmp_path / "new.csv", "dose_ug", "1", "two", "3")
    code, _, err = _run(capsys, "apply", str(line_export), new)
    assert code == 2 and "row 2" in err and "'two'" in err
    code, _, err = _run(capsys, "apply", str(line_export), new, "--replicates", "2")
    assert code == 2 and "--inverse" in err
    bad = _csv(tmp_path / "cat.csv", "conc_mg_l,run_day", "5,day9")
    code, _, err = _run(capsys, "apply", str(log_category_export), bad)
    assert code == 2 and "'day9'" in err and "day1" in err


def test_malicious_spec_text_is_never_executed(line_export, tmp_path, capsys):
    marker = tmp_path / "MARKER"
    payload = f"__import__('os').system('touch {marker}')"

    def poison(d):
        d["model"]["formula_text"] = payload
        d["node"]["label"] = payload
        d["fit"]["coefficients"][0]["name"] = payload

    spec = _spec_copy(line_export, tmp_path / "s.json", poison)
    new = _csv(tmp_path / "new.csv", "dose_ug", "1", "2")
    code, out, err = _run(capsys, "apply", spec, new, "--json")
    assert code == 0, err  # the text fields are data: the model is rebuilt from terms and coefficients
    _, model = load_spec(line_export)
    assert json.loads(out)["rows"][0]["fit"] == pytest.approx(float(np.sum(model.beta * [1.0, 1.0])), rel=1e-12)
    # the same payload where bendwise expects a structured value is refused
    for change in (
        lambda d: d["model"]["response"]["transform"].update(kind=payload),
        lambda d: d["model"]["terms"][1].update(kind=payload),
        lambda d: d.update(schema_version=payload),
    ):
        spec = _spec_copy(line_export, tmp_path / "s2.json", change)
        code, _, err = _run(capsys, "apply", spec, new)
        assert code == 2 and err.startswith("bendwise: error: ")
    assert not marker.exists()
