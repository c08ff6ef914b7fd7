"""The remedy tree: pruning reasons, deduplication, determinism, best-first growth, progress and
cancellation, the suggestion rules, and ``bendwise grow`` (JSON, text, refusals with exit 2).

Expected values are derived in this file from the data (rows with x = 0, level counts, spread
tests recomputed with scipy/statsmodels) or from the rules as documented; no number produced
by the engine is written down here.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import bendwise.engine as engine
import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from bendwise.engine.stats.transforms import LOG
from bendwise.engine.tree.model_spec import ModelSpec
from bendwise.engine.tree.tree import MAX_DEGREE, RULES, RemedyTree, grow
from bendwise.tui.cli import main
from scipy import stats as sps

DATA = Path(__file__).resolve().parents[2] / "datasets"
SENSOR = DATA / "sensor_calibration.csv"
Y, X = "signal_mv", "conc_mg_l"


@pytest.fixture(scope="module")
def sensor() -> pd.DataFrame:
    return pd.read_csv(SENSOR)


def _study(frame, covs=("run_day", "temp_c")):
    return engine.make_study(frame, y=Y, x=X, covariates=list(covs))


@pytest.fixture(scope="module")
def tree(sensor):
    return grow(_study(sensor), depth=2)


def _pruned(node, move_prefix: str) -> str:
    hits = [r for m, r in node.pruned if m.startswith(move_prefix)]
    assert hits, f"{move_prefix!r} not pruned at {node.id}: {node.pruned}"
    return hits[0]


# ----------------------------------------------------------------------------- pruning


def test_log_x_pruned_naming_rows_with_zero(sensor, tree):
    zero_rows = np.flatnonzero(sensor[X].to_numpy() <= 0) + 1  # 1-based rows of the table
    assert zero_rows.size > 0
    reason = _pruned(tree.root, "log x")
    assert f"{zero_rows.size} row(s)" in reason
    assert "rows " + ", ".join(str(r) for r in zero_rows[:5]) in reason
    assert X in reason
    assert f"{zero_rows.size} row(s)" in _pruned(tree.root, "1/x")
    assert "x > 0" in _pruned(tree.root, "power of x")
    assert not any(n.spec.predictor.kind in {"log", "reciprocal", "power"} for n in tree.nodes.values())


def test_degree_limit(sensor):
    t = RemedyTree(_study(sensor, ()))
    parent = "root"
    for degree in range(2, MAX_DEGREE + 1):
        hit = [i for i in t.expand(parent) if t.nodes[i].spec == ModelSpec(degree=degree)]
        assert len(hit) == 1, degree
        parent = hit[0]
    t.expand(parent)
    assert f"stops at degree {MAX_DEGREE}" in _pruned(t.nodes[parent], f"degree {MAX_DEGREE + 1}")


def test_degree_limited_by_levels():
    # 4 levels: a quadratic leaves c − p = 1 df for lack of fit; a cubic would leave none
    rng = np.random.default_rng(3)
    x = np.repeat([1.0, 2.0, 3.0, 4.0], 3)
    frame = pd.DataFrame({"x": x, "y": 1 + x + 0.3 * x**2 + rng.normal(0, 0.1, x.size)})
    study = engine.make_study(frame, y="y", x="x")
    t = RemedyTree(study)
    quad = [i for i in t.expand("root") if t.nodes[i].spec == ModelSpec(degree=2)]
    assert len(quad) == 1
    t.expand(quad[0])
    reason = _pruned(t.nodes[quad[0]], "degree 3")
    assert f"{frame['x'].nunique()} levels" in reason


def _spread_checks(x: np.ndarray, y: np.ndarray) -> tuple[float, float, float]:
    """Brown–Forsythe p (scipy levene, median), and θ̂ with its p from the slope of log SD on
    log |mean| over the levels (statsmodels OLS)."""
    groups = [y[x == v] for v in np.unique(x)]
    bf = sps.levene(*groups, center="median").pvalue
    means = np.array([g.mean() for g in groups])
    sds = np.array([g.std(ddof=1) for g in groups])
    fit = sm.OLS(np.log(sds), sm.add_constant(np.log(np.abs(means)))).fit()
    return float(bf), float(fit.params[1]), float(fit.pvalues[1])


def test_weights_not_offered_when_spreads_are_equal():
    rng = np.random.default_rng(11)
    x = np.repeat([1.0, 2.0, 4.0, 6.0, 8.0, 10.0], 30)
    y = 10 + 3 * x + rng.normal(0, 1.0, x.size)  # one SD everywhere, SDs well estimated
    p_bf, theta, p_theta = _spread_checks(x, y)
    # the data really show no spread pattern: no test flags it and the SD hardly trends with the mean
    assert p_bf >= 0.10 and p_theta >= 0.10 and abs(theta) < 0.25
    t = RemedyTree(engine.make_study(pd.DataFrame({"x": x, "y": y}), y="y", x="x"))
    t.expand("root")
    reason = _pruned(t.root, "weights")
    assert "no evidence that the spread follows the mean" in reason
    trend = t.spread_evidence()
    assert trend.available and trend.p >= t.alpha and f"{trend.p:.3g}" in reason
    assert not any(n.spec.weights is not None for n in t.nodes.values())


def test_weights_offered_when_spread_follows_the_mean(sensor, tree):
    x, y = sensor[X].to_numpy(float), sensor[Y].to_numpy(float)
    p_bf, _, p_theta = _spread_checks(x, y)
    assert min(p_bf, p_theta) < 0.10
    kids = [tree.nodes[i] for i in tree.root.children]
    assert any(k.spec.weights is not None for k in kids)


def test_every_pruned_move_has_a_reason(tree):
    for node in tree.nodes.values():
        for move, reason in node.pruned:
            assert move and reason and not reason.endswith(("nan", "None")), (node.id, move)


# ----------------------------------------------------------------------------- dedupe, determinism


def test_same_model_by_two_paths_is_one_node(tree):
    specs = [n.spec for n in tree.nodes.values()]
    assert len(specs) == len(set(specs))
    target = ModelSpec(response=LOG, degree=2)
    hits = [n for n in tree.nodes.values() if n.spec == target]
    assert len(hits) == 1
    node = hits[0]
    log_node = next(n for n in tree.nodes.values() if n.spec == ModelSpec(response=LOG))
    quad_node = next(n for n in tree.nodes.values() if n.spec == ModelSpec(degree=2))
    paths = {node.parent} | {i for i, _ in node.also_from}
    assert {log_node.id, quad_node.id} <= paths
    # the other path is recorded with its move, not as a second child
    other = quad_node if node.parent == log_node.id else log_node
    assert node.id not in other.children
    assert any(i == other.id and m for i, m in node.also_from)


def _snapshot(t: RemedyTree) -> list[tuple]:
    return [
        (n.id, n.parent, n.move, n.spec, tuple(n.children), tuple(n.pruned), tuple(n.also_from),
         None if n.score is None else n.score.criteria.aicc)
        for n in t.nodes.values()
    ]


def test_ids_are_deterministic(sensor, tree):
    again = grow(_study(sensor), depth=2)
    assert _snapshot(again) == _snapshot(tree)
    assert list(tree.nodes)[0] == "root"
    assert list(tree.nodes)[1:] == [f"n{i}" for i in range(1, len(tree.nodes))]


def test_best_first_expand(sensor):
    t = RemedyTree(_study(sensor))
    first = t.expand("root")
    assert first and all(t.nodes[i].depth == 1 and t.nodes[i].parent == "root" for i in first)
    best = min((t.nodes[i] for i in first if t.nodes[i].score is not None), key=lambda n: n.score.criteria.aicc)
    second = t.expand(best.id)
    assert second and all(t.nodes[i].parent == best.id and t.nodes[i].depth == 2 for i in second)
    assert t.expand(best.id) == []  # once only
    assert all(not t.nodes[i].expanded for i in first if i != best.id)
    assert set(t.nodes) == {"root", *first, *second}


def test_progress_callback(sensor):
    calls: list[tuple[int, int, str]] = []
    t = grow(_study(sensor), depth=2, progress=lambda d, n, lab: calls.append((d, n, lab)))
    made = [n for n in t.nodes.values() if n.id != "root"]
    assert len(calls) == len(made)
    assert [lab for *_, lab in calls] == [n.spec.label() for n in made]
    assert all(1 <= d <= n for d, n, _ in calls)


def test_cancel_stops_growth(sensor):
    full = grow(_study(sensor), depth=2)
    asked = {"n": 0}

    def cancel() -> bool:
        asked["n"] += 1
        return asked["n"] > 5

    t = grow(_study(sensor), depth=2, cancel=cancel)
    assert 1 < len(t.nodes) <= 6 < len(full.nodes)
    # what was built is the start of an uncancelled run
    assert [a[:4] for a in _snapshot(t)] == [b[:4] for b in _snapshot(full)[: len(t.nodes)]]
    assert t.suggest().reason  # a partial tree can still be judged


# ----------------------------------------------------------------------------- suggestion rules


def _passes(t: RemedyTree, n) -> bool:
    s = n.score
    if s is None:
        return False
    lof = s.lack_of_fit
    if lof.testable:
        return lof.p >= t.alpha
    return not s.fit.aliased and math.isfinite(s.fit.sigma)


def _order(node_id: str) -> int:
    return 0 if node_id == "root" else int(node_id[1:])


def _evidence_p(t: RemedyTree) -> dict[str, float]:
    """The evidence tests of the rule, recomputed: the line's lack of fit and each covariate's
    nested F with statsmodels (anova_lm); the spread trend from the engine's variance function
    (held to a direct likelihood in test_suggestion.py)."""
    import statsmodels.formula.api as smf
    from statsmodels.stats.anova import anova_lm

    st = t.study
    frame = pd.DataFrame({"y": st.y, "x": st.x})
    for cov in st.covariates:
        frame[cov.name] = (np.asarray(cov.levels, dtype=object)[cov.values] if cov.kind == "categorical"
                           else cov.values)
    line = smf.ols("y ~ x", frame).fit()
    out = {"shape": float(anova_lm(line, smf.ols("y ~ C(x)", frame).fit())["Pr(>F)"].iloc[1])}
    trend = t.spread_evidence()
    if trend.available:
        out["spread"] = trend.p
    for cov in st.covariates:
        term = f"C({cov.name})" if cov.kind == "categorical" else cov.name
        out[f"covariate:{cov.name}"] = float(anova_lm(line, smf.ols(f"y ~ x + {term}", frame).fit())["Pr(>F)"].iloc[1])
    return out


def _established(t: RemedyTree) -> set[str]:
    """Holm's procedure at α over the evidence p-values (Holm 1979)."""
    ps = sorted((p, f) for f, p in _evidence_p(t).items())
    out: set[str] = set()
    for j, (p, fam) in enumerate(ps):
        if p >= t.alpha / (len(ps) - j):
            break
        out.add(fam)
    return out


def _family(parent, child) -> str:
    if child.response != parent.response:
        return "response"
    if child.predictor != parent.predictor or child.degree != parent.degree:
        return "shape"
    if child.weights != parent.weights:
        return "spread"
    added = (set(child.covariates) - set(parent.covariates)) | (set(child.interactions) - set(parent.interactions))
    return "covariate:" + sorted(added)[0]


def _eligible(t: RemedyTree, n, opened: set[str]) -> bool:
    while n.parent is not None:
        fam = _family(t.nodes[n.parent].spec, n.spec)
        ok = ("shape" in opened or "spread" in opened) if fam == "response" else fam in opened
        if not ok:
            return False
        n = t.nodes[n.parent]
    return True


def _expected(t: RemedyTree, rule: str) -> str | None:
    """The rules as documented in engine/suggestion.py and the README."""
    opened = _established(t)
    cands = [n for n in t.nodes.values() if _passes(t, n) and _eligible(t, n, opened)]
    if opened and any(n.id != "root" for n in cands):
        # established evidence: the line yields to a remedy that answers it and passes
        cands = [n for n in cands if n.id != "root"]
    if not cands:
        return None
    if rule == "aicc":
        # the simplest model within 2 AICc of the best candidate: fewest parameters, then fewest
        # moves from the straight line, then lowest AICc
        best = min(n.score.criteria.aicc for n in cands)
        close = [n for n in cands if n.score.criteria.aicc <= best + 2.0]
        return min(close, key=lambda n: (n.score.k, n.depth, n.score.criteria.aicc, _order(n.id))).id
    if rule == "bic":
        return min(cands, key=lambda n: (n.score.criteria.bic, n.score.k, _order(n.id))).id
    if rule == "simplest":
        return min(cands, key=lambda n: (n.score.k, n.score.criteria.aicc, _order(n.id))).id
    with_press = [n for n in cands if n.score.press is not None]
    return min(with_press, key=lambda n: (n.score.press, n.score.k, _order(n.id))).id


def _rule_frame(seed: int) -> pd.DataFrame:
    """A bend with spread growing with the level and a batch shift: rules disagree on some seeds."""
    rng = np.random.default_rng([99, seed])
    x = np.repeat([1.0, 2.0, 3.0, 4.0, 6.0, 8.0], 3)
    mu = 5 + 3 * x - 0.12 * x**2
    day = np.where(rng.random(x.size) < 0.5, "a", "b")
    y = mu + rng.normal(0, 0.04 * mu, x.size) + 0.6 * (day == "b")
    return pd.DataFrame({"x": x, "y": y, "day": day})


@pytest.fixture(scope="module")
def rule_trees(tree):
    trees = [tree]
    for seed in range(12):
        trees.append(grow(engine.make_study(_rule_frame(seed), y="y", x="x", covariates=["day"]), depth=1))
    for seed in (2, 13):  # two moves deep, BIC's heavier penalty picks differently here
        trees.append(grow(engine.make_study(_rule_frame(seed), y="y", x="x", covariates=["day"]), depth=2))
    # a zig-zag in x with small replicate scatter: no one-move remedy can pass lack of fit
    rng = np.random.default_rng(5)
    x = np.repeat([1.0, 2.0, 3.0, 4.0, 5.0, 6.0], 3)
    zig = np.tile([10.0, 14.0], 3).repeat(3) + x + rng.normal(0, 0.2, x.size)
    trees.append(grow(engine.make_study(pd.DataFrame({"x": x, "y": zig}), y="y", x="x"), depth=1))
    return trees


def test_rules_follow_their_documented_definitions(rule_trees):
    picks = []
    for t in rule_trees:
        row = {}
        for rule in RULES:
            sug = t.suggest(rule)
            assert sug.rule == rule
            assert sug.node == _expected(t, rule), (rule, sug.node, _expected(t, rule))
            assert sug.reason
            row[rule] = sug.node
        picks.append(row)
    # the cases really tell the rules apart (every rule disagrees with aicc somewhere) …
    for rule in ("bic", "simplest", "press"):
        assert any(p["aicc"] != p[rule] for p in picks), rule
    # … and include one where nothing passes
    assert any(p["aicc"] is None for p in picks)


def test_no_passing_candidate_says_so(rule_trees):
    t = rule_trees[-1]  # the zig-zag: the line fails clearly, and no one-move remedy passes
    assert "shape" in _established(t)
    sug = t.suggest()
    assert sug.node is None
    assert "no candidate passes" in sug.reason and f"{t.alpha:g}" in sug.reason


def test_weak_evidence_keeps_a_failing_line_without_a_remedy(rule_trees):
    # the line fails lack of fit at α, but not at the level Holm's procedure asks for
    weak = [t for t in rule_trees if not _passes(t, t.root) and not _established(t)]
    assert weak, "the cases include a line failing at α without established evidence"
    for t in weak:
        sug = t.suggest()
        assert sug.node is None
        assert "not enough to justify a remedy" in sug.reason and "Holm" in sug.reason


def test_reason_names_the_rule(tree):
    assert "2 AICc" in tree.suggest("aicc").reason
    assert "BIC" in tree.suggest("bic").reason
    assert "fewest parameters" in tree.suggest("simplest").reason
    assert "PRESS" in tree.suggest("press").reason


def test_unknown_rule_refused(tree):
    with pytest.raises(engine.BendwiseError, match="unknown rule"):
        tree.suggest("lowest-p")


# ----------------------------------------------------------------------------- CLI


def _run(capsys, *argv):
    code = main(["grow", *argv])
    out, err = capsys.readouterr()
    return code, out, err


SENSOR_ARGS = (str(SENSOR), "-y", Y, "-x", X, "--covariates", "run_day,temp_c")

SPEC_KEYS = {"response", "response_param", "predictor", "predictor_param", "degree", "covariates",
             "interactions", "weights"}
NODE_KEYS = {"id", "parent", "move", "label", "formula", "k", "spec", "lack_of_fit", "nested", "criteria",
             "warnings"}


def test_cli_json_structure(capsys, tree):
    code, out, err = _run(capsys, *SENSOR_ARGS, "--json")
    assert code == 0, err
    doc = json.loads(out)
    assert {"suggested", "reason", "nodes"} <= set(doc)
    nodes = doc["nodes"]
    assert nodes[0]["id"] == "root" and nodes[0]["parent"] is None
    ids = [n["id"] for n in nodes]
    assert ids == list(tree.nodes)  # same tree as in-process, same order
    assert doc["suggested"] == tree.suggest().node and doc["suggested"] in ids
    assert doc["reason"] == tree.suggest().reason
    for n in nodes:
        assert NODE_KEYS <= set(n), n["id"]
        assert SPEC_KEYS <= set(n["spec"]), n["id"]
        assert n["parent"] is None or n["parent"] in ids
        nested = n["nested"]
        assert {"f", "df_num", "df_den", "p"} <= set(nested) or set(nested) >= {"reason"}, n["id"]
        if "reason" in nested:
            assert isinstance(nested["reason"], str) and nested["reason"]
        assert {"loglik", "aic", "aicc", "bic"} <= set(n["criteria"]), n["id"]
        assert isinstance(n["warnings"], list)
        ours = tree.nodes[n["id"]]
        assert n["k"] == ours.score.k
        assert n["criteria"]["aicc"] == pytest.approx(ours.score.criteria.aicc, rel=1e-12)
        assert n["spec"]["degree"] == ours.spec.degree
        assert n["spec"]["covariates"] == list(ours.spec.covariates)
        assert n["formula"].count("~") == 1
    by_id = {n["id"]: n for n in nodes}
    quad = next(n for n in nodes if n["spec"]["degree"] == 2 and n["parent"] == "root")
    assert quad["nested"]["df_num"] == 1  # one added column
    assert by_id["root"]["nested"] == {"reason": by_id["root"]["nested"]["reason"]}


def test_cli_text_output(capsys, tree):
    code, out, err = _run(capsys, *SENSOR_ARGS)
    assert code == 0, err
    sug = tree.suggest()
    assert "Suggestion" in out
    assert sug.reason in out
    marked = [line for line in out.splitlines() if line.strip().startswith("→")]
    assert len(marked) == 1 and marked[0].split()[0] == f"→{sug.node}"
    assert "optimistic" in out  # the post-search caution
    assert "✗ log x" in out  # pruned moves stay visible
    # every node is ranked once in the table (first token of its row, with or without the mark)
    lines = out.splitlines()
    start = next(i for i, line in enumerate(lines) if line.startswith("Candidates"))
    end = next(i for i, line in enumerate(lines) if line.startswith("Tree"))
    firsts = [line.split()[0].lstrip("→") for line in lines[start + 3 : end] if line.strip()]
    assert sorted(firsts) == sorted(tree.nodes)
    # and every node appears once in the tree drawing
    drawn = [line.split()[0] for line in lines[end + 1 :] if line.strip() and not line.strip().startswith("✗")]
    assert set(tree.nodes) <= set(drawn)


def test_cli_rule_and_depth_options(capsys):
    code, out, _ = _run(capsys, *SENSOR_ARGS, "--json", "--rule", "simplest", "--depth", "1")
    assert code == 0
    doc = json.loads(out)
    assert doc["rule"] == "simplest"
    assert max(n["depth"] for n in doc["nodes"]) == 1


def _one_line_error(err: str) -> str:
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1, err
    assert "Traceback" not in err
    return lines[0]


def test_unknown_covariate_suggests_a_name(capsys):
    code, out, err = _run(capsys, str(SENSOR), "-y", Y, "-x", X, "--covariates", "temp_k")
    assert code == 2 and out == ""
    line = _one_line_error(err)
    assert "'temp_k'" in line and "did you mean 'temp_c'" in line


def test_covariate_with_one_value(capsys, tmp_path, sensor):
    path = tmp_path / "one.csv"
    sensor.assign(site="lab1", gain=1.0).to_csv(path, index=False)
    for col in ("site", "gain"):
        code, _, err = _run(capsys, str(path), "-y", Y, "-x", X, "--covariates", col)
        assert code == 2
        line = _one_line_error(err)
        assert f"'{col}'" in line and "one" in line


def test_too_many_categories(capsys, tmp_path, sensor):
    path = tmp_path / "many.csv"
    labels = [f"op{i:02d}" for i in range(len(sensor))]  # 24 rows: repeat to exceed 30
    big = pd.concat([sensor, sensor], ignore_index=True)
    big["operator"] = labels + [f"op{i:02d}" for i in range(len(sensor), 2 * len(sensor))]
    big.to_csv(path, index=False)
    code, _, err = _run(capsys, str(path), "-y", Y, "-x", X, "--covariates", "operator")
    assert code == 2
    line = _one_line_error(err)
    assert "'operator'" in line and str(big["operator"].nunique()) in line and "30" in line


@pytest.mark.parametrize("depth", ["-1", "5"])
def test_bad_depth(capsys, depth):
    code, _, err = _run(capsys, *SENSOR_ARGS, "--depth", depth)
    assert code == 2
    line = _one_line_error(err)
    assert "depth" in line and depth in line


def test_bad_rule(capsys):
    try:
        code = main(["grow", *SENSOR_ARGS, "--rule", "lowest-p"])
    except SystemExit as exc:  # argparse may exit instead of returning
        code = exc.code
    _, err = capsys.readouterr()
    assert code == 2
    line = _one_line_error(err)
    assert "lowest-p" in line and all(r in line for r in RULES)
