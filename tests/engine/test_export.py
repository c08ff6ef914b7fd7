"""Exports: the spec validates and reads back, predictions round-trip, the script refits the model.

Tolerances: engine-to-engine round trips 1e-10 relative; the reproduction script checks its own
refit at 1e-8 relative (floor 1e-6·SE).
"""

from __future__ import annotations

import copy
import json
import os
import shutil
import subprocess
import sys
import textwrap
from datetime import UTC, datetime
from pathlib import Path

import bendwise.engine as engine
import jsonschema
import numpy as np
import pandas as pd
import pytest
from bendwise.engine.errors import SpecError, UsageError
from bendwise.engine.handon.export import (
    ExportExists,
    build_spec,
    export_node,
    write_rows_csv,
    write_text_atomic,
)
from bendwise.engine.handon.predict import predict_forward
from bendwise.engine.handon.report import text_chart
from bendwise.engine.handon.specfile import load_spec, schema_path, validate_spec

DATASETS = Path(__file__).resolve().parents[2] / "datasets"
SENSOR = DATASETS / "sensor_calibration.csv"
PROCESS = DATASETS / "process_trial.csv"
LINE = DATASETS / "straight_line.csv"
SCHEMA = json.loads(schema_path().read_text(encoding="utf-8"))
# reference: JSON Schema draft 2020-12, checked by the jsonschema package (one validator, built once)
VALIDATOR = jsonschema.Draft202012Validator(SCHEMA)
FIXED = datetime(2024, 5, 6, 7, 8, 9, tzinfo=UTC)


def _tree(path: Path, y: str, x: str, covs=(), depth=2):
    study = engine.make_study(engine.load_table(path), y=y, x=x, covariates=list(covs), source=path.name)
    return engine.grow(study, depth=depth)


@pytest.fixture(scope="module")
def sensor_tree():
    return _tree(SENSOR, "signal_mv", "conc_mg_l", ("run_day", "temp_c"))


@pytest.fixture(scope="module")
def process_tree():
    return _tree(PROCESS, "yield_pct", "setpoint_c", ("work_shift",))


@pytest.fixture(scope="module")
def line_tree():
    return _tree(LINE, "response_au", "dose_ug", depth=1)


def _exportable(tree):
    return [n for n in tree.nodes.values() if n.score is not None and not n.score.fit.aliased]


def _first(tree, pred):
    for n in _exportable(tree):
        if pred(n.spec):
            return n
    pytest.fail("the tree has no node of the wanted kind")


# the kinds of model the reproduction script must handle
KINDS = {
    "weighted quadratic": lambda s: s.weights is not None and s.degree == 2,
    "Box–Cox with a category": lambda s: s.response.kind == "boxcox" and s.covariates,
    "x by numeric covariate": lambda s: bool(s.interactions) and s.covariates == ("temp_c",),
    "log y on √x": lambda s: s.response.kind == "log" and s.predictor.kind == "sqrt",
}


# ----------------------------------------------------------------------------- the spec

def test_every_node_exports_a_spec_that_validates(sensor_tree, process_tree, line_tree):
    count = 0
    for tree, path in ((sensor_tree, SENSOR), (process_tree, PROCESS), (line_tree, LINE)):
        for node in _exportable(tree):
            doc = build_spec(tree, node.id, data_path=path, now=FIXED)
            VALIDATOR.validate(doc)  # reference: our published JSON Schema, via jsonschema
            model = validate_spec(doc)
            assert len(model.terms) == len(node.score.terms)
            json.dumps(doc, allow_nan=False)  # strict JSON: no NaN or inf anywhere
            count += 1
    assert count > 60


def test_spec_carries_provenance_fit_and_tests(sensor_tree):
    node = _first(sensor_tree, KINDS["weighted quadratic"])
    doc = build_spec(sensor_tree, node.id, data_path=SENSOR, now=FIXED)
    prov = doc["provenance"]
    import hashlib

    assert prov["data"]["sha256"] == hashlib.sha256(SENSOR.read_bytes()).hexdigest()
    assert prov["data"]["size_bytes"] == SENSOR.stat().st_size
    assert prov["data"]["reading"] == {"format": "text", "delimiter": ",", "decimal": ".", "sheet": None}
    assert prov["rows"] == {"read": 24, "used": 24, "dropped": 0, "drops": []}
    assert prov["grouping"]["rule"] == "exact" and prov["grouping"]["levels"] == 8
    assert doc["created_utc"] == "2024-05-06T07:08:09Z"
    assert doc["tool"]["version"] == engine.__version__
    assert doc["cautions"] == {"use": engine.CAUTION, "post_search": engine.POST_SEARCH_CAUTION}
    fit = node.score.fit
    assert [c["estimate"] for c in doc["fit"]["coefficients"]] == [c.estimate for c in fit.coefficients]
    assert np.array_equal(np.array(doc["fit"]["covariance"]), np.array(fit.cov))
    assert doc["fit"]["sigma"] == fit.sigma and doc["fit"]["df_resid"] == fit.df_resid
    assert [t["kind"] for t in doc["model"]["terms"]] == ["const", "tpow", "tpow"]
    assert doc["model"]["weights"]["rule"] == "power-of-mean"
    # the path is root → … → node, each step with its nested test or the reason there is none
    assert doc["node"]["path"][0] == "root" and doc["node"]["path"][-1] == node.id
    assert [s["node"] for s in doc["tests"]["path"]] == doc["node"]["path"][1:]
    assert doc["tests"]["straight_line"]["mandel"]["testable"]
    assert doc["tests"]["lack_of_fit"] == node.score.lack_of_fit.as_json()
    # the smearing sample: one residual per row here
    assert doc["training"]["count"] == 24 and doc["training"]["sampled"] is False
    assert doc["calibration"]["x_min"] == 0.0 and doc["calibration"]["x_max"] == 80.0
    assert len(doc["calibration"]["levels"]) == 8


def test_categorical_coding_is_recorded(process_tree):
    node = _first(process_tree, lambda s: s.covariates == ("work_shift",) and s.degree == 1 and s.response.kind == "identity"
                  and s.predictor.kind == "identity" and not s.interactions and s.weights is None)
    doc = build_spec(process_tree, node.id, now=FIXED)
    (cov,) = doc["model"]["covariates"]
    assert cov == {"name": "work_shift", "kind": "categorical", "coding": "treatment",
                   "levels": ["early", "late", "night"], "reference": "early", "mean": None}
    cats = [t for t in doc["model"]["terms"] if t["kind"] == "cat"]
    assert [t["level"] for t in cats] == ["late", "night"]
    assert doc["provenance"]["data"]["sha256"] is None  # no file given: no checksum claimed


def test_residual_sample_is_capped_and_says_so(line_tree):
    doc = build_spec(line_tree, "root", max_residuals=5, now=FIXED)
    tr = doc["training"]
    assert tr["count"] == 5 and tr["rows"] == 18 and tr["sampled"] is True
    assert "18 rows" in tr["note"] and "5 evenly spaced" in tr["note"]
    VALIDATOR.validate(doc)


# ----------------------------------------------------------------------------- round trip

def test_apply_reproduces_the_engines_own_level_predictions(sensor_tree, process_tree, tmp_path):
    checked = 0
    for tree in (sensor_tree, process_tree):
        study = tree.study
        for node in _exportable(tree):
            s = node.score
            _, model = load_spec(export_node(tree, node.id, tmp_path / f"{id(tree)}-{node.id}")[0])
            x = study.x_level_values
            covs = {}
            for name in node.spec.covariates:
                cov = study.covariate(name)
                covs[name] = (np.full(x.size, cov.levels[0], dtype=object) if cov.kind == "categorical"
                              else np.full(x.size, float(np.mean(cov.values))))
            pred = predict_forward(model, x, covs)
            # where ẑ lies past the pole of 1/y (or outside any back-transform's range) apply gives no
            # number and says so; everywhere else it reproduces the engine's fitted values
            past = np.array([f == "no back-transform" for f in pred.flags])
            assert np.isnan(pred.median[past]).all()
            if past.any():
                assert model.response.kind in ("reciprocal", "sqrt", "boxcox")
                assert (np.sign(pred.z_fit[past]) != model.y_sign).all() or model.response.kind != "reciprocal"
            ok = np.isfinite(s.level_fitted_y) & ~past
            np.testing.assert_allclose(pred.median[ok], np.asarray(s.level_fitted_y)[ok], rtol=1e-10, atol=1e-12)
            if not node.spec.covariates:
                # on the fitted scale, the engine's own fit of each replicate group
                by = tuple(c.name for c in study.covariates if c.kind == "categorical")
                parent = study.group_parent(by)
                np.testing.assert_allclose(pred.z_fit[parent], s.fit.group_fitted, rtol=1e-10, atol=1e-10)
            checked += 1
    assert checked > 60


def test_smearing_mean_matches_a_hand_computation(sensor_tree, tmp_path):
    node = _first(sensor_tree, lambda s: s.response.kind == "log" and s.predictor.kind == "identity"
                  and s.degree == 1 and not s.covariates and s.weights is None)
    _, model = load_spec(export_node(sensor_tree, node.id, tmp_path / "log")[0])
    study = sensor_tree.study
    # reference: Duan (1983) smearing, computed by hand: OLS of log y on [1, x] with numpy,
    # then mean over residuals of exp(fit + residual)
    X = np.column_stack([np.ones(study.n), study.x])
    beta, *_ = np.linalg.lstsq(X, np.log(study.y), rcond=None)
    resid = np.log(study.y) - X @ beta
    x0 = np.array([3.0, 33.0, 75.0])
    hand = np.array([np.mean(np.exp(beta[0] + beta[1] * v + resid)) for v in x0])
    pred = predict_forward(model, x0)
    np.testing.assert_allclose(pred.fit, hand, rtol=1e-9)
    np.testing.assert_allclose(pred.median, np.exp(beta[0] + beta[1] * x0), rtol=1e-9)
    assert (pred.fit > pred.median).all()  # exp is convex: the mean exceeds the median


def test_smearing_through_the_general_path_matches_a_hand_computation(sensor_tree, tmp_path):
    node = _first(sensor_tree, lambda s: s.response.kind == "sqrt" and s.predictor.kind == "identity"
                  and s.degree == 1 and not s.covariates and s.weights is None)
    _, model = load_spec(export_node(sensor_tree, node.id, tmp_path / "sqrt")[0])
    study = sensor_tree.study
    # reference: Duan (1983) smearing by hand for √y: mean over residuals of (fit + residual)²
    X = np.column_stack([np.ones(study.n), study.x])
    beta, *_ = np.linalg.lstsq(X, np.sqrt(study.y), rcond=None)
    resid = np.sqrt(study.y) - X @ beta
    x0 = np.array([10.0, 50.0])
    hand = np.array([np.mean((beta[0] + beta[1] * v + resid) ** 2) for v in x0])
    np.testing.assert_allclose(predict_forward(model, x0).fit, hand, rtol=1e-9)


def test_back_transformed_intervals_stop_at_the_edge_of_the_response_range():
    from bendwise.engine.handon.predict import back_interval
    from bendwise.engine.stats.transforms import RECIPROCAL, SQRT, Transform

    # √y: a z interval reaching below 0 covers y from 0 (y = z² is not monotone below 0)
    lo, hi = back_interval(SQRT, np.array([-1.0, 1.0]), np.array([2.0, 3.0]))
    assert lo.tolist() == [0.0, 1.0] and hi.tolist() == [4.0, 9.0]
    # 1/y with positive y: a z interval containing 0 leaves y unbounded above
    lo, hi = back_interval(RECIPROCAL, np.array([-0.1, 0.25]), np.array([0.5, 0.5]), y_sign=1)
    assert lo.tolist() == [2.0, 2.0] and hi[0] == np.inf and hi[1] == 4.0
    # an interval wholly outside the image has no back-transform
    lo, hi = back_interval(SQRT, np.array([-3.0]), np.array([-1.0]))
    assert np.isnan(lo[0]) and np.isnan(hi[0])
    # Box–Cox λ = 0.5 maps z ≥ −2 onto y ≥ 0
    lo, hi = back_interval(Transform("boxcox", 0.5), np.array([-5.0]), np.array([0.0]))
    assert lo[0] == 0.0 and hi[0] == pytest.approx(1.0)


# ----------------------------------------------------------------------------- reproduction script

def _run_script(folder: Path, *extra: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, str(folder / "reproduce.py"), *extra], capture_output=True,
                          text=True, timeout=120, cwd=folder.parent)


@pytest.fixture(scope="module")
def script_exports(sensor_tree, tmp_path_factory):
    """One export per kind of model, data next to it (the scripts find it by relative path)."""
    base = tmp_path_factory.mktemp("scripts")
    data = base / "sensor.csv"
    data.write_bytes(SENSOR.read_bytes())
    out = {}
    for kind, pred in KINDS.items():
        node = _first(sensor_tree, pred)
        out[kind] = base / "exports" / node.id
        export_node(sensor_tree, node.id, out[kind], data_path=data)
    return out


@pytest.mark.slow  # each case runs the generated script in a new interpreter
@pytest.mark.parametrize("kind", sorted(KINDS))
def test_reproduction_script_refits_the_model(script_exports, kind):
    folder = script_exports[kind]
    # reference: statsmodels formula OLS/WLS refit in a separate interpreter
    done = _run_script(folder)
    assert done.returncode == 0, done.stdout + done.stderr
    assert "OK: all" in done.stdout and "WARNING" not in done.stderr
    body = (folder / "reproduce.py").read_text(encoding="utf-8").split('"""', 2)[2]
    assert "import bendwise" not in body and "from bendwise" not in body and "tui" not in body


@pytest.mark.slow
def test_reproduction_script_catches_an_altered_spec(script_exports, tmp_path):
    folder = tmp_path / "altered"
    shutil.copytree(script_exports["Box–Cox with a category"], folder)
    spec_file = folder / "spec.json"
    doc = json.loads(spec_file.read_text(encoding="utf-8"))
    doc["fit"]["coefficients"][1]["estimate"] *= 1 + 1e-6
    spec_file.write_text(json.dumps(doc), encoding="utf-8")
    done = _run_script(folder, str(script_exports["Box–Cox with a category"].parents[1] / "sensor.csv"))
    assert done.returncode == 1
    assert "MISMATCH" in done.stderr and "NO" in done.stdout


@pytest.mark.slow
def test_reproduction_script_warns_on_other_data_and_needs_the_file(script_exports, tmp_path):
    folder = script_exports["weighted quadratic"]
    copy_ = tmp_path / "copy.csv"
    copy_.write_bytes(SENSOR.read_bytes() + b"\n")  # same rows, other bytes
    done = _run_script(folder, str(copy_))
    assert done.returncode == 0 and "WARNING" in done.stderr and "SHA-256" in done.stderr
    done = _run_script(folder, str(tmp_path / "gone.csv"))
    assert done.returncode == 2 and "not found" in done.stderr


# ----------------------------------------------------------------------------- files

def test_existing_folder_needs_force_and_only_an_export_is_replaced(line_tree, tmp_path):
    out = tmp_path / "exp"
    first = export_node(line_tree, "root", out, now=FIXED)
    assert [p.name for p in first] == ["spec.json", "reproduce.py", "report.md"]
    with pytest.raises(ExportExists, match="--force"):
        export_node(line_tree, "root", out)
    later = datetime(2025, 1, 1, tzinfo=UTC)
    export_node(line_tree, "root", out, force=True, now=later)
    assert json.loads((out / "spec.json").read_text())["created_utc"].startswith("2025-01-01")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["exp"]  # no temporary folders left
    (out / "notes.txt").write_text("mine")
    with pytest.raises(UsageError, match="did not write"):
        export_node(line_tree, "root", out, force=True)
    assert (out / "notes.txt").read_text() == "mine"


def test_unknown_or_unusable_node_is_refused(line_tree, tmp_path):
    with pytest.raises(UsageError, match="'n999' is not in the tree"):
        export_node(line_tree, "n999", tmp_path / "x")
    assert not (tmp_path / "x").exists()


def test_atomic_text_and_csv_writes(tmp_path):
    target = tmp_path / "rows.csv"
    write_rows_csv([{"a": 1.5, "b": None}, {"a": 2.0, "b": [[None, 3.0]]}], target)
    assert target.read_text() == "a,b\n1.5,\n2.0,open 3.0\n"
    with pytest.raises(ExportExists, match="already exists"):
        write_text_atomic(target, "x")
    write_text_atomic(target, "new", force=True)
    assert target.read_text() == "new"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["rows.csv"]


# ----------------------------------------------------------------------------- reading specs back

def _doc(line_tree):
    return build_spec(line_tree, "root", now=FIXED)


# (name, change, field named in our message, whether a JSON Schema can express the rule at all —
# cross-field rules such as "a term's covariate is declared" or "p×p covariance" cannot be)
BAD = [
    ("newer major version", lambda d: d.update(schema_version="2.0"), "newer major", True),
    ("older major version", lambda d: d.update(schema_version="0.9"), "older major", True),
    ("no version", lambda d: d.pop("schema_version"), "schema_version", True),
    ("terms missing", lambda d: d["model"].pop("terms"), "model.terms", True),
    ("estimate as text", lambda d: d["fit"]["coefficients"][0].update(estimate="1.0"),
     "fit.coefficients[0].estimate", True),
    ("unknown transform", lambda d: d["model"]["response"]["transform"].update(kind="exp"),
     "model.response.transform.kind", True),
    ("undeclared covariate", lambda d: d["model"]["terms"][1].update(kind="num", power=0, covariate="temp"),
     "model.terms[1].covariate", False),
    ("sigma zero", lambda d: d["fit"].update(sigma=0), "fit.sigma", True),
    ("df as float", lambda d: d["fit"].update(df_resid=16.5), "fit.df_resid", True),
    ("covariance shape", lambda d: d["fit"]["covariance"].pop(), "fit.covariance", False),
    ("residuals as text", lambda d: d["training"].update(residuals=["a", "b"]), "training.residuals", True),
    ("power needs a parameter", lambda d: d["model"]["predictor"]["transform"].update(kind="power"),
     "model.predictor.transform.param", True),
]


@pytest.mark.parametrize("name,change,field,schema_can", BAD, ids=[b[0] for b in BAD])
def test_bad_specs_are_refused_by_us_and_by_the_schema(line_tree, name, change, field, schema_can):
    doc = copy.deepcopy(_doc(line_tree))
    change(doc)
    with pytest.raises(SpecError) as info:
        validate_spec(doc)
    assert field in str(info.value)
    assert "\n" not in str(info.value)
    if schema_can:
        # reference: the published JSON Schema refuses the same document (jsonschema package)
        with pytest.raises(jsonschema.ValidationError):
            VALIDATOR.validate(doc)


def test_newer_minor_version_with_extra_fields_is_read(line_tree):
    doc = copy.deepcopy(_doc(line_tree))
    doc["schema_version"] = "1.7"
    doc["model"]["something_new"] = {"x": 1}
    model = validate_spec(doc)
    assert model.schema_version == "1.7" and model.is_line


def test_load_spec_refuses_missing_and_broken_files(tmp_path):
    with pytest.raises(SpecError, match="not found"):
        load_spec(tmp_path / "nope.json")
    broken = tmp_path / "broken.json"
    broken.write_text("{\"schema_version\": ")
    with pytest.raises(SpecError, match="not valid JSON"):
        load_spec(broken)
    deep = tmp_path / "deep.json"
    deep.write_text("[" * 100_000 + "]" * 100_000)
    with pytest.raises(SpecError):
        load_spec(deep)


# ----------------------------------------------------------------------------- report

def test_report_gives_limits_for_a_line_only(line_tree, sensor_tree, tmp_path):
    export_node(line_tree, "root", tmp_path / "line")
    doc = json.loads((tmp_path / "line" / "spec.json").read_text())
    text = (tmp_path / "line" / "report.md").read_text()
    s, b1 = doc["fit"]["sigma"], doc["fit"]["coefficients"][1]["estimate"]
    # common practice (ICH Q2): DL = 3.3σ/S, QL = 10σ/S with σ the residual SD and S the slope
    assert f"DL = 3.3σ/S = {3.3 * s / b1:.5g}" in text
    assert f"QL = 10σ/S = {10 * s / b1:.5g}" in text
    for needle in ("slope", "intercept", "r² =", "Residual sum of squares", "## Residuals by level",
                   "## How this model was reached", engine.CAUTION, engine.POST_SEARCH_CAUTION, "```"):
        assert needle in text
    quad = _first(sensor_tree, lambda s: s.degree == 2 and not s.covariates and s.weights is None
                  and s.response.kind == "identity" and s.predictor.kind == "identity")
    export_node(sensor_tree, quad.id, tmp_path / "quad")
    text = (tmp_path / "quad" / "report.md").read_text()
    assert "DL = 3.3σ/S =" not in text and "Not given" in text


def test_text_chart_is_plain_ascii_of_the_asked_size():
    lines = text_chart([(np.array([0.0, 1, 2]), np.array([1.0, 4, 9]), "o")], width=30, height=8)
    assert len(lines) == 8 + 2
    assert all(len(line.split("|", 1)[1]) == 30 for line in lines[:8])
    assert all(ch.isascii() for line in lines for ch in line)
    assert lines[0].split("|")[1].rstrip().endswith("o") and lines[7].split("|")[1].startswith("o")


def test_export_modules_stay_headless_and_light():
    probe = textwrap.dedent(
        """
        import json, sys
        import bendwise.engine.handon.export, bendwise.engine.handon.inverse, bendwise.engine.handon.predict, bendwise.engine.handon.specfile, bendwise.engine.handon.report, bendwise.engine.handon.reproduce
        print(json.dumps(sorted({m.removeprefix("bendwise.").split(".")[0] for m in sys.modules} &
                                {"textual", "rich", "plotext", "tui", "pandas", "scipy", "statsmodels"})))
        """
    )
    done = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, timeout=120,
                          cwd=Path(__file__).resolve().parents[2], env={**os.environ})
    assert done.returncode == 0, done.stderr
    assert json.loads(done.stdout.strip().splitlines()[-1]) == []


def test_new_data_problems_name_the_row(line_tree, tmp_path):
    from bendwise.engine.errors import DataError
    from bendwise.engine.handon.predict import new_inputs

    _, model = load_spec(export_node(line_tree, "root", tmp_path / "e")[0])
    frame = pd.DataFrame({"dose_ug": ["1", "abc", "3"]})
    with pytest.raises(DataError, match=r"'dose_ug' row 2 has 'abc'"):
        new_inputs(model, frame, "x")
    with pytest.raises(DataError, match="response_au"):
        new_inputs(model, frame, "y")


def test_report_chart_draws_points_over_the_curve():
    from bendwise.engine.handon.report import text_chart

    x = np.array([0.0, 1.0, 2.0])
    lines = text_chart([(x, x, "*"), (x, x, "o")], width=3, height=3)
    assert "*" not in "".join(lines[:3]) and "".join(lines[:3]).count("o") == 3
