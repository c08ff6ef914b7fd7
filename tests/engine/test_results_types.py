"""Typed, frozen results: each to_dict() carries exactly its fields, summary() shows the key numbers
as engine.numfmt writes them, and nothing after construction can change them.

External check: the nested F p-values are recomputed with scipy.stats.f.sf (scipy) from the
record's own F and degrees of freedom.
"""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import bendwise.engine as engine
import pandas as pd
import pytest
from bendwise.engine.checks.lack_of_fit import nested_f, nested_test
from bendwise.engine.checks.results import LackOfFit, NestedTest
from bendwise.engine.numfmt import count, fmt_num, p_clause
from bendwise.engine.stats.results import SideTest
from bendwise.engine.tree.results import MoveDetail, NodeSummary
from bendwise.engine.tree.suggestion import Evidence, Suggestion
from bendwise.engine.tree.tree import grow
from scipy import stats as sps

DATA = Path(__file__).resolve().parents[2] / "datasets"


@pytest.fixture(scope="module")
def study():
    frame = pd.read_csv(DATA / "sensor_calibration.csv")
    return engine.make_study(frame, y="signal_mv", x="conc_mg_l", covariates=["run_day"])


@pytest.fixture(scope="module")
def tree(study):
    return grow(study, depth=2)


def _frozen(obj) -> None:
    field = dataclasses.fields(obj)[0].name
    with pytest.raises(dataclasses.FrozenInstanceError):
        setattr(obj, field, getattr(obj, field))


def test_lack_of_fit_round_trips(tree):
    lof = tree.root.score.lack_of_fit
    assert isinstance(lof, LackOfFit) and lof.testable
    d = lof.to_dict()
    assert d == {"testable": True, "kind": lof.kind, "approximate": lof.approximate, "ss_lack": lof.ss_lack,
                 "ss_pure": lof.ss_pure, "df_lack": lof.df_lack, "df_pure": lof.df_pure, "f": lof.f, "p": lof.p}
    assert lof.as_json() == d  # the old name still answers
    assert LackOfFit(False, "why not", "pure error").to_dict() == {"testable": False, "reason": "why not",
                                                                   "kind": "pure error"}
    text = lof.summary()
    assert f"F = {fmt_num(lof.f, 4)} on {lof.df_lack} and {lof.df_pure} df" in text and p_clause(lof.p) in text
    _frozen(lof)


def test_nested_test_is_its_own_type_and_round_trips(tree):
    tested = [n.nested for n in tree.nodes.values() if n.nested is not None and n.nested.testable]
    untestable = [n.nested for n in tree.nodes.values() if n.nested is not None and not n.nested.testable]
    assert tested and untestable
    for t in tested:
        assert isinstance(t, NestedTest) and not isinstance(t, LackOfFit)
        assert t.to_dict() == {"f": t.f, "df_num": t.df_num, "df_den": t.df_den, "p": t.p,
                               "approximate": t.approximate}
        assert t.to_spec_dict() == {"testable": True, "kind": t.kind, "approximate": t.approximate,
                                    "ss_lack": t.ss_extra, "ss_pure": t.sse_full, "df_lack": t.df_num,
                                    "df_pure": t.df_den, "f": t.f, "p": t.p}
        assert math.isclose(t.p, sps.f.sf(t.f, t.df_num, t.df_den), rel_tol=1e-9, abs_tol=1e-300)  # scipy
        assert p_clause(t.p) in t.summary() and fmt_num(t.f, 4) in t.summary()
    for t in untestable:
        assert t.to_dict() == {"reason": t.reason}
        assert t.summary() == f"not testable: {t.reason}"
    _frozen(tested[0])


def test_nested_test_matches_the_lack_of_fit_arithmetic():
    a = nested_f(120.0, 20, 80.0, 18, "nested F")
    b = nested_test(120.0, 20, 80.0, 18)
    assert (b.f, b.p, b.df_num, b.df_den, b.ss_extra, b.sse_full) == (a.f, a.p, a.df_lack, a.df_pure, a.ss_lack,
                                                                      a.ss_pure)
    assert not nested_test(80.0, 18, 80.0, 18).testable  # no added degrees of freedom


def test_curvature_and_covariate_evidence_are_nested_tests(tree):
    curv = tree.curvature_test()
    cov = tree.covariate_test("run_day")
    for t in (curv, cov):
        assert isinstance(t, NestedTest) and t.testable
        assert math.isclose(t.p, sps.f.sf(t.f, t.df_num, t.df_den), rel_tol=1e-9, abs_tol=1e-300)  # scipy
    assert curv.kind == "curvature (line + x²)" and curv.df_num == 1


def test_side_test_stores_its_method(study, tree):
    chk = engine.check(study)
    assert chk.spread.method == "Brown–Forsythe" and chk.mandel.method == "Mandel"
    assert tree.root.score.spread.method == "Brown–Forsythe"
    s = chk.spread
    d = s.to_dict()
    assert "method" not in d  # not part of the JSON: the name says it too
    assert d == {"name": s.name, "testable": True, "statistic": s.statistic, "df": list(s.df), "p": s.p,
                 "approximate": s.approximate}
    assert f"statistic {fmt_num(s.statistic, 4)}" in s.summary() and p_clause(s.p) in s.summary()
    off = SideTest("x", False, reason="needs more levels")
    assert off.to_dict() == {"name": "x", "testable": False, "reason": "needs more levels"}
    assert off.summary() == "not run — needs more levels"
    _frozen(s)


def test_check_result_round_trips_and_sums_up(study):
    r = engine.check(study)
    d = r.to_dict()
    assert (d["source"], d["response"], d["predictor"], d["n"], d["levels"], d["alpha"]) == (
        r.source, r.y_name, r.x_name, r.n, r.levels, r.alpha)
    assert d["lack_of_fit"] == r.lack_of_fit.to_dict() and d["mandel"] == r.mandel.to_dict()
    assert d["spread"] == r.spread.to_dict() and d["criteria"] == r.criteria.as_json()
    assert d["verdict"] == r.verdict and d["lack_found"] == r.lack_found
    assert [row["source"] for row in d["anova"]] == [a.source for a in r.anova]
    assert d["sigma"] == r.fit.sigma and d["sse"] == r.fit.sse
    text = r.summary()
    assert count(r.n, "row") in text and count(r.levels, "level") in text
    assert p_clause(r.lack_of_fit.p) in text and r.verdict in text
    _frozen(r)


def test_node_summary_round_trips(tree):
    for node in tree.nodes.values():
        s = tree.node_summary(node)
        assert isinstance(s, NodeSummary)
        d = s.to_dict()
        assert d == tree.node_json(node)
        assert (d["id"], d["parent"], d["move"], d["depth"]) == (s.id, s.parent, s.move, s.depth)
        if not s.scored:
            continue
        assert d["k"] == s.k == node.score.k and d["sigma"] == s.sigma
        assert d["lack_of_fit"] == s.lack_of_fit.to_dict() and d["passes"] == s.passes
        assert d["criteria"]["aicc"] == s.criteria.aicc and d["criteria"]["delta_aicc"] == s.delta_aicc
        assert d["nested"] == (s.nested.to_dict() if s.nested else {"reason": "the root has no parent"})
        assert d["press"] == s.press and d["warnings"] == list(s.warnings)
        assert list(d["coefficients"]) == [c.name for c in s.coefficients]
        text = s.summary()
        assert text.startswith(f"{s.id} {s.label}: k {s.k}") and fmt_num(s.criteria.aicc, 6) in text
        if s.lack_of_fit.testable:
            assert p_clause(s.lack_of_fit.p) in text
    _frozen(tree.node_summary(tree.root))


def test_move_detail_is_typed_and_round_trips(tree):
    details = [n.detail for n in tree.nodes.values()]
    assert all(isinstance(d, MoveDetail) for d in details)
    bc = next(d for d in details if d.boxcox is not None)
    assert bc.to_dict() == {"boxcox": bc.boxcox.as_json()}
    assert fmt_num(bc.boxcox.lam_hat, 4) in bc.summary()
    var = next(d for d in details if d.variance is not None)
    assert var.to_dict() == {"variance_function": var.variance.as_json()}
    assert p_clause(var.variance.p) in var.summary()
    assert MoveDetail().to_dict() == {} and MoveDetail().summary() == ""
    _frozen(bc)


def test_evidence_and_suggestion_round_trip(tree):
    sug = tree.suggest("aicc")
    assert isinstance(sug, Suggestion)
    d = sug.to_dict()
    assert d == {"suggested": sug.node, "reason": sug.reason, "rule": sug.rule,
                 "evidence": [e.to_dict() for e in sug.evidence]}
    assert tree.as_json()["evidence"] == d["evidence"]
    for e in sug.evidence:
        assert isinstance(e, Evidence)
        assert e.to_dict() == {"family": e.family, "test": e.test, "p": e.p, "threshold": e.threshold,
                               "established": e.established, "reason": e.reason}
        if e.p is not None:
            assert p_clause(e.p) in e.summary()
            assert ("established" if e.established else "not established") in e.summary()
    text = sug.summary()
    assert text.splitlines()[0] == f"{sug.node} — {sug.reason}"
    assert len(text.splitlines()) == 1 + len(sug.evidence)
    _frozen(sug)


def test_grow_text_uses_the_summaries(tmp_path, capsys):
    from bendwise.tui.cli import main

    rc = main(["grow", str(DATA / "sensor_calibration.csv"), "-y", "signal_mv", "-x", "conc_mg_l"])
    out = capsys.readouterr().out
    assert rc == 0
    study = engine.make_study(pd.read_csv(DATA / "sensor_calibration.csv"), y="signal_mv", x="conc_mg_l")
    n = len(grow(study, depth=2).nodes)
    assert f"  {count(n, 'model')} scored;" in out
    head = out.split("Candidates")[0]
    assert "— established" in head  # the evidence lines of Suggestion.summary()
    assert "p = <" not in head
