"""Node scores from group statistics against full-row statsmodels / scipy / numpy references.

Every reference is computed in this file from the rows: statsmodels formula fits
(``smf.ols`` / ``smf.wls``) built from ``node.spec.formula(...)``, ``anova_lm`` for F tests,
``OLSInfluence`` for PRESS and studentized residuals, ``scipy.stats.norm.logpdf`` for the
density of y, and a Box–Tidwell (1962) iteration written here with numpy.

Tolerances: coefficients 1e-8 relative (with an absolute floor of 1e-8 of the coefficient's
standard error, for estimates that are ~0); log-likelihoods, F, p, PRESS and residuals
1e-9 relative; Box–Tidwell powers 1e-6 absolute.
"""

from __future__ import annotations

import math
import warnings
from pathlib import Path

import bendwise.engine as engine
import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from bendwise.engine.stats.transforms import IDENTITY, LOG, RECIPROCAL, SQRT, Transform
from bendwise.engine.tree import scoring
from bendwise.engine.tree.model_spec import ModelSpec, WeightRule
from bendwise.engine.tree.powers import box_tidwell
from bendwise.engine.tree.scoring import score_spec
from bendwise.engine.tree.tree import grow
from scipy import stats as sps
from scipy.optimize import minimize_scalar
from statsmodels.stats.anova import anova_lm
from statsmodels.stats.outliers_influence import OLSInfluence

REL = 1e-9
COEF_REL = 1e-8
DATA = Path(__file__).resolve().parents[2] / "datasets"

Y, X = "signal_mv", "conc_mg_l"


def close(ours, ref, rel=REL, abs_=0.0) -> bool:
    return math.isclose(float(ours), float(ref), rel_tol=rel, abs_tol=abs_)


def _anova(reduced, full) -> pd.Series:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # statsmodels warns about the NaN first row
        return anova_lm(reduced, full).iloc[1]


# ----------------------------------------------------------------------------- data


# sensor, sensor_study, sensor_tree: tests/conftest.py


def _crossed_frame() -> pd.DataFrame:
    """5 x levels × 2 days × 2 temperature setpoints × 2 replicates: every combination repeats."""
    rng = np.random.default_rng(42)
    rows = []
    for x in (1.0, 2.0, 4.0, 7.0, 10.0):
        for day in ("d1", "d2"):
            for temp in (20.0, 25.0):
                for _ in range(2):
                    mu = 3 + 2 * x + 0.1 * x**2 + 0.8 * (day == "d2") + 0.15 * temp
                    rows.append((x, mu + rng.normal(0, 0.6), day, temp))
    return pd.DataFrame(rows, columns=["x", "y", "day", "temp"])


@pytest.fixture(scope="module")
def crossed() -> pd.DataFrame:
    return _crossed_frame()


@pytest.fixture(scope="module")
def crossed_study(crossed):
    return engine.make_study(crossed, y="y", x="x", covariates=["day", "temp"])


@pytest.fixture(scope="module")
def crossed_tree(crossed_study):
    return grow(crossed_study, depth=2)


# ----------------------------------------------------------------------------- helpers


def _kinds(study) -> dict[str, str]:
    return {c.name: c.kind for c in study.covariates}


def _g_prime_log_abs(t: Transform, y: np.ndarray) -> np.ndarray:
    """log|g′(y)| written out here (independent of engine.transforms)."""
    if t.kind == "identity":
        return np.zeros_like(y)
    if t.kind == "log":
        return np.log(1 / y)
    if t.kind == "sqrt":
        return np.log(0.5 / np.sqrt(y))
    if t.kind == "reciprocal":
        return np.log(1 / y**2)
    if t.kind == "boxcox":
        return np.log(y ** (t.param - 1))
    raise AssertionError(t)


def _g(t: Transform, y: np.ndarray) -> np.ndarray:
    if t.kind == "identity":
        return y
    if t.kind == "log":
        return np.log(y)
    if t.kind == "sqrt":
        return np.sqrt(y)
    if t.kind == "reciprocal":
        return 1 / y
    if t.kind == "boxcox":
        return (y**t.param - 1) / t.param
    raise AssertionError(t)


def _g_inv(t: Transform, z: np.ndarray) -> np.ndarray:
    if t.kind == "identity":
        return z
    if t.kind == "log":
        return np.exp(z)
    if t.kind == "sqrt":
        return z**2
    if t.kind == "reciprocal":
        return 1 / z
    raise AssertionError(t)


def _row_weights(frame: pd.DataFrame, x: str, y: str, spec: ModelSpec) -> np.ndarray | None:
    """Power-of-mean weights as the scoring module defines them: |level mean of g(y)|^(−2θ),
    scaled to geometric mean 1 over the levels (the scale changes SSE, not fits or likelihoods)."""
    if spec.weights is None:
        return None
    z = pd.Series(_g(spec.response, frame[y].to_numpy(float)), index=frame.index)
    w_level = np.abs(z.groupby(frame[x]).mean()) ** (-2.0 * spec.weights.theta)
    w_level = w_level / np.exp(np.log(w_level).mean())  # scale: geometric mean 1 over the levels
    return frame[x].map(w_level).to_numpy(float)


def _fit(frame: pd.DataFrame, formula: str, w: np.ndarray | None):
    if w is None:
        return smf.ols(formula, frame).fit()
    return smf.wls(formula, frame, weights=w).fit()


def _node_fit(frame, study, spec):
    formula = spec.formula(study.y_name, study.x_name, _kinds(study))
    return _fit(frame, formula, _row_weights(frame, study.x_name, study.y_name, spec)), formula


def _cov_term(study, name: str) -> str:
    return f"C({name})" if _kinds(study)[name] == "categorical" else name


def _cell_means_formula(study, spec: ModelSpec) -> str:
    """The node with every function of x replaced by C(x); covariates and x×covariate kept."""
    lhs = spec.formula(study.y_name, study.x_name, _kinds(study)).split(" ~ ")[0]
    cx = f"C({study.x_name})"
    terms = [cx] + [_cov_term(study, c) for c in spec.covariates]
    terms += [f"{cx}:{_cov_term(study, c)}" for c in spec.interactions]
    return f"{lhs} ~ {' + '.join(terms)}"


def _pure_cells_formula(study, spec: ModelSpec) -> str:
    """Classical cell means: one mean per combination of x and every covariate of the node."""
    lhs = spec.formula(study.y_name, study.x_name, _kinds(study)).split(" ~ ")[0]
    cells = ":".join([f"C({study.x_name})"] + [f"C({c})" for c in spec.covariates])
    return f"{lhs} ~ {cells}"


def _patsy_names(score, formula: str) -> list[str]:
    """statsmodels' name for each of our coefficients (from the node's raw terms and formula)."""
    rhs = formula.split(" ~ ", 1)[1].split(" + ")
    spec = score.spec
    n_pow = spec.degree
    cov_term = dict(zip(spec.covariates, rhs[n_pow : n_pow + len(spec.covariates)], strict=True))
    inter_term = dict(zip(spec.interactions, rhs[n_pow + len(spec.covariates) :], strict=True))
    out = []
    for term in score.terms:
        if term.kind == "const":
            out.append("Intercept")
        elif term.kind == "tpow":
            out.append(rhs[term.power - 1])
        elif term.kind == "cat":
            out.append(f"{cov_term[term.covariate]}[T.{term.level}]")
        elif term.kind == "num":
            out.append(cov_term[term.covariate])
        elif term.kind == "tcat":
            out.append(f"{inter_term[term.covariate]}[T.{term.level}]")
        elif term.kind == "tnum":
            out.append(inter_term[term.covariate])
        else:  # pragma: no cover
            raise AssertionError(term)
    return out


# ----------------------------------------------------------------------------- likelihood of y


RESPONSES = [LOG, SQRT, RECIPROCAL, Transform("boxcox", 0.3), Transform("boxcox", 1.31)]
IDS = ["log", "sqrt", "reciprocal", "boxcox0.3", "boxcox1.31"]


@pytest.mark.parametrize("covariates", [(), ("run_day", "temp_c")], ids=["line", "covariates"])
@pytest.mark.parametrize("weighted", [False, True], ids=["ols", "wls"])
@pytest.mark.parametrize("response", RESPONSES, ids=IDS)
def test_loglik_of_original_y(sensor, sensor_study, response, weighted, covariates):
    spec = ModelSpec(response=response, covariates=covariates,
                     weights=WeightRule("power-of-mean", 0.7) if weighted else None)
    score = score_spec(sensor_study, spec)
    res, _ = _node_fit(sensor, sensor_study, spec)
    y = sensor[Y].to_numpy(float)
    jac = float(_g_prime_log_abs(response, y).sum())
    # reference 1: statsmodels llf of the transformed fit (WLS llf includes ½Σlog w) + Jacobian
    assert close(score.criteria.loglik, res.llf + jac)
    # reference 2: the density of y written out: normal density of g(y) at σ̂_ML, times |g′(y)|
    w = np.ones(y.size) if res.model.weights is None or np.isscalar(res.model.weights) else res.model.weights
    sigma_ml = math.sqrt(float(np.sum(w * res.resid**2)) / y.size)
    direct = sps.norm.logpdf(_g(response, y), loc=res.fittedvalues, scale=sigma_ml / np.sqrt(w)).sum() + jac
    assert close(score.criteria.loglik, direct)
    # criteria on that likelihood: k = coefficients + σ, + 1 for a transform of y chosen from the
    # data, + 1 for the weights' θ (every choice made from the data is paid for)
    k = int(res.df_model) + 1 + 1 + int(weighted) + int(response.kind != "identity")
    assert score.k == k
    n = y.size
    assert close(score.criteria.aic, -2 * (res.llf + jac) + 2 * k)
    assert close(score.criteria.bic, -2 * (res.llf + jac) + k * math.log(n))
    assert close(score.criteria.aicc, -2 * (res.llf + jac) + 2 * k + 2 * k * (k + 1) / (n - k - 1))


def test_a_transform_chosen_from_the_data_counts_as_a_parameter_snapped_or_not(sensor_study):
    plain = score_spec(sensor_study, ModelSpec())
    for spec in (ModelSpec(response=Transform("boxcox", 1.31)),
                 ModelSpec(response=Transform("boxcox", 1.31), response_estimated=True),
                 ModelSpec(response=Transform("log")), ModelSpec(predictor=Transform("sqrt")),
                 ModelSpec(predictor=Transform("power", 2.0), predictor_estimated=True)):
        assert score_spec(sensor_study, spec).k == plain.k + 1, spec
    both = score_spec(sensor_study, ModelSpec(response=Transform("log"), predictor=Transform("sqrt")))
    assert both.k == plain.k + 2
    fixed = score_spec(sensor_study, ModelSpec(response=Transform("boxcox", 1.31)))
    est = score_spec(sensor_study, ModelSpec(response=Transform("boxcox", 1.31), response_estimated=True))
    assert close(est.criteria.loglik, fixed.criteria.loglik)
    assert close(est.criteria.aic, fixed.criteria.aic)


def test_variance_power_counts_as_a_parameter_snapped_or_not(sensor_study):
    conventional = score_spec(sensor_study, ModelSpec(weights=WeightRule("power-of-mean", 1.0, False)))
    est = score_spec(sensor_study, ModelSpec(weights=WeightRule("power-of-mean", 1.0, True)))
    plain = score_spec(sensor_study, ModelSpec())
    assert conventional.k == plain.k + 1 and est.k == plain.k + 1
    assert close(est.criteria.loglik, conventional.criteria.loglik)


# ----------------------------------------------------------------------------- coefficients


def _compare_coefficients(frame, study, node):
    score = node.score
    res, formula = _node_fit(frame, study, node.spec)
    names = _patsy_names(score, formula)
    assert sorted(names) == sorted(res.params.index), (node.id, formula)
    for coef, name in zip(score.fit.coefficients, names, strict=True):
        ref, se = res.params[name], res.bse[name]
        assert close(coef.estimate, ref, COEF_REL, 1e-8 * se), (node.id, name, coef.estimate, ref)
        assert close(coef.se, se, 1e-7), (node.id, name)
    assert close(score.fit.sse, res.ssr, 1e-9, 1e-12 * res.centered_tss)
    assert score.fit.df_resid == int(res.df_resid)


def test_every_node_coefficients_match_formula_fits(sensor, sensor_study, sensor_tree):
    scored = sensor_tree.scored()
    assert len(scored) >= 30
    moves = {"weights": 0, "covariate": 0, "interaction": 0, "response": 0, "predictor": 0}
    for node in scored:
        _compare_coefficients(sensor, sensor_study, node)
        sp = node.spec
        moves["weights"] += sp.weights is not None
        moves["covariate"] += bool(sp.covariates)
        moves["interaction"] += bool(sp.interactions)
        moves["response"] += sp.response != IDENTITY
        moves["predictor"] += sp.predictor != IDENTITY
    assert all(v > 0 for v in moves.values()), moves


def test_every_node_coefficients_crossed_design(crossed, crossed_study, crossed_tree):
    for node in crossed_tree.scored():
        _compare_coefficients(crossed, crossed_study, node)


# ----------------------------------------------------------------------------- nested F


def _check_nested(frame, study, tree) -> set[str]:
    kinds_seen: set[str] = set()
    for node in tree.scored():
        if node.parent is None or node.nested is None or not node.nested.testable:
            continue
        parent = tree.nodes[node.parent]
        res_p, _ = _node_fit(frame, study, parent.spec)
        res_c, _ = _node_fit(frame, study, node.spec)
        ref = _anova(res_p, res_c)  # reference: anova_lm(parent, child)
        t = node.nested
        assert t.df_num == int(ref["df_diff"]), node.id
        assert t.df_den == int(ref["df_resid"]), node.id
        assert close(t.f, ref["F"], 1e-8, 1e-10), (node.id, t.f, ref["F"])
        assert close(t.p, ref["Pr(>F)"], 1e-8, 1e-300), node.id
        ps, cs = parent.spec, node.spec
        if cs.degree > ps.degree:
            kinds_seen.add("degree")
        if cs.interactions != ps.interactions:
            kinds_seen.add("interaction")
        elif cs.covariates != ps.covariates:
            kinds_seen.add("covariate")
    return kinds_seen


def test_nested_f_matches_anova_lm(sensor, sensor_study, sensor_tree):
    assert _check_nested(sensor, sensor_study, sensor_tree) == {"degree", "covariate", "interaction"}


def test_nested_f_crossed_design(crossed, crossed_study, crossed_tree):
    assert _check_nested(crossed, crossed_study, crossed_tree) == {"degree", "covariate", "interaction"}


def test_not_nested_says_why(sensor_tree):
    reasons = [n.nested.reason for n in sensor_tree.scored() if n.nested is not None and not n.nested.testable]
    assert any("response" in r for r in reasons)
    assert any("weights" in r for r in reasons)
    assert all(r for r in reasons)


# ----------------------------------------------------------------------------- lack of fit


def _check_shape(frame, study, tree) -> int:
    compared = 0
    for node in tree.scored():
        lof = node.score.lack_of_fit
        res, _ = _node_fit(frame, study, node.spec)
        w = _row_weights(frame, study.x_name, study.y_name, node.spec)
        cells = _fit(frame, _cell_means_formula(study, node.spec), w)
        if not lof.testable:
            # untestable only when the x-as-factor model has nothing left to compare with
            assert cells.df_resid == 0 or int(cells.df_model) <= int(res.df_model), (node.id, lof.reason)
            assert lof.reason
            continue
        ref = _anova(res, cells)  # reference: anova_lm(node, node with C(x))
        assert lof.df_lack == int(ref["df_diff"]), node.id
        assert lof.df_pure == int(ref["df_resid"]), node.id
        assert close(lof.f, ref["F"], 1e-8, 1e-10), (node.id, lof.f, ref["F"])
        assert close(lof.p, ref["Pr(>F)"], 1e-8, 1e-300), node.id
        compared += 1
    return compared


def test_shape_lack_of_fit_matches_cell_means(sensor, sensor_study, sensor_tree):
    assert _check_shape(sensor, sensor_study, sensor_tree) >= 30


def test_shape_lack_of_fit_crossed_design(crossed, crossed_study, crossed_tree):
    assert _check_shape(crossed, crossed_study, crossed_tree) >= 20


def _check_pure(frame, study, tree) -> tuple[int, int]:
    """Classical test vs anova_lm(node, cell means of every predictor combination), or untestable
    exactly when the combinations do not repeat (or the node saturates them)."""
    compared = untestable = 0
    for node in tree.scored():
        if not node.spec.covariates:
            continue
        lof = node.score.lack_of_fit_pure
        res, _ = _node_fit(frame, study, node.spec)
        combos = frame.groupby([study.x_name, *node.spec.covariates]).ngroups
        if combos == len(frame) or combos <= int(res.df_model) + 1:
            assert not lof.testable and lof.reason, node.id
            untestable += 1
            continue
        assert lof.testable, (node.id, lof.reason)
        w = _row_weights(frame, study.x_name, study.y_name, node.spec)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # patsy's x:day:temp cell coding has empty cells (rank-deficient)
            cells = _fit(frame, _pure_cells_formula(study, node.spec), w)
        ref = _anova(res, cells)  # reference: anova_lm(node, y ~ C(x):C(day)[:C(temp)])
        assert (lof.df_lack, lof.df_pure) == (int(ref["df_diff"]), int(ref["df_resid"])), node.id
        assert close(lof.f, ref["F"], 1e-8, 1e-10), node.id
        assert close(lof.p, ref["Pr(>F)"], 1e-8, 1e-300), node.id
        compared += 1
    return compared, untestable


def test_pure_error_lack_of_fit_where_combinations_replicate(crossed, crossed_study, crossed_tree):
    compared, untestable = _check_pure(crossed, crossed_study, crossed_tree)
    assert compared >= 10 and untestable == 0


def test_pure_error_lack_of_fit_sensor(sensor, sensor_study, sensor_tree):
    # each (conc, day) pair is measured once; temp_c (0.1 °C) repeats within a level only by chance
    compared, untestable = _check_pure(sensor, sensor_study, sensor_tree)
    assert untestable >= 10
    assert compared + untestable >= 20


# ----------------------------------------------------------------------------- Box–Tidwell


def _hand_box_tidwell(x: np.ndarray, y: np.ndarray, alpha: float = 1.0, tol: float = 1e-12) -> float:
    """Box & Tidwell (1962) on the rows: y on x^α → b1; on x^α, x^α·log x → γ; α ← α + γ/b1."""
    one = np.ones_like(x)
    for _ in range(200):
        t = x**alpha
        b1 = np.linalg.lstsq(np.column_stack([one, t]), y, rcond=None)[0][1]
        gamma = np.linalg.lstsq(np.column_stack([one, t, t * np.log(x)]), y, rcond=None)[0][2]
        new = alpha + gamma / b1
        if abs(new - alpha) < tol:
            return new
        alpha = new
    raise AssertionError("hand iteration did not converge")


def _sse_power(x, y, a):
    design = np.column_stack([np.ones_like(x), x**a])
    r = y - design @ np.linalg.lstsq(design, y, rcond=None)[0]
    return float(r @ r)


@pytest.mark.parametrize("true_power", [0.5, 2.0])
def test_box_tidwell_against_hand_iteration(true_power):
    rng = np.random.default_rng(7)
    x = np.repeat([1.0, 2.0, 3.0, 5.0, 7.0, 10.0, 14.0, 20.0], 3)
    y = 2 + 3 * x**true_power + rng.normal(0, 0.1 * (x**true_power).std(), x.size)
    study = engine.make_study(pd.DataFrame({"x": x, "y": y}), y="y", x="x")
    ps = box_tidwell(study, ModelSpec())
    hand = _hand_box_tidwell(x, y)
    assert abs(ps.alpha_hat - hand) < 1e-6, (ps.alpha_hat, hand)
    # the fixed point minimises SSE(α) (reference: scipy minimize_scalar)
    best = minimize_scalar(lambda a: _sse_power(x, y, a), bounds=(hand - 0.5, hand + 0.5), method="bounded",
                           options={"xatol": 1e-10})
    assert abs(ps.alpha_hat - best.x) < 1e-6
    assert abs(ps.alpha_hat - true_power) < 0.25  # the truth is recovered roughly
    # first-step test of α = 1: t of x·log x next to x (reference: statsmodels OLS)
    frame = pd.DataFrame({"x": x, "y": y, "xl": x * np.log(x)})
    p_ref = smf.ols("y ~ x + xl", frame).fit().pvalues["xl"]
    assert close(ps.p_alpha1, p_ref, 1e-7)
    assert ps.p_alpha1 < 0.05
    # the interval ends satisfy n·log(SSE(α)/SSE(α̂)) = χ²₁(0.95) (reference: scipy chi2)
    crit = sps.chi2.ppf(0.95, 1)
    s_hat = _sse_power(x, y, hand)
    for end in (ps.low, ps.high):
        assert end is not None
        assert close(x.size * math.log(_sse_power(x, y, end) / s_hat), crit, 1e-6)
    assert ps.low < hand < ps.high


# ----------------------------------------------------------------------------- PRESS, residuals


PRESS_SPECS = [
    ModelSpec(),
    ModelSpec(degree=2),
    ModelSpec(covariates=("temp_c",)),
    ModelSpec(covariates=("run_day",), interactions=("run_day",)),
    ModelSpec(response=LOG),
    ModelSpec(response=SQRT, degree=2),
    ModelSpec(weights=WeightRule("power-of-mean", 0.66)),
]
PRESS_IDS = ["line", "quadratic", "temp", "day-interaction", "log", "sqrt-quadratic", "weighted"]


def _press_reference(frame, study, spec):
    """Unweighted: statsmodels OLSInfluence. Weighted: OLSInfluence takes the leverage of an OLS
    fit, so the reference is a leave-one-out refit of every row (weights held at their
    full-data values) and the studentized residual of the whitened regression."""
    res, formula = _node_fit(frame, study, spec)
    y = frame[study.y_name].to_numpy(float)
    z = _g(spec.response, y)
    w = _row_weights(frame, study.x_name, study.y_name, spec)
    if w is None:
        infl = OLSInfluence(res)
        loo_z = z - np.asarray(infl.resid_press)  # leave-one-out prediction on the fitted scale
        rmax = float(np.max(np.abs(infl.resid_studentized_internal)))
    else:
        loo_z = np.empty(y.size)
        for i in range(y.size):
            keep = np.arange(y.size) != i
            fit_i = smf.wls(formula, frame[keep], weights=w[keep]).fit()
            loo_z[i] = float(np.asarray(fit_i.predict(frame.iloc[[i]]))[0])
        wx = res.model.wexog
        hat = (wx * np.linalg.pinv(wx).T).sum(1)
        rmax = float(np.max(np.abs(res.wresid / (math.sqrt(res.scale) * np.sqrt(1 - hat)))))
    press = float(np.sum((y - _g_inv(spec.response, loo_z)) ** 2))
    return press, rmax


def test_press_brute_force_agrees_with_ols_influence(sensor, sensor_study):
    """Guards the two references against each other on an unweighted node."""
    spec = ModelSpec(degree=2)
    res, formula = _node_fit(sensor, sensor_study, spec)
    y = sensor[Y].to_numpy(float)
    loo = [float(np.asarray(smf.ols(formula, sensor.drop(index=i)).fit().predict(sensor.iloc[[i]]))[0])
           for i in range(y.size)]
    assert close(np.sum((y - np.array(loo)) ** 2), np.sum(np.asarray(OLSInfluence(res).resid_press) ** 2))


@pytest.mark.parametrize("spec", PRESS_SPECS, ids=PRESS_IDS)
def test_press_and_studentized_residuals(sensor, sensor_study, spec):
    score = score_spec(sensor_study, spec)
    press, rmax = _press_reference(sensor, sensor_study, spec)  # reference: OLSInfluence
    assert score.press is not None, score.press_note
    assert close(score.press, press)
    assert close(score.max_studentized, rmax)


@pytest.mark.parametrize("spec", [ModelSpec(), ModelSpec(degree=2), ModelSpec(covariates=("run_day",))],
                         ids=["line", "quadratic", "day"])
def test_large_table_shortcut_press(sensor, monkeypatch, spec):
    """Above ROW_PASS_LIMIT, PRESS and the largest residual come from group totals and extremes."""
    monkeypatch.setattr(scoring, "ROW_PASS_LIMIT", 5)
    study = engine.make_study(sensor, y=Y, x=X, covariates=["run_day"])
    score = score_spec(study, spec)
    press, rmax = _press_reference(sensor, study, spec)
    assert score.press is not None, score.press_note
    assert close(score.press, press)
    assert close(score.max_studentized, rmax)


def test_large_table_shortcut_states_what_it_skips(sensor, monkeypatch):
    monkeypatch.setattr(scoring, "ROW_PASS_LIMIT", 5)
    study = engine.make_study(sensor, y=Y, x=X, covariates=["temp_c"])
    score = score_spec(study, ModelSpec(covariates=("temp_c",)))
    assert score.press is None and "skipped" in score.press_note


def test_the_shape_test_has_one_name_with_or_without_covariates(sensor_tree):
    """The node against itself with x as a factor: one wording whether or not covariates enter
    (without them it is the classical pure-error comparison)."""
    kinds = {n.score.lack_of_fit.kind for n in sensor_tree.nodes.values() if n.score is not None}
    assert kinds == {"shape in x (x as a factor)"}
