"""export --runs and apply with a runs spec: the spec's runs block, intervals for a new or known run.

References: statsmodels ``MixedLM`` (REML, BFGS with a tight gradient tolerance) for the run
model's coefficients written to the spec; the new-run interval of the straight line is recomputed
here by hand (Fieller's set with the combined variance σ_b² + σ_w²/m and Satterthwaite's df from
the spec's own numbers), so apply's plumbing is checked, not just its arithmetic.
"""

from __future__ import annotations

import json
import math
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from bendwise.engine.handon.inverse import fieller_line
from bendwise.engine.handon.runs_spec import read_runs, satterthwaite
from bendwise.engine.handon.specfile import load_spec, schema_path
from bendwise.engine.stats.dist import t_ppf
from bendwise.tui.cli import main
from cli_in_process import run_cli as _cli

DEMO = Path(__file__).resolve().parents[2] / "datasets" / "multi_day_calibration.csv"
ARGS = [str(DEMO), "-y", "absorbance", "-x", "conc_ug_l", "--runs", "day", "--report", "md", "--depth", "1"]


@pytest.fixture(scope="module")
def exported(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("runs") / "line"
    assert main(["export", *ARGS, "--node", "root", "-o", str(folder)]) == 0
    return folder


def test_spec_runs_block_matches_mixedlm_and_the_schema(exported):
    import jsonschema

    doc, model = load_spec(exported)
    jsonschema.Draft202012Validator(json.loads(schema_path().read_text())).validate(doc)
    runs = read_runs(doc, model)
    assert runs is not None and runs.column == "day" and len(runs.labels) == 5
    d = pd.read_csv(DEMO)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        m = smf.mixedlm("absorbance ~ conc_ug_l", d, groups=d["day"]).fit(reml=True, method="bfgs", gtol=1e-12)
    # statsmodels MixedLM, REML: coefficients, their covariance and the SDs written to the spec
    np.testing.assert_allclose(runs.beta, m.fe_params.to_numpy(), rtol=1e-6)
    np.testing.assert_allclose(runs.cov, m.cov_params().to_numpy()[:2, :2], rtol=1e-4)
    assert runs.between_sd == pytest.approx(math.sqrt(float(m.cov_re.iloc[0, 0])), rel=1e-6)
    # statsmodels MixedLM random effects: the BLUPs, in the spec's run order
    re = {str(k): float(v.iloc[0]) for k, v in m.random_effects.items()}
    np.testing.assert_allclose(runs.blups, [re[label] for label in runs.labels], rtol=1e-5)
    assert "## Runs" in (exported / "report.md").read_text()


def test_inverse_for_a_new_run_is_fieller_with_the_combined_variance(exported, tmp_path, capsys):
    new = tmp_path / "new.csv"
    new.write_text("absorbance\n0.5\n")
    code, out, _ = _cli(["apply", str(exported), str(new), "--inverse", "--replicates", "2", "--json"], capsys)
    assert code == 0
    body = json.loads(out)
    doc, model = load_spec(exported)
    r = read_runs(doc, model)
    s2, tau = r.within_sd**2, r.between_sd**2
    nu = satterthwaite(lambda a, b: b + a / 2, s2, tau, r.var_cov)
    assert body["runs"]["df"] == pytest.approx(nu)
    assert 3 < nu < 10  # 5 runs: the between-run variance dominates, so the df are near k − 1
    kind, pieces = fieller_line(0.5 - r.beta[0], r.beta[1], r.cov[0, 0], r.cov[0, 1], r.cov[1, 1],
                                tau + s2 / 2, t_ppf(0.975, nu))
    assert kind == "finite"
    assert body["rows"][0]["low"] == pytest.approx(pieces[0][0], rel=1e-9)
    assert body["rows"][0]["high"] == pytest.approx(pieces[0][1], rel=1e-9)
    code, out, _ = _cli(["apply", str(exported), str(new), "--inverse", "--replicates", "2", "--json",
                         "--run", "tue"], capsys)
    own = json.loads(out)["rows"][0]
    assert code == 0
    assert own["high"] - own["low"] < 0.6 * (body["rows"][0]["high"] - body["rows"][0]["low"])
    assert own["x"] != pytest.approx(body["rows"][0]["x"])  # tue's own offset moves the estimate


def test_forward_new_run_interval_includes_the_between_run_sd(exported, tmp_path, capsys):
    new = tmp_path / "x.csv"
    new.write_text("conc_ug_l\n10\n")
    code, out, _ = _cli(["apply", str(exported), str(new), "--json"], capsys)
    assert code == 0
    row = json.loads(out)["rows"][0]
    doc, model = load_spec(exported)
    r = read_runs(doc, model)
    x0 = np.array([1.0, 10.0])
    half = (row["pi_high"] - row["pi_low"]) / 2
    nu = satterthwaite(lambda a, b: b + a, r.within_sd**2, r.between_sd**2, r.var_cov)
    want = t_ppf(0.975, nu) * math.sqrt(x0 @ r.cov @ x0 + r.between_sd**2 + r.within_sd**2)
    assert half == pytest.approx(want, rel=1e-9)
    code, out, _ = _cli(["apply", str(exported), str(new)], capsys)
    assert "a new day (between-run SD" in out and "Satterthwaite" in out


def test_run_option_errors_are_one_line(exported, tmp_path, capsys):
    new = tmp_path / "new.csv"
    new.write_text("absorbance\n0.5\n")
    code, _, err = _cli(["apply", str(exported), str(new), "--inverse", "--run", "sunday"], capsys)
    assert code == 2 and "'sunday' is not a day of the calibration" in err and len(err.strip().splitlines()) == 1
    plain = tmp_path / "plain"
    assert main(["export", *[a for a in ARGS if a not in ("--runs", "day")], "--node", "root", "-o", str(plain)]) == 0
    capsys.readouterr()
    code, _, err = _cli(["apply", str(plain), str(new), "--inverse", "--run", "tue"], capsys)
    assert code == 2 and "--run needs a spec exported with --runs" in err
    doc = json.loads((exported / "spec.json").read_text())
    doc["runs"]["blups"] = doc["runs"]["blups"][:2]
    bad = tmp_path / "bad.json"
    bad.write_text(json.dumps(doc))
    code, _, err = _cli(["apply", str(bad), str(new), "--inverse"], capsys)
    assert code == 2 and "runs.blups" in err and "Traceback" not in err
