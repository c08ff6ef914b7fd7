"""apply never sells a number the model cannot give: past a pole, outside a back-transform's
range, or lost to floating-point over- or underflow, a row says so and carries no number; a
tampered spec is refused in one line (exit 2), never a traceback."""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import bendwise.engine as engine
import numpy as np
import pandas as pd
import pytest
from bendwise.engine.errors import SpecError
from bendwise.engine.handon.export import export_node
from bendwise.engine.handon.inverse import inverse_predict
from bendwise.engine.handon.predict import predict_forward
from bendwise.engine.handon.specfile import load_spec
from bendwise.tui.cli import main

X = np.repeat(np.arange(0.0, 9.0), 3)
NOISE = np.tile([-0.004, 0.0, 0.0045], 9)


def _export(tmp_path: Path, frame: pd.DataFrame, response: str) -> Path:
    path = tmp_path / "cal.csv"
    frame.to_csv(path, index=False)
    study = engine.make_study(engine.load_table(path), y="y", x="x", source=path.name)
    tree = engine.grow(study, depth=1)
    node = next(n for n in tree.nodes.values() if n.spec.response.kind == response and n.spec.degree == 1
                and n.spec.predictor.kind == "identity" and n.spec.weights is None)
    out = tmp_path / f"exp-{response}"
    export_node(tree, node.id, out, data_path=path)
    return out


@pytest.fixture
def reciprocal(tmp_path):
    """1/y = 0.7 − 0.0614x + e, calibrated on x = 0…8: the pole (1/y = 0) is near x = 11.4."""
    return _export(tmp_path, pd.DataFrame({"x": X, "y": 1.0 / (0.7 - 0.0614 * X + NOISE)}), "reciprocal")


@pytest.fixture
def logy(tmp_path):
    return _export(tmp_path, pd.DataFrame({"x": X, "y": np.exp(0.5 + 0.3 * X + 5 * NOISE)}), "log")


def _consistent(rows: list[dict]) -> None:
    """Every number given sits inside its own interval; a row without numbers is flagged."""
    for r in rows:
        if r["flag"] in ("no back-transform", "overflow", "underflow"):
            assert all(r[k] is None for k in ("fit", "median", "ci_low", "ci_high", "pi_low", "pi_high")), r
            assert r["note"]
            continue
        assert r["median"] is not None and math.isfinite(r["median"]), r
        lo = -math.inf if r["ci_low"] is None else r["ci_low"]
        hi = math.inf if r["ci_high"] is None else r["ci_high"]
        assert lo <= r["median"] <= hi, r
        plo = -math.inf if r["pi_low"] is None else r["pi_low"]
        phi = math.inf if r["pi_high"] is None else r["pi_high"]
        assert plo <= r["median"] <= phi, r
        if r["fit"] is not None:
            assert plo <= r["fit"] <= phi, r
            assert r["fit"] > 0  # every calibration response was positive


def test_reciprocal_model_gives_no_number_past_its_pole(reciprocal):
    _, model = load_spec(reciprocal / "spec.json")
    x = np.array([4.0, 8.0, 10.0, 11.0, 11.5, 12.0, 14.0, 20.0])
    rows = predict_forward(model, x).rows()
    _consistent(rows)
    past = [r for r in rows if r["z_fit"] is not None and r["z_fit"] <= 0]
    assert len(past) == 4  # 11.5, 12, 14, 20
    assert all(r["flag"] == "no back-transform" and "pole" in r["note"] for r in past)
    inside = [r for r in rows if r["x"] <= 8]
    assert all(r["flag"] is None for r in inside)


def test_reciprocal_past_the_pole_in_the_command_output(reciprocal, tmp_path, capsys):
    new = tmp_path / "new.csv"
    new.write_text("x\n4\n12\n20\n", encoding="utf-8")
    assert main(["apply", str(reciprocal / "spec.json"), str(new), "--json"]) == 0
    rows = json.loads(capsys.readouterr().out)["rows"]
    assert [r["flag"] for r in rows] == [None, "no back-transform", "no back-transform"]
    assert main(["apply", str(reciprocal / "spec.json"), str(new)]) == 0
    text = capsys.readouterr().out
    assert "past the pole of 1/y" in text and "-31." not in text and "−∞ … ∞" not in text


def test_log_model_far_outside_flags_underflow_and_overflow(logy):
    _, model = load_spec(logy / "spec.json")
    rows = predict_forward(model, np.array([4.0, -2500.0, -3000.0, 3000.0])).rows()
    _consistent(rows)
    assert [r["flag"] for r in rows] == [None, "underflow", "underflow", "overflow"]
    for r in rows[1:]:
        assert r["fit"] is None and r["ci_low"] is None and r["ci_high"] is None
    assert "smallest normal float" in rows[1]["note"] and "floating-point range" in rows[3]["note"]
    # the interval end that would overflow is not reported as an open (null) end
    assert "open (null)" not in (rows[3]["note"] or "")


def test_inverse_prediction_never_reports_a_finite_set_without_ends(logy, tmp_path):
    cal = pd.DataFrame({"x": X, "y": 1.0 + 0.5 * X + 10 * NOISE})
    line = _export(tmp_path, cal, "identity")
    for folder in (line, logy):
        _, model = load_spec(folder / "spec.json")
        ys = [5.0, 1e200, 1e308, 1e-300] + ([-1e308] if folder == line else [])
        for r in inverse_predict(model, np.array(ys)):
            ends = [v for piece in r.pieces for v in piece]
            if r.interval == "finite":
                assert r.low is not None and r.high is not None and math.isfinite(r.low) and math.isfinite(r.high)
                assert r.low <= r.high and (r.x is None or r.low <= r.x <= r.high)
            assert all(v is None or math.isfinite(v) for v in [r.x, r.s_x0, *ends])
            if r.interval == "overflow":
                assert r.flag == "overflow" and r.x is None and r.pieces == ()
    _, model = load_spec(line / "spec.json")
    big = inverse_predict(model, np.array([1e200, 1e308]))
    # 1e200 is far outside, but its x is representable: a finite set around x̂
    assert big[0].interval == "finite" and big[0].low < big[0].x < big[0].high
    assert big[1].interval == "overflow" and "floating-point range" in big[1].note


# ----------------------------------------------------------------------------- tampered specs


@pytest.fixture
def line_spec(tmp_path):
    cal = pd.DataFrame({"x": X, "y": 1.0 + 0.5 * X + 10 * NOISE})
    folder = _export(tmp_path, cal, "identity")
    return folder, json.loads((folder / "spec.json").read_text(encoding="utf-8"))


def _write(folder: Path, doc: dict) -> Path:
    path = folder / "tampered.json"
    path.write_text(json.dumps(doc), encoding="utf-8")
    return path


def test_a_sigma_whose_square_overflows_is_refused_in_one_line(line_spec, tmp_path, capsys):
    folder, doc = line_spec
    doc["fit"]["sigma"] = 1e308
    new = tmp_path / "new.csv"
    new.write_text("x\n1\n2\n", encoding="utf-8")
    assert main(["apply", str(_write(folder, doc)), str(new)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "fit.sigma" in err and "overflows" in err


def test_a_covariance_that_is_not_positive_semidefinite_is_refused(line_spec):
    folder, doc = line_spec
    doc["fit"]["covariance"] = [[1.0, 10.0], [10.0, 1.0]]
    with pytest.raises(SpecError, match="fit.covariance is not positive semi-definite"):
        load_spec(_write(folder, doc))
    doc["fit"]["covariance"] = [[0.0, 0.5], [0.5, 1.0]]
    with pytest.raises(SpecError, match="fit.covariance"):
        load_spec(_write(folder, doc))
    # rounding-level negatives in a genuine covariance are accepted
    v = np.array([[4.0, 2.0], [2.0, 1.0]]) * (1 + 1e-15)
    doc["fit"]["covariance"] = v.tolist()
    load_spec(_write(folder, doc))


@pytest.mark.parametrize("damage", ["coefficients", "sigma", "estimate", "rows"])
def test_reproduce_script_exits_2_for_a_spec_missing_what_it_compares(line_spec, damage):
    folder, doc = line_spec
    if damage == "coefficients":
        del doc["fit"]["coefficients"]
    elif damage == "sigma":
        doc["fit"]["sigma"] = "large"
    elif damage == "estimate":
        del doc["fit"]["coefficients"][0]["estimate"]
    else:
        del doc["provenance"]["rows"]
    spec = _write(folder, doc)
    done = subprocess.run([sys.executable, str(folder / "reproduce.py"), "--spec", str(spec)],
                          capture_output=True, text=True, timeout=180)
    assert done.returncode == 2, done.stdout + done.stderr
    assert "Traceback" not in done.stderr and done.stderr.count("\n") == 1
    assert "export the model again" in done.stderr
