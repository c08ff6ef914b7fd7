"""The DuckDB backend (engine.sql) against the in-memory engine on the same files.

Reference values are never written down here: every number the SQL path gives is compared
with the in-memory path (``engine.load_table`` + ``engine.make_study``) run on the same file
in the same test, to 1e-9 relative, or with Apache DataFusion running the same aggregate SQL.
The data are simulated replicated designs (hypothesis, derandomized) with dirty cells (NaN,
empty, 'NA', 'oops', ±inf) written to CSV and Parquet in tmp_path.

Row numbers of dropped rows are not collected by SQL, so cleaning reports are compared by
their counts per (column, reason). Row-level diagnostics the SQL study cannot give (row
PRESS with within-level bases, replicate-free checks) are compared only where it gives them.
"""

from __future__ import annotations

import itertools
import json
import math
import re
import warnings
from pathlib import Path

import bendwise.engine as engine
import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from bendwise.engine.backends.duckdb import (
    SqlStudy,
    aggregate_sql,
    choose_engine,
    make_sql_study,
    transform_sql,
)
from bendwise.engine.errors import BendwiseError
from bendwise.engine.stats.rows import NoRows
from bendwise.engine.stats.transforms import IDENTITY, LOG, RECIPROCAL, SQRT, Transform, power
from bendwise.engine.tree.model_spec import ModelSpec, WeightRule
from bendwise.engine.tree.scoring import score_spec
from bendwise.engine.tree.tree import RemedyTree
from bendwise.tui.cli import main
from hypothesis import HealthCheck, Phase, given, seed, settings
from hypothesis import strategies as st

duckdb = pytest.importorskip("duckdb")

REL = 1e-9
_WORST: dict[str, float] = {}
"""Largest relative difference seen per quantity (printed at the end with ``pytest -s``)."""
_COUNTER = itertools.count()

_HYP = settings(derandomize=True, deadline=None, database=None, print_blob=False,
                phases=(Phase.explicit, Phase.generate),  # no shrinking: a failure prints its data
                suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow,
                                       HealthCheck.data_too_large])


def hyp(examples: int) -> settings:
    """Derandomized settings with ``examples`` cases (the file stays well under a minute)."""
    return settings(_HYP, max_examples=examples)


@pytest.fixture(scope="module", autouse=True)
def _report_worst():
    yield
    if _WORST:
        top = sorted(_WORST.items(), key=lambda kv: -kv[1])[:8]
        print("\nlargest relative differences SQL vs memory:",
              ", ".join(f"{k} {v:.2g}" for k, v in top))


# ----------------------------------------------------------------------------- comparing


def _close(a, b, what: str, rel: float = REL, floor: float = 1e-300) -> None:
    """|a − b| ≤ rel · max(|a|, |b|, floor); None/NaN/inf must match exactly.

    ``floor`` is the natural scale of a quantity that is a difference of two fitted values
    (a level residual, the departure of a curve from the line): such differences lose digits
    to cancellation, so they are compared relative to the scale they were computed on.
    """
    if a is None or b is None:
        assert a is None and b is None, f"{what}: {a!r} vs {b!r}"
        return
    a, b = float(a), float(b)
    if not (math.isfinite(a) and math.isfinite(b)):
        assert (math.isnan(a) and math.isnan(b)) or a == b, f"{what}: {a!r} vs {b!r}"
        return
    if re.search(r"anova\[2\]|ss_lack|mandel\.(statistic|p)$|(lack_of_fit|nested\[[^\]]*\])\.(f|p|ms)$", what):
        # lack of fit is the difference SSE − SS_pure and inherits their absolute rounding
        # (one-pass variance in SQL, two-pass in memory): ~1e-11 of the SSE, more after the F tail
        rel = max(rel, 1e-7)
    if what.endswith(".p") and 0 < min(a, b) < 1e-12:
        # far-tail p-values: compare their logarithms (a 1e-10 change in t moves p by 1e-8 there)
        a, b = math.log10(a), math.log10(b)
    scale = max(abs(a), abs(b), floor)
    d = abs(a - b) / scale
    key = re.sub(r"\[[^\]]*\]", "", what)
    _WORST[key] = max(_WORST.get(key, 0.0), d)
    assert d <= rel, f"{what}: {a!r} vs {b!r} (relative difference {d:.3g})"


def _same_json(a, b, path: str = "", *, skip: frozenset[str] = frozenset(), floors: dict | None = None,
               rel: float = REL) -> None:
    """Recursive comparison of two JSON-like values, numbers to REL."""
    floors = floors or {}
    if isinstance(a, dict):
        assert isinstance(b, dict), path
        assert set(a) - skip == set(b) - skip, f"{path}: keys {sorted(set(a) ^ set(b))}"
        for k in a:
            if k not in skip:
                _same_json(a[k], b[k], f"{path}.{k}", skip=skip, floors=floors, rel=rel)
    elif isinstance(a, (list, tuple)):
        assert isinstance(b, (list, tuple)) and len(a) == len(b), f"{path}: {a!r} vs {b!r}"
        for i, (u, v) in enumerate(zip(a, b, strict=True)):
            _same_json(u, v, f"{path}[{i}]", skip=skip, floors=floors, rel=rel)
    elif isinstance(a, bool) or isinstance(b, bool) or isinstance(a, str) or a is None or b is None:
        assert a == b, f"{path}: {a!r} vs {b!r}"
    elif isinstance(a, (int, float)):
        leaf = path.split(".")[-1].split("[")[0]
        _close(a, b, path, rel=rel, floor=floors.get(leaf, 1e-300))
    else:
        assert a == b, f"{path}: {a!r} vs {b!r}"


def _drop_counts(study) -> dict[tuple[str, str], int]:
    return {(d.column, d.reason): d.count for d in study.report.drops}


def _same_study(mem, sql) -> None:
    """Counts, levels, covariates and cleaning counts agree."""
    assert isinstance(sql, SqlStudy) and isinstance(sql.rows(), NoRows)
    assert (sql.n, sql.c) == (mem.n, mem.c)
    assert (sql.report.n_read, sql.report.n_used) == (mem.report.n_read, mem.report.n_used)
    assert _drop_counts(sql) == _drop_counts(mem)
    np.testing.assert_allclose(sql.x_level_values, mem.x_level_values, rtol=1e-12)
    assert sql.x_level_labels == mem.x_level_labels
    np.testing.assert_array_equal(sql.level_counts(), mem.level_counts())
    assert [(c.name, c.kind, c.levels) for c in sql.covariates] == [(c.name, c.kind, c.levels) for c in mem.covariates]
    assert sql.approximate_groups == mem.approximate_groups
    assert sql.exact_replicates() == mem.exact_replicates()
    for cov in mem.covariates:
        if cov.kind == "numeric":
            _close(sql.covariate_mean(cov.name), mem.covariate_mean(cov.name), f"mean of {cov.name}")


def _same_check(mem, sql, alpha: float = 0.05, rel: float = REL) -> None:
    a = engine.check(mem, alpha=alpha).as_json()
    b = engine.check(sql, alpha=alpha).as_json()
    # cleaning lines name rows in memory only; compared by counts in _same_study
    skip = {"cleaning", "spread"}
    if not mem.exact_replicates():
        # replicate-free checks run on rows: the SQL study says so instead
        skip.add("replicate_free")
        assert a["replicate_free"] and [t["testable"] for t in b["replicate_free"]] == [False]
        assert "rows in memory" in b["replicate_free"][0]["reason"]
    _same_json(a, b, "check", skip=frozenset(skip), floors={"residual": _resid_floor(a)}, rel=rel)
    _same_spread(mem, IDENTITY, b["spread"], "check.spread")


def _same_spread(mem, t: Transform, b: dict, what: str, w: np.ndarray | None = None) -> None:
    """The SQL engine tests equal spread with Bartlett's statistic from level variances (one
    pass; Brown–Forsythe needs level medians). Reference: scipy.stats.bartlett on the rows of
    the in-memory study, transformed (times √w with weights ``w``, as the memory engine tests a
    weighted node) and grouped by x level, levels with two or more rows."""
    from scipy import stats

    assert "Bartlett" in b["name"], b
    z = np.asarray(t.forward(mem.y), dtype=float)
    if w is not None:
        z = np.sqrt(w) * z
    groups = [z[mem.x_codes == g] for g in range(mem.c)]
    groups = [g for g in groups if g.size >= 2]
    if len(groups) < 2 or any(np.ptp(g) == 0 for g in groups):
        assert not b["testable"], (what, b)
        return
    ref = stats.bartlett(*groups)
    assert b["testable"], (what, b)
    # with weights 1/level variance every level of √w·z has variance 1 and the statistic is 0 up to
    # rounding: compared on the scale of a χ² with a few degrees of freedom
    _close(b["statistic"], ref.statistic, f"{what}.statistic", floor=1e-300 if w is None else 1.0)
    if w is not None and abs(ref.statistic) < 1e-9:  # scipy's p is NaN below 0; the χ² tail at 0 is 1
        _close(b["p"], 1.0, f"{what}.p")
    else:
        _close(b["p"], ref.pvalue, f"{what}.p", floor=1e-300)
    assert b["df"] == [len(groups) - 1]


def _resid_floor(check_json: dict) -> float:
    # a level residual is mean − fitted: relative to 1/1000 of the response scale (see _close)
    return 1e-3 * max(abs(r["mean"]) for r in check_json["per_level"])


def _score_json(s) -> dict:
    """The parts of a NodeScore both backends compute (row-level extras compared separately)."""
    f = s.fit
    return {
        "coef": {c.name: [c.estimate, c.se, c.p] for c in f.coefficients},
        "sse": f.sse, "sigma": f.sigma, "r2": f.r2, "r2_adj": f.r2_adj, "loglik": f.loglik,
        "df_resid": f.df_resid, "aliased": list(f.aliased), "rank": f.rank,
        "lack_of_fit": s.lack_of_fit.as_json(), "lack_of_fit_pure": s.lack_of_fit_pure.as_json(),
        "criteria": s.criteria.as_json(), "level_fitted_y": list(s.level_fitted_y),
        "max_deviation": s.max_deviation, "centre": s.centre, "scale": s.scale,
    }


def _same_fits(ja: dict, jb: dict, what: str, spec: ModelSpec) -> None:
    floor = 1e-3 * max(abs(v) for v in ja["level_fitted_y"])  # curve − line: see _close
    skip = set()
    pure_b = jb["lack_of_fit_pure"]
    if not pure_b["testable"] and "needs the rows" in pure_b["reason"]:
        # grouping by a numeric covariate needs its distinct values: unavailable without rows
        assert set(spec.covariates) & set(NUMERIC_COVARIATES), (what, pure_b)
        skip.add("lack_of_fit_pure")
    _same_json(ja, jb, what, skip=frozenset(skip), floors={"max_deviation": floor})


def _outcome(fn):
    try:
        return fn(), None
    except BendwiseError as exc:
        return None, exc


def _same_score(mem, sql, spec: ModelSpec, root_mem=None, root_sql=None) -> None:
    a, ea = _outcome(lambda: score_spec(mem, spec, root_line=root_mem))
    b, eb = _outcome(lambda: score_spec(sql, spec, root_line=root_sql))
    assert (ea is None) == (eb is None), f"{spec.label()}: memory {ea!r}, SQL {eb!r}"
    if ea is not None:
        assert type(ea) is type(eb)
        return
    ja, jb = _score_json(a), _score_json(b)
    _same_fits(ja, jb, f"score[{spec.label()}]", spec)
    # group-level shortcuts of the SQL path equal the row computations in memory; a row fitted
    # exactly (leverage 1) is covered by test_press_undefined_when_a_group_is_fitted_exactly
    exact = a.press is None and "leverage 1" in (a.press_note or "")
    if b.press is not None and not exact:
        assert a.press is not None
        _close(b.press, a.press, f"press[{spec.label()}]")
    if b.max_studentized is not None and not exact:
        assert a.max_studentized is not None
        _close(b.max_studentized, a.max_studentized, f"max_studentized[{spec.label()}]")
    # spread of residuals = spread of the response when the fit is constant within x levels
    # (under a tolerance it is not: see test_spread_under_a_tolerance_says_what_it_tested)
    if not spec.covariates and spec.weights is None and not mem.approximate_groups:
        _same_spread(mem, spec.response, b.spread.as_json(), f"spread[{spec.label()}]", mem.weights)


# ----------------------------------------------------------------------------- data

Y, X, CAT, NUM = "yield", "dose", "batch", "temp"
NUMERIC_COVARIATES = (NUM,)
NUMERIC_TOKENS = ("NaN", "", "NA", "oops", "inf", "-inf")
COVARIATE_TOKENS = ("NaN", "", "NA", "inf", "-inf")  # 'oops' would make the column categorical
CATEGORY_TOKENS = ("", "NA", "oops")


@st.composite
def replicated(draw, *, near: bool = False, dirty: bool = True):
    """A replicated design (x levels × replicates) with a categorical and a numeric covariate.

    Returns (cells, storage): ``cells`` maps column → list of Python floats or text tokens;
    ``storage`` maps numeric column → 'double' or 'string' for Parquet.
    """
    levels = draw(st.integers(4, 8))
    reps = draw(st.lists(st.integers(2, 5), min_size=levels, max_size=levels))
    seed = draw(st.integers(0, 2**31 - 1))
    step = draw(st.sampled_from([0.5, 1.0, 2.5]))
    curve = draw(st.sampled_from([0.0, 0.02, 0.2]))
    rng = np.random.default_rng(seed)
    settings_x = np.sort(rng.choice(np.arange(1, 30), size=levels, replace=False)) * step
    x = np.repeat(settings_x, reps)
    if near:
        x = x + rng.uniform(-0.1, 0.1, x.size) * step
    n = x.size
    cat = rng.choice(np.array(["a", "b", "c"]), n)
    cat[:3] = ["a", "b", "c"]  # every category present
    temp = rng.normal(20.0, 2.0, n)
    shift = np.select([cat == "b", cat == "c"], [1.5, -0.7], 0.0)
    mu = 5 + 2 * x + curve * x**2 + 0.3 * temp + shift
    # no large offset here: see test_large_offset_pure_error and test_offset_response_rank…
    y = mu + rng.normal(0, 0.3, n) * (1 + 0.05 * mu)
    cells = {Y: [float(v) for v in y], X: [float(v) for v in x], CAT: [str(v) for v in cat],
             NUM: [float(v) for v in temp]}
    if dirty:
        k = draw(st.integers(0, max(1, n // 6)))
        for _ in range(k):
            row = draw(st.integers(3, n - 1))
            col = draw(st.sampled_from([Y, X, CAT, NUM]))
            tokens = {Y: NUMERIC_TOKENS, X: NUMERIC_TOKENS, CAT: CATEGORY_TOKENS, NUM: COVARIATE_TOKENS}[col]
            cells[col][row] = draw(st.sampled_from(tokens))
    storage = {c: draw(st.sampled_from(["double", "string"])) for c in (Y, X, NUM)}
    return cells, storage


def _text(v) -> str:
    return repr(v) if isinstance(v, float) else v


def write_csv(cells: dict, path: Path) -> Path:
    cols = list(cells)
    lines = [",".join(cols)] + [",".join(_text(cells[c][i]) for c in cols) for i in range(len(cells[cols[0]]))]
    path.write_text("\n".join(lines) + "\n")
    return path


_DOUBLE = {"NaN": math.nan, "": None, "NA": None, "oops": None, "inf": math.inf, "-inf": -math.inf}


def write_parquet(cells: dict, storage: dict, path: Path, *, text_numbers: bool = True) -> Path:
    """Numeric columns as double (text tokens become null/NaN/±inf) or, when allowed, as text."""
    arrays = {}
    for c, vals in cells.items():
        if c == CAT:
            arrays[c] = pa.array([None if v == "" and i % 2 else v for i, v in enumerate(vals)], pa.string())
        elif storage.get(c) == "string" and text_numbers:
            arrays[c] = pa.array([_text(v) for v in vals], pa.string())
        else:
            arrays[c] = pa.array([_DOUBLE[v] if isinstance(v, str) else v for v in vals], pa.float64())
    pq.write_table(pa.table(arrays), path)
    return path


def _fresh(tmp_path: Path) -> Path:
    d = tmp_path / f"ex{next(_COUNTER)}"
    d.mkdir()
    return d


def _both(path: Path, covariates=(CAT, NUM), tolerance=None):
    """(memory study, SQL study) of the same file, or the two errors."""
    mem, e1 = _outcome(lambda: engine.make_study(engine.load_table(str(path)), y=Y, x=X, covariates=list(covariates),
                                                 tolerance=tolerance, source=path.name))
    sql, e2 = _outcome(lambda: make_sql_study(str(path), y=Y, x=X, covariates=list(covariates), tolerance=tolerance))
    assert (e1 is None) == (e2 is None), f"memory {e1!r} vs SQL {e2!r}"
    if e1 is not None:
        assert type(e1) is type(e2), f"memory {e1!r} vs SQL {e2!r}"
    return mem, sql


SPECS = (
    ModelSpec(),
    ModelSpec(response=LOG),
    ModelSpec(response=SQRT, predictor=LOG),
    ModelSpec(response=RECIPROCAL, predictor=SQRT),
    ModelSpec(response=Transform("boxcox", 0.25), predictor=power(0.37)),
    ModelSpec(degree=2),
    ModelSpec(response=LOG, predictor=RECIPROCAL, degree=2),
    ModelSpec(covariates=(CAT,)),
    ModelSpec(covariates=(NUM,)),
    ModelSpec(covariates=(CAT, NUM), interactions=(NUM,)),
    ModelSpec(covariates=(CAT,), interactions=(CAT,)),
    ModelSpec(weights=WeightRule("power-of-mean", 0.5)),
    ModelSpec(response=LOG, covariates=(NUM,), weights=WeightRule("power-of-mean", 0.5)),
)


def _same_everything(mem, sql, specs=SPECS) -> None:
    _same_study(mem, sql)
    _same_check(mem, sql)
    root_mem = np.asarray(score_spec(mem, ModelSpec()).level_fitted_y)
    root_sql = np.asarray(score_spec(sql, ModelSpec()).level_fitted_y)
    for spec in specs:
        if all(c in {cv.name for cv in mem.covariates} for c in spec.covariates):
            _same_score(mem, sql, spec, root_mem, root_sql)


# ----------------------------------------------------------------------------- same statistics


@pytest.mark.slow
@hyp(10)
@given(data=replicated())
def test_csv_and_parquet_give_the_memory_statistics(tmp_path, data):
    cells, storage = data
    d = _fresh(tmp_path)
    for path in (write_csv(cells, d / "t.csv"), write_parquet(cells, storage, d / "t.parquet", text_numbers=False)):
        mem, sql = _both(path)
        if mem is not None:
            _same_everything(mem, sql)


@hyp(6)
@given(data=replicated(dirty=False))
def test_without_covariates_group_shortcuts_equal_row_diagnostics(tmp_path, data):
    # no within-level bases: the SQL path reports PRESS and the largest studentized residual
    # from group totals and extremes; memory computes them row by row
    cells, storage = data
    path = write_parquet(cells, storage, _fresh(tmp_path) / "t.parquet")
    mem, sql = _both(path, covariates=())
    _same_everything(mem, sql, SPECS[:7] + SPECS[11:12])
    s = score_spec(sql, ModelSpec())
    assert s.press is not None and s.max_studentized is not None


@hyp(6)
@given(data=replicated(near=True, dirty=True), tol=st.sampled_from(["0.3", "2%"]))
def test_tolerance_groups_agree(tmp_path, data, tol):
    cells, storage = data
    d = _fresh(tmp_path)
    # jitter of ±0.1·step around each setting: the tolerance merges some settings (and may split
    # a wide cluster); both engines must form the same groups and the same approximate tests
    for path in (write_csv(cells, d / "t.csv"), write_parquet(cells, storage, d / "t.parquet", text_numbers=False)):
        mem, sql = _both(path, tolerance=tol)
        if mem is None:
            continue
        _same_study(mem, sql)
        _same_check(mem, sql)
        for spec in (ModelSpec(), ModelSpec(degree=2), ModelSpec(response=LOG), ModelSpec(covariates=(NUM,))):
            _same_score(mem, sql, spec)


def test_spread_under_a_tolerance_says_what_it_tested(tmp_path):
    # Under a tolerance x varies inside a group, so the fitted line does too: the spread of the
    # residuals is not the spread of the response. The SQL study tests the response; it must
    # then say so (or give the residual statistic the memory path gives).
    rng = np.random.default_rng(8)
    x = np.repeat([1.0, 2.0, 3.0, 4.0, 5.0, 6.0], 5) + rng.uniform(-0.2, 0.2, 30)
    y = 2 + 3 * x + rng.normal(0, 0.2, 30) * x
    path = tmp_path / "near.parquet"
    pd.DataFrame({Y: y, X: x}).to_parquet(path)
    mem, sql = _both(path, covariates=(), tolerance="0.5")
    assert sql.approximate_groups
    a, b = score_spec(mem, ModelSpec()).spread, score_spec(sql, ModelSpec()).spread
    assert a.testable and b.testable
    same = math.isclose(a.statistic, b.statistic, rel_tol=1e-9)
    assert same or "response" in (b.reason or ""), (a, b)


def test_offset_response_rank_of_the_factor_model(tmp_path):
    # 11 rows, y near 10⁴: the x-as-factor model with batch, temp and x×temp has rank 9
    # (reference: statsmodels OLS on the row design, df_resid = 2). One-pass co-moments of the
    # offset response leave rounding noise that the within-group factorisation must not
    # mistake for a tenth direction.
    import statsmodels.api as sm

    rows = [
        (10024.20818604249, 6.0, "a", 20.46429772490112), (10025.646246177213, 6.0, "b", 20.794217510605286),
        (10021.165834761534, 6.0, "c", 17.318238936490516), (10024.553459485835, 6.0, "c", 23.082827446134605),
        (10033.993258612281, 10.0, "a", 21.92632513496574), (10055.072285659799, 19.0, "c", 19.30723278569474),
        (10056.083331222393, 19.0, "b", 18.07100250924993), (10085.197833952097, 28.0, "a", 24.677828711482107),
        (10081.885861032757, 28.0, "c", 21.707425025963342), (10082.358915359482, 28.0, "b", 18.393278325052567),
        (10083.804411413588, 28.0, "a", 22.65240884587311),
    ]
    frame = pd.DataFrame(rows, columns=[Y, X, CAT, NUM])
    path = tmp_path / "offset.csv"
    frame.to_csv(path, index=False)
    dummies = pd.get_dummies(frame[X].astype(str), dtype=float)
    design = np.column_stack([dummies, pd.get_dummies(frame[CAT], drop_first=True, dtype=float), frame[NUM],
                              dummies.to_numpy() * frame[[NUM]].to_numpy()])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # rank deficient on purpose
        df_full = int(sm.OLS(frame[Y].to_numpy(), design).fit().df_resid)
    assert df_full == 2
    mem, sql = _both(path)
    spec = ModelSpec(covariates=(CAT, NUM), interactions=(NUM,))
    for name, study in (("memory", mem), ("SQL", sql)):
        lof = score_spec(study, spec).lack_of_fit
        assert lof.df_pure == df_full, f"{name}: {lof.as_json()}"


def test_tolerance_really_merges(tmp_path):
    # guard for the property above: the jittered designs do form approximate groups
    rng = np.random.default_rng(3)
    x = np.repeat([1.0, 2.0, 3.0, 4.0, 5.0], 4) + rng.uniform(-0.05, 0.05, 20)
    y = 1 + x + 0.3 * x**2 + rng.normal(0, 0.1, 20)
    path = tmp_path / "near.csv"
    pd.DataFrame({Y: y, X: x}).to_csv(path, index=False)
    mem, sql = _both(path, covariates=(), tolerance="0.3")
    assert sql.approximate_groups and sql.c == 5
    _same_check(mem, sql)


def test_large_offset_pure_error(tmp_path):
    # A response with a large offset and a small spread (as in the NIST StRD sets). Reference:
    # the pure-error sum of squares in exact rational arithmetic (Python's fractions) on the
    # very doubles in the file. The in-memory two-pass sums meet it to ~1e-16; a one-pass
    # VAR_POP over the raw values loses digits in proportion to offset/spread (here 2·10⁷).
    from fractions import Fraction

    rng = np.random.default_rng(5)
    x = np.repeat(np.arange(1.0, 9.0), 6)
    y = 1e6 + 0.5 * x + 0.01 * x**2 + rng.normal(0, 0.05, x.size)
    path = tmp_path / "offset.parquet"
    pd.DataFrame({Y: y, X: x}).to_parquet(path)
    exact = Fraction(0)
    for level in np.unique(x):
        vals = [Fraction(float(v)) for v in y[x == level]]
        mean = sum(vals) / len(vals)
        exact += sum((v - mean) ** 2 for v in vals)
    mem, sql = _both(path, covariates=())
    for name, study in (("memory", mem), ("SQL", sql)):
        ss = engine.check(study).lack_of_fit.ss_pure
        assert abs(ss - float(exact)) <= 1e-12 * float(exact), f"{name}: {ss!r} vs exact {float(exact)!r}"
    # the fit: the in-memory group means keep the digits a 1e6 offset rounds away (mean + mean_lo);
    # the SQL series' means carry ε·offset ≈ 2e-10 each, about 1e-8 of the residual sum of squares
    _same_check(mem, sql, rel=2e-8)


# ----------------------------------------------------------------------------- cleaning edge cases


def _tiny(rows: list[tuple]) -> dict:
    return {Y: [r[0] for r in rows], X: [r[1] for r in rows], CAT: [r[2] for r in rows]}


_BASE_ROWS = [(1.0 + i + 0.1 * (i % 3) + 0.2 * (i // 3) ** 2, float(1 + i // 3), "ab"[i % 2]) for i in range(15)]


def test_csv_na_text_in_a_categorical_column_is_missing(tmp_path):
    # pandas reads 'NA' in a CSV as missing: the SQL path must drop that row too, not make a category
    rows = list(_BASE_ROWS)
    rows[4] = (rows[4][0], rows[4][1], "NA")
    path = write_csv(_tiny(rows), tmp_path / "t.csv")
    mem, sql = _both(path, covariates=(CAT,))
    assert _drop_counts(mem) == {(CAT, "missing"): 1}
    _same_study(mem, sql)
    _same_score(mem, sql, ModelSpec(covariates=(CAT,)))


@pytest.mark.parametrize("column", [Y, X, NUM])
def test_nan_in_a_parquet_double_column_is_missing(tmp_path, column):
    # pyarrow leaves NaN out of a column's min/max statistics (as the Parquet format asks);
    # the SQL cleaning must still see the NaN
    frame = _design_frame(3, 7)
    frame.loc[4, column] = np.nan
    path = tmp_path / "nan.parquet"
    frame.to_parquet(path)
    assert pq.ParquetFile(path).metadata.row_group(0).column(list(frame).index(column)).statistics.has_min_max
    mem, sql = _both(path)
    assert _drop_counts(mem) == {(column, "missing"): 1}
    _same_study(mem, sql)
    _same_score(mem, sql, ModelSpec(covariates=(NUM,)))


def test_press_undefined_when_a_group_is_fitted_exactly(tmp_path):
    # batch "c" holds a single row: with batch in the model that row has leverage 1, so
    # leave-one-out is undefined; memory says so, the group shortcut must too
    rows = list(_BASE_ROWS) + [(30.0, 6.0, "a"), (31.0, 6.0, "a"), (9.5, 3.0, "c")]
    rows[0] = (rows[0][0], rows[0][1], "b")
    cells = _tiny(rows)
    path = write_csv(cells, tmp_path / "t.csv")
    mem, sql = _both(path, covariates=(CAT,))
    spec = ModelSpec(covariates=(CAT,), interactions=(CAT,))
    a, b = score_spec(mem, spec), score_spec(sql, spec)
    assert a.press is None and "leverage 1" in a.press_note
    assert b.press is None and b.press_note


@pytest.mark.parametrize("token", ["NA", "nan", "oops"])
def test_parquet_numbers_stored_as_text(tmp_path, token):
    # a Parquet column of numbers written as text, with one bad cell: both engines must agree on
    # why the row is dropped
    rows = list(_BASE_ROWS)
    cells = _tiny(rows)
    cells[Y][5] = token
    path = write_parquet(cells, {Y: "string", X: "double"}, tmp_path / "t.parquet")
    mem, sql = _both(path, covariates=(CAT,))
    assert sum(_drop_counts(mem).values()) == 1
    assert _drop_counts(sql) == _drop_counts(mem)


@hyp(8)
@given(data=replicated())
def test_parquet_text_columns_give_the_memory_statistics(tmp_path, data):
    cells, storage = data
    # 'NA'/'NaN' text in a Parquet text column is read differently (see the test above); here
    # the text cells are numbers, blanks, 'oops' and ±inf
    cells = {c: ["" if v in ("NA", "NaN") and c != CAT else v for v in vals] for c, vals in cells.items()}
    path = write_parquet(cells, storage, _fresh(tmp_path) / "t.parquet", text_numbers=True)
    mem, sql = _both(path)
    if mem is not None:
        _same_everything(mem, sql, SPECS[:2] + SPECS[7:10])


# ----------------------------------------------------------------------------- folders and globs


def _design_frame(n_per: int, seed: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = np.repeat(np.arange(1.0, 11.0), n_per)
    cat = rng.choice(np.array(["a", "b", "c"]), x.size)
    temp = rng.normal(20.0, 2.0, x.size)
    y = 3 + 1.5 * x + 0.05 * x**2 + 0.2 * temp + (cat == "b") * 0.8 + rng.normal(0, 0.4, x.size)
    return pd.DataFrame({Y: y, X: x, CAT: cat, NUM: temp})


def _split(frame: pd.DataFrame, parts: int) -> list[pd.DataFrame]:
    idx = np.array_split(np.random.default_rng(0).permutation(len(frame)), parts)
    return [frame.iloc[np.sort(i)].reset_index(drop=True) for i in idx]


def _memory_of(frame: pd.DataFrame, source: str, covariates=(CAT, NUM)):
    return engine.make_study(frame, y=Y, x=X, covariates=list(covariates), source=source)


def test_parquet_folder_and_glob_equal_the_concatenated_frame(tmp_path):
    frame = _design_frame(30, 1)
    parts = _split(frame, 4)
    folder = tmp_path / "parts"
    (folder / "late").mkdir(parents=True)
    for i, p in enumerate(parts[:3]):
        p.to_parquet(folder / f"part-{i}.parquet")
    parts[3].to_parquet(folder / "late" / "part-3.parquet")  # folders are read recursively
    mem_all = _memory_of(pd.concat(parts, ignore_index=True), "parts")
    sql_dir = make_sql_study(str(folder), y=Y, x=X, covariates=[CAT, NUM])
    _same_everything(mem_all, sql_dir, SPECS[:2] + SPECS[7:12])
    # a glob picks exactly the files it matches
    mem_top = _memory_of(pd.concat(parts[:3], ignore_index=True), "part-*.parquet")
    sql_glob = make_sql_study(str(folder / "part-*.parquet"), y=Y, x=X, covariates=[CAT, NUM])
    assert sql_glob.n == sum(len(p) for p in parts[:3]) < sql_dir.n
    _same_everything(mem_top, sql_glob, SPECS[:2] + SPECS[7:12])


def test_csv_folder_equals_the_concatenated_frame(tmp_path):
    frame = _design_frame(12, 2)
    parts = _split(frame, 3)
    folder = tmp_path / "csvparts"
    folder.mkdir()
    for i, p in enumerate(parts):
        p.to_csv(folder / f"part-{i}.csv", index=False)
    mem = _memory_of(pd.concat(parts, ignore_index=True), "csvparts")
    sql = make_sql_study(str(folder), y=Y, x=X, covariates=[CAT, NUM])
    _same_everything(mem, sql, SPECS[:2] + SPECS[7:10])


# ----------------------------------------------------------------------------- the command line


def _run(capsys, argv: list[str]) -> tuple[int, str, str]:
    rc = main(argv)
    out = capsys.readouterr()
    return rc, out.out, out.err


def test_csv_above_the_memory_cap_goes_through_duckdb(tmp_path, capsys, monkeypatch):
    frame = _design_frame(8, 3)
    path = tmp_path / "big.csv"
    frame.to_csv(path, index=False)
    assert path.stat().st_size > 1024
    assert choose_engine(str(path), "auto", 1024) == "duckdb"
    assert choose_engine(str(path), "auto", 1 << 30) == "memory"
    import bendwise.engine.backends.duckdb as sql_mod
    calls: list[str] = []
    real = sql_mod.make_sql_study

    def spy(path_arg, **kw):
        calls.append(path_arg)
        return real(path_arg, **kw)

    monkeypatch.setattr(sql_mod, "make_sql_study", spy)
    rc, out_cap, err = _run(capsys, ["check", str(path), "-y", Y, "-x", X, "--memory-cap", "1K", "--json"])
    assert rc == 0, err
    assert calls == [str(path)]
    rc, out_mem, err = _run(capsys, ["check", str(path), "-y", Y, "-x", X, "--engine", "memory", "--json"])
    assert rc == 0, err
    assert calls == [str(path)]  # the memory run did not touch DuckDB
    a, b = json.loads(out_mem), json.loads(out_cap)
    _same_json(a, b, "cli", skip=frozenset({"cleaning", "spread"}), floors={"residual": _resid_floor(a)})
    mem, _ = _both(path, covariates=())
    _same_spread(mem, IDENTITY, b["spread"], "cli.spread")


def test_grow_json_via_duckdb_matches_memory(tmp_path, capsys):
    path = tmp_path / "g.parquet"
    _design_frame(6, 4).to_parquet(path)
    argv = ["grow", str(path), "-y", Y, "-x", X, "--covariates", f"{CAT},{NUM}", "--depth", "1", "--json"]
    rc, out_sql, err = _run(capsys, [*argv, "--engine", "duckdb"])
    assert rc == 0, err
    rc, out_mem, err = _run(capsys, [*argv, "--engine", "memory"])
    assert rc == 0, err
    a, b = json.loads(out_mem), json.loads(out_sql)
    nodes_a = {n["label"]: n for n in a["nodes"]}
    nodes_b = {n["label"]: n for n in b["nodes"]}
    # a Box–Cox child may differ on a small table (exact profile vs grid): compare the rest
    plain = lambda nodes: {k for k in nodes if not k.startswith("bc(")}  # noqa: E731
    assert plain(nodes_a) == plain(nodes_b) and len(plain(nodes_a)) > 8
    for label in plain(nodes_a):
        na, nb = nodes_a[label], nodes_b[label]
        for key in ("coefficients", "sigma", "lack_of_fit", "lack_of_fit_pure", "criteria", "nested", "k"):
            if key == "lack_of_fit_pure" and "needs the rows" in (nb[key].get("reason") or ""):
                assert NUM in label and not na[key]["testable"], (label, na[key])
                continue
            _same_json(na[key], nb[key], f"grow[{label}].{key}")


@pytest.fixture
def sensor_file(tmp_path) -> Path:
    path = tmp_path / "sensor.csv"
    pd.DataFrame({"signal": np.arange(12.0) * 1.5 + 3, "conc": np.repeat([1.0, 2.0, 3.0, 4.0], 3),
                  "w": np.ones(12)}).to_csv(path, index=False)
    return path


def _one_line_error(capsys, argv: list[str]) -> str:
    rc, out, err = _run(capsys, argv)
    assert rc == 2, (rc, out, err)
    assert out == ""
    assert err.startswith("bendwise: error: ") and err.endswith("\n") and err.count("\n") == 1, err
    return err


def test_cli_missing_column_suggests(capsys, sensor_file):
    err = _one_line_error(capsys, ["check", str(sensor_file), "-y", "signl", "-x", "conc", "--engine", "duckdb"])
    assert "'signl' not found" in err and "did you mean 'signal'" in err


@pytest.mark.parametrize("bad", ["0", "-2.5", "", "heavy", "inf"])
def test_cli_bad_weight_gives_the_memory_engines_line(capsys, tmp_path, bad):
    # a zero, negative, missing, text or infinite weight in a kept row: one line, the same on both
    # engines (rows counted in file order); the same cell in a row dropped for its response is fine
    frame = pd.read_csv(_sensor_with_weights(tmp_path)).astype({"w": object, "signal": object})
    frame.loc[[4, 7], "w"] = bad
    path = tmp_path / "badw.csv"
    frame.to_csv(path, index=False)
    argv = ["check", str(path), "-y", "signal", "-x", "conc", "--weights", "w"]
    errs = [_one_line_error(capsys, [*argv, "--engine", e]) for e in ("memory", "duckdb")]
    assert errs[0] == errs[1] and "'w'" in errs[0] and "rows 5, 8" in errs[0], errs
    frame.loc[[4, 7], "signal"] = "NA"
    frame.to_csv(path, index=False)
    outs = [_run(capsys, [*argv, "--json", "--engine", e]) for e in ("memory", "duckdb")]
    assert outs[0][0] == outs[1][0] == 0, outs
    # cleaning lines name rows in memory only (see _same_check)
    _same_json(json.loads(outs[0][1]), json.loads(outs[1][1]), "check", skip=frozenset({"spread", "cleaning"}))


def test_bad_weight_in_a_later_file_of_a_folder_is_numbered_as_memory_numbers_it(tmp_path):
    frame = _design_frame(3, 5)
    frame[W] = np.linspace(0.5, 2.0, len(frame))
    parts = _split(frame, 3)
    parts[2].loc[parts[2].index[1], W] = 0.0
    folder = tmp_path / "wparts"
    folder.mkdir()
    for i, p in enumerate(parts):
        p.to_csv(folder / f"part-{i}.csv", index=False)
    with pytest.raises(BendwiseError) as mem_err:
        engine.make_study(pd.concat(parts, ignore_index=True), y=Y, x=X, weights=W)
    with pytest.raises(BendwiseError) as sql_err:
        make_sql_study(str(folder), y=Y, x=X, weights=W)
    assert str(sql_err.value) == str(mem_err.value)
    assert f"(rows {len(parts[0]) + len(parts[1]) + 2})" in str(mem_err.value)


def _sensor_with_weights(tmp_path: Path) -> Path:
    rng = np.random.default_rng(4)
    x = np.repeat([1.0, 2.0, 3.0, 4.0, 5.0], 4)
    y = 3 + 1.5 * x + 0.2 * x**2 + rng.normal(0, 0.3, x.size) * x
    path = tmp_path / "wsensor.csv"
    pd.DataFrame({"signal": y, "conc": x, "w": rng.uniform(0.3, 3.0, x.size)}).to_csv(path, index=False)
    return path


def test_cli_empty_folder(capsys, tmp_path):
    (tmp_path / "empty").mkdir()
    err = _one_line_error(capsys, ["check", str(tmp_path / "empty"), "-y", "a", "-x", "b", "--engine", "duckdb"])
    assert "holds no .parquet or .csv files" in err


def test_cli_glob_matching_nothing(capsys, tmp_path):
    err = _one_line_error(capsys, ["check", str(tmp_path / "nothing-*.parquet"), "-y", "a", "-x", "b"])
    assert "no file matches" in err


def test_cli_one_distinct_x(capsys, tmp_path):
    path = tmp_path / "flat.parquet"
    pd.DataFrame({"signal": [1.0, 2.0, 3.0, 4.0], "conc": [5.0] * 4}).to_parquet(path)
    err = _one_line_error(capsys, ["check", str(path), "-y", "signal", "-x", "conc", "--engine", "duckdb"])
    assert "one distinct value" in err and "'conc'" in err


def test_cli_file_not_found(capsys, tmp_path):
    err = _one_line_error(capsys, ["check", str(tmp_path / "gone.csv"), "-y", "a", "-x", "b", "--engine", "duckdb"])
    assert "file not found" in err


# ----------------------------------------------------------------------------- portability


def _same_columns(ours: dict, theirs: dict) -> None:
    """Column by column, row by row: text equal, numbers to 1e-9 (DuckDB vs DataFusion)."""
    for col in ours:
        for i, (a, b) in enumerate(zip(ours[col], theirs[col], strict=True)):
            if isinstance(a, str):
                assert a == b, (col, i)
            else:
                _close(a, b, f"datafusion.{col}[{i}]", floor=1e-12)


def test_aggregate_sql_runs_unchanged_on_datafusion(tmp_path):
    # reference: Apache DataFusion as a second engine (pip package `datafusion`, local mode)
    datafusion = pytest.importorskip("datafusion")
    frame = _design_frame(9, 6)
    frame.loc[[3, 50], Y] = np.nan  # cleaned away before the view
    path = tmp_path / "p.parquet"
    frame.to_parquet(path)
    sql = make_sql_study(str(path), y=Y, x=X, covariates=[CAT, NUM])
    transforms = [IDENTITY, LOG, SQRT, RECIPROCAL, Transform("boxcox", -0.7), Transform("boxcox", 1.3)]
    names = sql._info["sql_name"]  # covariates carry names of the engine's own inside the SQL
    text = aggregate_sql("bw_clean", ["x", names[CAT]], [names[NUM]], [transform_sql(t, "y") for t in transforms])
    rows = sql.con.sql("SELECT * FROM bw_clean").to_arrow_table()
    assert rows.num_rows == sql.n
    ctx = datafusion.SessionContext()
    ctx.register_record_batches("bw_clean", [rows.to_batches()])
    theirs = ctx.sql(text).to_arrow_table().to_pydict()
    ours = sql.con.sql(text).to_arrow_table().to_pydict()
    assert list(theirs) == list(ours)
    assert len(ours["n"]) == frame.dropna().groupby([X, CAT]).ngroups
    _same_columns(ours, theirs)


# ----------------------------------------------------------------------------- the remedy tree


def _tree_frame(n: int, seed: int = 11) -> pd.DataFrame:
    """Log-normal-ish response: curved in x, spread growing with the mean, two covariates."""
    rng = np.random.default_rng(seed)
    levels = np.linspace(1.0, 12.0, 12)
    x = levels[rng.integers(0, 12, n)]
    cat = rng.choice(np.array(["a", "b", "c"]), n)
    temp = rng.normal(20.0, 2.0, n)
    y = np.exp(1.0 + 0.12 * x + 0.02 * temp + (cat == "c") * 0.15 + rng.normal(0, 0.08, n))
    return pd.DataFrame({Y: y, X: x, CAT: cat, NUM: temp})


def _tree_pair(path: Path, frame: pd.DataFrame):
    mem = engine.make_study(frame, y=Y, x=X, covariates=[CAT, NUM], source=path.name)
    sql = make_sql_study(str(path), y=Y, x=X, covariates=[CAT, NUM])
    tm, ts = RemedyTree(mem), RemedyTree(sql)
    tm.grow(2)
    ts.grow(2)
    return tm, ts


def _same_tree_fits(tm: RemedyTree, ts: RemedyTree) -> int:
    by_spec = {n.spec: n for n in ts.nodes.values()}
    common = 0
    for node in tm.nodes.values():
        other = by_spec.get(node.spec)
        if other is None:
            continue
        common += 1
        assert (node.score is None) == (other.score is None), (node.spec.label(), node.error, other.error)
        if node.score is None:
            continue
        label = node.spec.label()
        _same_fits(_score_json(node.score), _score_json(other.score), f"tree[{label}]", node.spec)
        assert (node.nested is None) == (other.nested is None)
        if node.nested is not None:
            _same_json(node.nested.to_dict(), other.nested.to_dict(), f"nested[{label}]")
    return common


@pytest.mark.slow
def test_tree_on_a_large_table_matches_memory(tmp_path):
    # n > EXACT_PROFILE_LIMIT: both backends profile Box–Cox λ over the same grid (spline), so the
    # trees must contain the same specs
    frame = _tree_frame(60_000)
    path = tmp_path / "tree.parquet"
    frame.to_parquet(path, row_group_size=16_384)
    tm, ts = _tree_pair(path, frame)
    # clean data with y > 0: the SQL study read the file once and every node came from the series
    assert ts.study._info["series"] is not None and ts.study.exact_scans == 0
    assert _same_tree_fits(tm, ts) > 20
    # Box–Cox profiles from the two grids, matched by the node they grow from
    def profiles(t: RemedyTree) -> dict:
        return {t.nodes[n.parent].spec: n.detail.boxcox for n in t.nodes.values() if n.detail.boxcox is not None}

    pm, ps = profiles(tm), profiles(ts)
    assert pm and set(pm) == set(ps)
    for parent, a in pm.items():
        b = ps[parent]
        assert abs(a.lam_hat - b.lam_hat) <= 1e-3, parent.label()
        for end in ("low", "high"):
            u, v = getattr(a, end), getattr(b, end)
            assert (u is None) == (v is None) and (u is None or abs(u - v) <= 1e-3), (parent.label(), end)
        assert (a.chosen, a.estimated) == (b.chosen, b.estimated)
    # and so the same models, reached by the same moves
    only_mem = {n.spec.label() for n in tm.nodes.values()} - {n.spec.label() for n in ts.nodes.values()}
    only_sql = {n.spec.label() for n in ts.nodes.values()} - {n.spec.label() for n in tm.nodes.values()}
    assert not only_mem and not only_sql, (only_mem, only_sql)


def test_box_tidwell_on_a_weighted_node_uses_the_weights(tmp_path):
    # the power of x at a node with power-of-mean weights: the SQL study has no weight rows, so
    # the search must receive the per-level weights
    from bendwise.engine.tree.powers import box_tidwell

    frame = _tree_frame(3000, seed=13)[[Y, X]]
    path = tmp_path / "bt.parquet"
    frame.to_parquet(path)
    mem, sql = _both(path, covariates=())
    spec = ModelSpec(weights=WeightRule("power-of-mean", 1.0))
    a, b = box_tidwell(mem, spec), box_tidwell(sql, spec)
    _close(b.alpha_hat, a.alpha_hat, "box_tidwell.alpha_hat", rel=1e-7)
    assert (a.chosen, a.estimated) == (b.chosen, b.estimated)


def test_tree_on_a_small_table_agrees_where_specs_coincide(tmp_path):
    # small tables: memory maximises the Box–Cox profile exactly, SQL interpolates the grid, so
    # a Box–Cox child may differ; every other node must be the same model with the same fit
    frame = _tree_frame(400, seed=12)
    path = tmp_path / "small.csv"
    frame.to_csv(path, index=False)
    tm, ts = _tree_pair(path, engine.load_table(str(path)))
    common = _same_tree_fits(tm, ts)
    boxcox_specs = {n.spec for t in (tm, ts) for n in t.nodes.values() if n.spec.response.kind == "boxcox"}
    assert common >= len(tm.nodes) - len(boxcox_specs) > 15


# ----------------------------------------------------------------------------- the one-scan series


def _direct_group_moments(groups, t: Transform, covs):
    """Mean, n·variance and n·covariances of g(y) per group, straight from the rows (two-pass)."""
    out = []
    for y, tv in zip(groups, covs, strict=True):
        z = np.asarray(t.forward(y), dtype=float)
        dz = z - z.mean()
        out.append((z.mean(), float((dz * dz).sum()), [float((dz * (c - c.mean())).sum()) for c in tv]))
    return out


def _series_from_rows(groups, covs, centres, big_m: int, big_k: int):
    """The power sums the one-scan query collects, summed here in numpy (same definitions)."""
    from bendwise.engine.stats.power_sums import GroupSeries as _Series

    u, nb = len(groups), len(covs[0])
    t_ref = np.array([np.mean(np.concatenate([c[j] for c in covs])) for j in range(nb)])
    n = np.array([g.size for g in groups], dtype=float)
    s = np.zeros((u, big_m))
    cross = np.zeros((u, nb, big_k))
    tsum = np.zeros((u, nb))
    tt = np.zeros((u, nb, nb))
    for i, (y, tv) in enumerate(zip(groups, covs, strict=True)):
        d = np.log(y) - centres[i]
        tp = np.array([c - t_ref[j] for j, c in enumerate(tv)])
        for k in range(1, big_m + 1):
            s[i, k - 1] = (d**k).sum()
        for j in range(nb):
            tsum[i, j] = tp[j].sum()
            for k in range(1, big_k + 1):
                cross[i, j, k - 1] = (d**k * tp[j]).sum()
            for jj in range(nb):
                tt[i, j, jj] = (tp[j] * tp[jj]).sum()
    ylo = np.array([g.min() for g in groups])
    yhi = np.array([g.max() for g in groups])
    return _Series(n, np.asarray(centres, dtype=float), s, cross, tsum, tt, ylo, yhi, t_ref)


# The examples this test has always drawn: derandomized hypothesis seeds itself from the test's
# text, which changed only where the engine's modules moved.
_SERIES_EXAMPLES = int("693975576224749617502789901352281636608767048672556715232862357375763094112430"
                       "018044932877758847486488917850371551")


@seed(_SERIES_EXAMPLES)
@given(data=st.tuples(st.floats(0.002, 0.6), st.integers(2, 400), st.integers(0, 10_000),
                      st.sampled_from([-2.0, -1.0, -0.37, 0.5, 1.0, 1.7, 2.0, 2.9])))
@hyp(60)
def test_series_is_exact_to_its_tolerance_or_declines(data):
    # The per-group series for g(y) = y^λ (Box–Cox, √, 1/y, y) against two-pass sums on the same
    # rows (reference: the direct definitions, numpy). When the series answers, its truncation and
    # rounding stay within the tolerance relative to the group's spread; when it cannot promise
    # that, it declines (and the study scans the transform exactly instead).
    from bendwise.engine.stats.power_sums import SERIES_TOL, choose_orders

    sd, m, seed, lam = data
    rng = np.random.default_rng(seed)
    groups, covs, centres = [], [], []
    for g in range(4):
        temp = rng.normal(20.0, 2.0, m)
        y = np.exp(1.0 + 0.3 * g + 0.05 * (temp - 20.0) * sd + rng.standard_t(5, m) * sd)
        groups.append(y)
        covs.append([temp])
        centres.append(float(np.log(y[: max(1, m // 3)]).mean()))  # a centre from the first rows
    big_m, big_k = choose_orders(sd, 6 * sd)
    series = _series_from_rows(groups, covs, centres, big_m, big_k)
    t = Transform("boxcox", lam) if lam not in (-1.0, 0.5, 1.0) else {-1.0: RECIPROCAL, 0.5: SQRT, 1.0: IDENTITY}[lam]
    got = series.moments(t, SERIES_TOL)
    if got is None:
        assert not (sd < 0.01 and abs(lam) <= 1), "declined on a narrow response at a moderate power"
        return
    for i, (mean, ss, cov) in enumerate(_direct_group_moments(groups, t, covs)):
        scale = math.sqrt(ss / groups[i].size) if ss > 0 else abs(mean) * 1e-16 + 1e-300
        # rounding of the direct two-pass sums themselves is ~1e-13 of the spread
        assert abs(got["mean"][i] - mean) <= 1e-9 * scale + 1e-15 * abs(mean), (i, got["mean"][i], mean)
        _close(got["ss"][i], ss, f"series.ss[{i}]", rel=1e-9, floor=1e-12 * abs(mean) ** 2 * groups[i].size)
        tsd = float(np.std(covs[i][0]))
        assert abs(got["zb"][i, 0] - cov[0]) <= 1e-9 * scale * tsd * groups[i].size + 1e-12 * abs(cov[0]), i


def test_one_scan_path_is_taken_on_clean_data_and_left_on_dirty(tmp_path):
    frame = _tree_frame(5000, seed=21)
    clean = tmp_path / "clean.parquet"
    frame.to_parquet(clean)
    sql = make_sql_study(str(clean), y=Y, x=X, covariates=[CAT, NUM])
    assert sql._info["series"] is not None and sql.report.n_dropped == 0
    dirty = tmp_path / "dirty.parquet"
    frame.loc[[7, 4000], NUM] = np.nan
    frame.to_parquet(dirty)
    sql_d = make_sql_study(str(dirty), y=Y, x=X, covariates=[CAT, NUM])
    assert sql_d._info["series"] is None  # the exact path counts the dropped cells
    assert [(d.column, d.reason, d.count) for d in sql_d.report.drops] == [(NUM, "missing", 2)]
    nonpos = tmp_path / "nonpos.parquet"
    frame.loc[[7, 4000], NUM] = 20.0
    frame.loc[11, Y] = -1.0
    frame.to_parquet(nonpos)
    assert make_sql_study(str(nonpos), y=Y, x=X, covariates=[CAT, NUM])._info["series"] is None
    # a response too wide for the series (ln y spread 0.5 within groups): straight to exact scans,
    # with the same statistics as in memory
    wide_frame = _tree_frame(5000, seed=21)
    wide_frame[Y] = np.exp(np.log(wide_frame[Y]) + np.random.default_rng(2).normal(0, 0.5, len(wide_frame)))
    wide = tmp_path / "wide.parquet"
    wide_frame.to_parquet(wide)
    mem, sql_w = _both(wide, covariates=(CAT, NUM))
    assert sql_w._info["series"] is None
    for spec in (ModelSpec(), ModelSpec(response=LOG), ModelSpec(response=SQRT, covariates=(NUM,))):
        _same_score(mem, sql_w, spec)


def test_series_sql_runs_unchanged_on_datafusion(tmp_path):
    # reference: Apache DataFusion as a second engine (pip package `datafusion`, local mode)
    datafusion = pytest.importorskip("datafusion")
    from bendwise.engine.backends.duckdb import series_sql

    frame = _tree_frame(4000, seed=22)
    path = tmp_path / "s.parquet"
    frame.to_parquet(path)
    sql = make_sql_study(str(path), y=Y, x=X, covariates=[CAT, NUM])
    names = sql._info["sql_name"]  # covariates carry names of the engine's own inside the SQL
    text = series_sql("bw_all", ["x", names[CAT]], [names[NUM]], [20.0], 10, 6, "bw_shift", 2.0)
    ctx = datafusion.SessionContext()
    for name in ("bw_all", "bw_shift"):
        ctx.register_record_batches(name, [sql.con.sql(f"SELECT * FROM {name}").to_arrow_table().to_batches()])
    theirs = ctx.sql(text).to_arrow_table().to_pydict()
    ours = sql.con.sql(text).to_arrow_table().to_pydict()
    assert list(theirs) == list(ours) and len(ours["n"]) == frame.groupby([X, CAT]).ngroups
    _same_columns(ours, theirs)


def test_bartlett_from_groups_matches_scipy():
    # reference: scipy.stats.bartlett on the same groups
    from bendwise.engine.stats.spread import bartlett_from_groups
    from scipy import stats

    rng = np.random.default_rng(4)
    groups = [rng.normal(0, s, k) for s, k in ((1.0, 5), (1.5, 8), (0.7, 3), (2.0, 12))]
    ref = stats.bartlett(*groups)
    count = np.array([g.size for g in groups], dtype=float)
    ss = np.array([((g - g.mean()) ** 2).sum() for g in groups])
    got = bartlett_from_groups(count, ss)
    _close(got.statistic, ref.statistic, "bartlett.statistic")
    _close(got.p, ref.pvalue, "bartlett.p")
    assert got.df == (3,)
    single = bartlett_from_groups(np.array([1.0, 4.0, 1.0]), np.array([0.0, 2.0, 0.0]))
    assert not single.testable and "two levels" in (single.reason or "")


# ----------------------------------------------------------------------------- the user's weights

W = "wt"
WEIGHTED_SPECS = (*SPECS[:8], SPECS[8], SPECS[9], SPECS[11], SPECS[12])


def with_weights(cells: dict, seed: int, *, spoil: bool = True) -> dict:
    """The cells with a positive weights column that varies within x levels. Where a row is
    dropped anyway (a bad response or predictor), its weight may be bad too (zero, negative,
    missing, text): the memory engine looks only at the rows it keeps, and so must SQL."""
    rng = np.random.default_rng(seed)
    n = len(cells[Y])
    w: list = [float(v) for v in rng.uniform(0.2, 5.0, n)]
    if spoil:
        for i in range(n):
            if isinstance(cells[Y][i], str) or isinstance(cells[X][i], str):
                w[i] = [0.0, -1.5, "", "NA", "oops"][i % 5]
    return {**cells, W: w}


def _both_weighted(path: Path, covariates=(CAT, NUM), tolerance=None, weights: str = W):
    mem, e1 = _outcome(lambda: engine.make_study(engine.load_table(str(path)), y=Y, x=X, covariates=list(covariates),
                                                 weights=weights, tolerance=tolerance, source=path.name))
    sql, e2 = _outcome(lambda: make_sql_study(str(path), y=Y, x=X, covariates=list(covariates), weights=weights,
                                              tolerance=tolerance))
    assert (e1 is None) == (e2 is None), f"memory {e1!r} vs SQL {e2!r}"
    if e1 is not None:
        assert type(e1) is type(e2) and str(e1) == str(e2), f"memory {e1!r} vs SQL {e2!r}"
    return mem, sql


def _same_weighted(mem, sql, specs=WEIGHTED_SPECS) -> None:
    assert mem.weights is not None and sql.weights_name == mem.weights_name
    _same_everything(mem, sql, specs)
    # the study's Σ log w enters every weighted likelihood
    st = sql.group_stats(None, ("z", IDENTITY.key()), weights_key=sql.weights_name)
    _close(st.sum_log_w, float(np.log(mem.weights).sum()), "sum_log_w")


@hyp(4)
@given(data=replicated(dirty=True), wseed=st.integers(0, 1000))
def test_weighted_csv_and_parquet_give_the_memory_statistics(tmp_path, data, wseed):
    cells, storage = data
    cells = with_weights(cells, wseed)
    d = _fresh(tmp_path)
    for path in (write_csv(cells, d / "t.csv"), write_parquet(cells, storage, d / "t.parquet", text_numbers=False)):
        mem, sql = _both_weighted(path)
        if mem is not None:
            _same_weighted(mem, sql)


@hyp(3)
@given(data=replicated(dirty=False), wseed=st.integers(0, 1000))
def test_weighted_clean_data_take_the_one_scan_path(tmp_path, data, wseed):
    # clean rows and positive weights: one scan of weighted, unweighted and √w-weighted power sums
    # serves every transform it can hold to SERIES_TOL, the rest are scanned exactly; both paths
    # give the memory engine's statistics
    from bendwise.engine.backends.weighted import WeightedSeries

    cells, storage = data
    path = write_parquet(with_weights(cells, wseed, spoil=False), storage, _fresh(tmp_path) / "t.parquet",
                         text_numbers=False)
    mem, sql = _both_weighted(path)
    assert isinstance(sql._info["series"], WeightedSeries)
    _same_weighted(mem, sql)
    exact = make_sql_study(str(path), y=Y, x=X, covariates=[CAT, NUM], weights=W, exact=True)
    assert exact._info["series"] is None
    _same_weighted(mem, exact, SPECS[:3] + SPECS[11:])


@hyp(3)
@given(data=replicated(near=True, dirty=False), tol=st.sampled_from(["0.3", "2%"]))
def test_weighted_tolerance_groups_agree(tmp_path, data, tol):
    cells, _ = data
    path = write_csv(with_weights(cells, 7, spoil=False), _fresh(tmp_path) / "t.csv")
    mem, sql = _both_weighted(path, covariates=(NUM,), tolerance=tol)
    _same_study(mem, sql)
    _same_check(mem, sql)
    for spec in (ModelSpec(), ModelSpec(degree=2), ModelSpec(covariates=(NUM,)), SPECS[11]):
        _same_score(mem, sql, spec)


def test_weighted_large_offset_pure_error(tmp_path):
    # y near 10⁶ with a spread of 0.05, weights varying inside each level. Reference: the weighted
    # pure-error sum of squares Σw(y − ȳ_w)² in exact rational arithmetic (fractions) on the very
    # doubles in the file; then the rest of the check against memory (the SQL group means carry
    # ε·offset, as the unweighted one-scan path's do: see test_large_offset_pure_error)
    from fractions import Fraction

    rng = np.random.default_rng(8)
    x = np.repeat(np.arange(1.0, 9.0), 6)
    y = 1e6 + 0.5 * x + 0.01 * x**2 + rng.normal(0, 0.05, x.size)
    w = rng.uniform(0.5, 4.0, x.size)
    temp = rng.normal(20.0, 2.0, x.size)
    path = tmp_path / "offset.parquet"
    pd.DataFrame({Y: y, X: x, NUM: temp, W: w}).to_parquet(path)
    exact = Fraction(0)
    for level in np.unique(x):
        ws = [Fraction(float(v)) for v in w[x == level]]
        ys = [Fraction(float(v)) for v in y[x == level]]
        mean = sum(a * b for a, b in zip(ws, ys, strict=True)) / sum(ws)
        exact += sum(a * (b - mean) ** 2 for a, b in zip(ws, ys, strict=True))
    mem, sql = _both_weighted(path, covariates=(NUM,))
    for name, study in (("memory", mem), ("SQL", sql)):
        ss = engine.check(study).lack_of_fit.ss_pure
        assert abs(ss - float(exact)) <= 1e-11 * float(exact), f"{name}: {ss!r} vs exact {float(exact)!r}"
    _same_check(mem, sql, rel=2e-8)
    for spec in (ModelSpec(covariates=(NUM,)), SPECS[11]):
        a, b = score_spec(mem, spec), score_spec(sql, spec)
        _same_json(_score_json(a)["coef"], _score_json(b)["coef"], f"coef[{spec.label()}]", rel=2e-8)
        _close(b.fit.sse, a.fit.sse, f"sse[{spec.label()}]", rel=2e-8)


def test_weighted_node_against_statsmodels_wls(tmp_path):
    # Reference: statsmodels WLS on the rows (weights = the column), for the straight line and for
    # the line with a numeric covariate: coefficients, standard errors and the weighted residual
    # sum of squares Σw·e² of the SQL study's nodes
    import statsmodels.api as sm

    rng = np.random.default_rng(21)
    x = np.repeat(np.arange(1.0, 8.0), 5)
    temp = rng.normal(20.0, 2.0, x.size)
    y = 2 + 0.8 * x + 0.3 * temp + rng.normal(0, 0.2, x.size) * x
    w = 1.0 / x**2 * rng.uniform(0.5, 2.0, x.size)
    path = tmp_path / "wls.csv"
    pd.DataFrame({Y: y, X: x, NUM: temp, W: w}).to_csv(path, index=False)
    sql = make_sql_study(str(path), y=Y, x=X, covariates=[NUM], weights=W)
    for spec, exog in ((ModelSpec(), np.column_stack([np.ones_like(x), x])),
                       (ModelSpec(covariates=(NUM,)), np.column_stack([np.ones_like(x), x, temp]))):
        ref = sm.WLS(y, exog, weights=w).fit()
        fit = score_spec(sql, spec).fit
        est = np.array([c.estimate for c in fit.coefficients])
        se = np.array([c.se for c in fit.coefficients])
        np.testing.assert_allclose(est, ref.params, rtol=1e-9)
        np.testing.assert_allclose(se, ref.bse, rtol=1e-9)
        _close(fit.sse, float(ref.ssr), f"sse[{spec.label()}]")
        assert fit.df_resid == int(ref.df_resid)


def _demo_with_level_weights(tmp_path: Path) -> tuple[Path, str, str]:
    """The demo calibration with a weights column derived here: 1 / the level's variance."""
    from conftest import SENSOR, SENSOR_X, SENSOR_Y

    frame = pd.read_csv(SENSOR)
    var = frame.groupby(SENSOR_X)[SENSOR_Y].transform("var")
    frame["inv_var"] = 1.0 / var
    path = tmp_path / "sensor_w.csv"
    frame.to_csv(path, index=False)
    return path, SENSOR_Y, SENSOR_X


def test_weighted_demo_gives_the_memory_statistics(tmp_path):
    from conftest import SENSOR_COVARIATES

    path, y, x = _demo_with_level_weights(tmp_path)
    covs = list(SENSOR_COVARIATES)
    mem = engine.make_study(engine.load_table(str(path)), y=y, x=x, covariates=covs, weights="inv_var",
                            source=path.name)
    sql = make_sql_study(str(path), y=y, x=x, covariates=covs, weights="inv_var")
    _same_study(mem, sql)
    _same_check(mem, sql)
    root_mem = np.asarray(score_spec(mem, ModelSpec()).level_fitted_y)
    root_sql = np.asarray(score_spec(sql, ModelSpec()).level_fitted_y)
    for spec in (ModelSpec(), ModelSpec(degree=2), ModelSpec(response=LOG), ModelSpec(covariates=("run_day",)),
                 ModelSpec(weights=WeightRule("power-of-mean", 1.0))):
        _same_score(mem, sql, spec, root_mem, root_sql)


def test_cli_weighted_check_and_grow_json_match_memory(tmp_path, capsys):
    path, y, x = _demo_with_level_weights(tmp_path)
    for cmd in (["check"], ["grow", "--covariates", "temp_c", "--depth", "1"]):
        argv = [cmd[0], str(path), "-y", y, "-x", x, "--weights", "inv_var", *cmd[1:], "--json"]
        rc, out_mem, err = _run(capsys, [*argv, "--engine", "memory"])
        assert rc == 0, err
        rc, out_sql, err = _run(capsys, [*argv, "--engine", "duckdb"])
        assert rc == 0, err
        a, b = json.loads(out_mem), json.loads(out_sql)
        if cmd[0] == "check":
            assert a["weights"] == b["weights"] == "inv_var"
            _same_json(a, b, "check", skip=frozenset({"spread", "replicate_free"}))
            continue
        nodes_a = {n["label"]: n for n in a["nodes"]}
        nodes_b = {n["label"]: n for n in b["nodes"]}
        plain = lambda nodes: {k for k in nodes if not k.startswith("bc(")}  # noqa: E731
        assert plain(nodes_a) == plain(nodes_b) and len(plain(nodes_a)) > 5
        for label in plain(nodes_a):
            for key in ("coefficients", "sigma", "lack_of_fit", "criteria", "nested", "k"):
                _same_json(nodes_a[label][key], nodes_b[label][key], f"grow[{label}].{key}")


HOSTILE_WEIGHTS = 'w"; DROP TABLE t; -- `x` ü'


def test_hostile_weights_column_name_stays_a_quoted_identifier(tmp_path):
    frame = _design_frame(4, 6)
    frame[HOSTILE_WEIGHTS] = np.random.default_rng(2).uniform(0.5, 2.0, len(frame))
    path = tmp_path / "odd.parquet"
    frame.to_parquet(path)
    mem, sql = _both_weighted(path, weights=HOSTILE_WEIGHTS)
    _same_weighted(mem, sql, SPECS[:2] + SPECS[7:9])
    frame.loc[3, HOSTILE_WEIGHTS] = -1.0
    frame.to_parquet(path)
    mem, sql = _both_weighted(path, weights=HOSTILE_WEIGHTS)  # the same one line from both engines
    assert mem is None


def test_weighted_row_sample_carries_the_weights(tmp_path):
    # residuals of a weighted SQL study come from a sample of rows, weighted by the sampled weights:
    # with every row in the sample they are the memory engine's residuals (in some order)
    from bendwise.engine.tree.residuals import residuals_by_level

    frame = _design_frame(4, 9)
    frame[W] = np.random.default_rng(3).uniform(0.2, 5.0, len(frame))
    path = tmp_path / "s.parquet"
    frame.to_parquet(path)
    mem, sql = _both_weighted(path, covariates=(NUM,))
    sample = sql.row_sample(1000)
    assert sample.weights is not None
    np.testing.assert_allclose(np.sort(sample.weights), np.sort(mem.weights), rtol=0)
    for spec in (ModelSpec(covariates=(NUM,)), SPECS[11]):
        ra = residuals_by_level(mem, score_spec(mem, spec))
        rb = residuals_by_level(sql, score_spec(sql, spec))
        np.testing.assert_allclose(np.sort(rb.residual), np.sort(ra.residual), rtol=1e-9, atol=1e-12)


def test_weighted_row_level_checks_say_why_or_use_the_weighted_sample(tmp_path):
    # without replicates the replicate-free checks need the rows: the weighted SQL study says so as
    # the unweighted one does; stability resamples a seeded sample of rows that keeps the weights
    from bendwise.engine.tree.stability import _rows_study

    rng = np.random.default_rng(12)
    x = np.linspace(1.0, 20.0, 40)
    path = tmp_path / "norep.csv"
    pd.DataFrame({Y: 2 + x + rng.normal(0, 0.3, x.size), X: x, W: rng.uniform(0.5, 2.0, x.size)}).to_csv(path,
                                                                                                       index=False)
    mem, sql = _both_weighted(path, covariates=())
    assert not sql.exact_replicates() and isinstance(sql.rows(), NoRows)
    got = engine.check(sql).as_json()["replicate_free"]
    assert [t["testable"] for t in got] == [False] and "rows in memory" in got[0]["reason"]
    base, note = _rows_study(sql)
    assert note is not None and base.weights_name == W
    np.testing.assert_allclose(np.sort(base.weights), np.sort(mem.weights), rtol=0)

@pytest.mark.parametrize("column", [Y, X, NUM])
@pytest.mark.parametrize("value", ["null", "nan", "inf", "-inf"])
def test_one_dirty_cell_anywhere_leaves_the_one_scan_path(tmp_path, column, value):
    # The one scan has no per-row check column: a missing y or covariate shows in a count, a NaN
    # or infinite one in a non-finite sum, a bad x in a group key. Each kind of cell, in each
    # column, must send the study to the exact path with the memory engine's counts (reference:
    # engine.make_study on the same rows).
    frame = _tree_frame(3000, seed=23)
    cols = {c: pa.array(frame[c].to_numpy()) for c in frame.columns}
    vals = frame[column].to_numpy(dtype=float).copy()
    mask = np.zeros(vals.size, dtype=bool)
    if value == "null":
        mask[1234] = True
    else:
        vals[1234] = float(value)
    cols[column] = pa.array(vals, mask=mask)
    path = tmp_path / "dirty.parquet"
    pq.write_table(pa.table(cols), path)
    sql = make_sql_study(str(path), y=Y, x=X, covariates=[CAT, NUM])
    assert sql._info["series"] is None
    read_back = pq.read_table(path).to_pandas()
    mem = engine.make_study(read_back, y=Y, x=X, covariates=[CAT, NUM])
    assert sql.n == mem.n == 2999
    assert ([(d.column, d.reason, d.count) for d in sql.report.drops]
            == [(d.column, d.reason, d.count) for d in mem.report.drops])


@pytest.mark.parametrize("y_value", [0.0, -1.0])
def test_a_response_at_or_below_zero_leaves_the_one_scan_path(tmp_path, y_value):
    # d = ln y − c is NULL there, so the count of d falls short of the group's rows
    frame = _tree_frame(3000, seed=24)
    frame.loc[77, Y] = y_value
    path = tmp_path / "nonpos.parquet"
    frame.to_parquet(path)
    sql = make_sql_study(str(path), y=Y, x=X, covariates=[CAT, NUM])
    assert sql._info["series"] is None and sql.n == 3000
    assert sql.domain_problem(LOG, "y") is not None


@pytest.mark.parametrize("sd", [0.004, 0.03, 0.05, 0.1])
def test_orders_sized_from_the_first_rows_hold_on_the_whole_file(sd):
    # fitted_orders sizes the one scan from the first rows (each group's spread, its extremes
    # doubled). On normal groups 30 times larger than the first rows, the check made after the
    # scan must accept y, √y, 1/y and the Box–Cox grid's ends at those orders, and the orders
    # must cost no more sums than the older sizing (choose_orders, a tenth of the tolerances).
    from bendwise.engine.backends.scans import fitted_orders
    from bendwise.engine.stats.power_sums import GRID_END, GRID_TOL, SERIES_TOL, choose_orders

    rng = np.random.default_rng(31)
    first, whole, covs, centres = [], [], [], []
    for g in range(3):
        ln_y = 2.0 + 0.4 * g + rng.normal(0.0, sd, 60_000)
        first.append(ln_y[:2000])
        whole.append(np.exp(ln_y))
        covs.append([rng.normal(20.0, 2.0, ln_y.size)])
        centres.append(float(ln_y[:2000].mean()))
    sds = np.array([f.std() for f in first])
    reach = np.array([np.abs(f - f.mean()).max() for f in first])
    got = fitted_orders(sds, 2.0 * reach, 1)
    assert got is not None
    big_m, big_k = got
    old_m, old_k = choose_orders(float(sds.max()), 2.0 * float(reach.max()), 1)
    assert big_m + big_k <= old_m + old_k
    series = _series_from_rows(whole, covs, centres, big_m, big_k)
    for t, tol in ((IDENTITY, SERIES_TOL), (SQRT, SERIES_TOL), (RECIPROCAL, SERIES_TOL),
                   (Transform("boxcox", GRID_END), GRID_TOL), (Transform("boxcox", -GRID_END), GRID_TOL)):
        assert series.moments(t, tol) is not None, (t, got)
    # one sum fewer of either kind and the model itself refuses (the orders are the cheapest)
    from bendwise.engine.backends.scans import _model_series

    for m, k in ((big_m - 2, big_k), (big_m, big_k - 1)):
        if m >= 6 and 3 <= k <= m:
            model = _model_series(sds, 2.0 * reach, m, k, 1)
            assert any(model.moments(t, 0.5 * tol) is None
                       for t, tol in ((IDENTITY, SERIES_TOL), (SQRT, SERIES_TOL), (RECIPROCAL, SERIES_TOL),
                                      (Transform("boxcox", GRID_END), GRID_TOL),
                                      (Transform("boxcox", -GRID_END), GRID_TOL)))


def test_orders_are_not_sized_for_a_response_too_wide_or_flat():
    from bendwise.engine.backends.scans import fitted_orders

    assert fitted_orders(np.full(4, 0.4), np.full(4, 3.0), 2) is None  # no order holds 1e-10
    assert fitted_orders(np.zeros(4), np.zeros(4), 2) is None  # nothing to size from


def test_orders_from_the_undominated_groups_equal_those_from_all_groups(monkeypatch):
    # sizing looks only at groups no other group exceeds in both spread and reach (many finest
    # groups would otherwise make it slow); the orders must be those of every group
    from bendwise.engine.backends import scans

    rng = np.random.default_rng(41)
    for _ in range(3):
        sd = rng.uniform(0.005, 0.07, 300)
        reach = 2.0 * sd * rng.uniform(2.0, 5.0, sd.size)
        f_sd, f_reach = scans._frontier(sd, reach)
        assert 0 < f_sd.size < 30
        for s_, r_ in zip(sd, reach, strict=True):  # every group is matched or exceeded by a kept one
            assert ((f_sd >= s_) & (f_reach >= r_)).any()
        fast = scans.fitted_orders(sd, reach, 2)
        with monkeypatch.context() as m:
            m.setattr(scans, "_frontier", lambda a, b: (a, b))
            assert scans.fitted_orders(sd, reach, 2) == fast


@hyp(40)
@given(coef=st.lists(st.floats(-50, 50, allow_nan=False), min_size=1, max_size=4),
       centre=st.floats(-1e6, 1e6, allow_nan=False), scale=st.floats(1e-3, 1e6, allow_nan=False),
       xs=st.lists(st.floats(-1e7, 1e7, allow_nan=False, allow_subnormal=False), min_size=1, max_size=30))
def test_centre_curve_in_numpy_is_the_scan_bit_for_bit(coef, centre, scale, xs):
    # the one scan no longer returns each group's centre of ln y: CentreCurve.at must give the very
    # numbers DuckDB computed per row (same operations, same order; IEEE arithmetic, common practice)
    from bendwise.engine.backends.sql_text import CentreCurve

    curve = CentreCurve(centre, scale, tuple(coef))
    con = duckdb.connect()
    con.register("bw_x", pd.DataFrame({"x": np.asarray(xs, dtype=float)}))
    got = con.execute(f"SELECT x, {curve.sql()} AS c FROM bw_x").fetchnumpy()
    want = curve.at(np.asarray(got["x"], dtype=float))
    assert np.array_equal(np.asarray(got["c"], dtype=float), want, equal_nan=True)


def test_one_scan_with_a_centre_curve_leaves_the_centre_out(tmp_path):
    # one accumulator fewer per row: the polynomial path's query carries no MIN(bw_c); the study
    # built from it equals the in-memory one (compared in the tests above), and its centres are the curve's
    from bendwise.engine.backends.duckdb import series_sql
    from bendwise.engine.backends.sql_text import CentreCurve

    curve = CentreCurve(3.0, 2.0, (4.0, 0.5))
    with_curve = series_sql("bw_all", ["x"], [], [], 6, 0, None, 0.0, curve)
    joined = series_sql("bw_all", ["x"], [], [], 6, 0, "bw_shift", 0.0)
    assert "MIN(bw_c)" not in with_curve and "MIN(bw_c) AS centre" in joined
    frame = pd.DataFrame({"x": np.repeat([1.0, 2.0, 3.0, 4.0], 50)})
    frame["y"] = np.exp(1.0 + 0.3 * frame["x"] + np.random.default_rng(5).normal(0, 0.05, len(frame)))
    path = tmp_path / "c.parquet"
    frame.to_parquet(path)
    study = make_sql_study(str(path), y="y", x="x")
    series = study._info["series"]
    assert series is not None
    logs = np.log(frame["y"]).groupby(frame["x"]).mean().to_numpy()
    assert np.allclose(series.base, logs, rtol=0, atol=1e-12)
