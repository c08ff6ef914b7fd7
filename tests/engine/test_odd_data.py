"""Valid data never produce a traceback, and scale or location never change an answer.

* Small odd data sets (2–12 levels, 1–5 replicates, offsets to 1e8, scales 1e-10 to 1e10, ties,
  rounding, constant y inside levels, exact fits, one-off categories) go through ``check``,
  the remedy tree (depth 2, the suggestion) and export, with the in-memory engine and with
  DuckDB over a CSV file: every case gives a result or one ``BendwiseError`` line.
* ``check`` on y′ = a·y + b agrees with exact rational arithmetic on the same values (Python
  ``fractions``) to 1e-8 relative, and with the untransformed data when the map is exact.
* The cases that once broke the tree are regression tests.
"""

from __future__ import annotations

import math
from fractions import Fraction
from pathlib import Path

import bendwise.engine as engine
import numpy as np
import pandas as pd
import pytest
from bendwise.engine.errors import BendwiseError
from bendwise.engine.handon.export import export_node
from bendwise.engine.tree.tree import RemedyTree
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

FUZZ = settings(max_examples=120, deadline=None, derandomize=True, database=None,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
FUZZ_SQL = settings(max_examples=30, deadline=None, derandomize=True, database=None,
                    suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])


@st.composite
def odd_frames(draw) -> pd.DataFrame:
    """A small, odd, valid table: y, x and a categorical 'lot' with one-off categories."""
    seed = draw(st.integers(0, 2**32 - 1))
    rng = np.random.default_rng(seed)
    c = draw(st.integers(2, 12))
    reps = rng.integers(1, 6, size=c) if draw(st.booleans()) else np.full(c, draw(st.integers(1, 5)))
    levels = np.sort(rng.choice(np.arange(-5, 60), size=c, replace=False)).astype(float)
    if draw(st.booleans()):
        levels = levels - levels.min() + draw(st.sampled_from([0.0, 0.5, 1.0]))  # x ≥ 0, maybe x = 0
    x = np.repeat(levels, reps)
    shape = draw(st.sampled_from(["line", "bend", "exact", "flat-in-level", "recip", "growth"]))
    u = (x - x.min()) / (np.ptp(x) or 1.0)
    noise = rng.standard_normal(x.size)
    if shape == "line":
        y = 1 + 2 * u + 0.3 * noise
    elif shape == "bend":
        y = 1 + 2 * u - 1.5 * u**2 + 0.2 * noise
    elif shape == "exact":
        y = 5 + 2 * u
    elif shape == "flat-in-level":
        y = np.repeat(1 + 2 * np.unique(u) + 0.3 * rng.standard_normal(c), reps)
    elif shape == "recip":
        y = 1 + 1 / (0.2 + u) + 0.05 * noise
    else:
        y = np.exp(0.5 + 2 * u + 0.1 * noise)
    scale = draw(st.sampled_from([1e-10, 1e-5, 1.0, 1e3, 1e10]))
    offset = draw(st.sampled_from([0.0, 1.0, -50.0, 1e5, 1e8, -1e8]))
    y = y * scale + offset
    digits = draw(st.sampled_from([None, 1, 3]))
    if digits is not None:  # values written to a resolution: ties inside levels
        y = np.round(y / scale, digits) * scale + 0.0
    frame = pd.DataFrame({"x": x, "y": y})
    lots = draw(st.sampled_from(["two", "one-off", "none"]))
    if lots == "two":
        frame["lot"] = np.where(np.arange(x.size) % 2 == 0, "A", "B")
    elif lots == "one-off":
        frame["lot"] = ["A"] * (x.size - 1) + ["Z"]  # a category seen once
    return frame


def _one_line(exc: BendwiseError) -> None:
    text = str(exc)
    assert text and "\n" not in text and "Traceback" not in text, text


def _through_everything(study, tmp: Path) -> None:
    """check, the tree to depth 2 with every rule, and an export of the suggestion (or root)."""
    result = engine.check(study)
    json_ok = result.as_json()
    assert json_ok["lack_of_fit"]["testable"] in (True, False)
    lof = result.lack_of_fit
    if lof.testable:
        assert lof.f is not None and math.isfinite(lof.f) and 0 <= lof.p <= 1, lof
    tree = RemedyTree(study)
    tree.grow(2)
    for rule in engine.RULES:
        sug = tree.suggest(rule)
        assert sug.reason
    body = tree.as_json()
    for node in body["nodes"]:
        crit = node.get("criteria")
        if crit:
            for key in ("aic", "aicc", "bic"):
                assert crit[key] is None or math.isfinite(crit[key]), (node["id"], crit)
    nid = tree.suggest().node or "root"
    try:
        export_node(tree, nid, tmp / "out", data_path=None)
    except BendwiseError as exc:
        _one_line(exc)


@pytest.mark.slow
@FUZZ
@given(frame=odd_frames())
def test_memory_engine_never_raises_anything_but_one_line(frame, tmp_path_factory):
    tmp = tmp_path_factory.mktemp("odd")
    covs = ["lot"] if "lot" in frame else []
    try:
        study = engine.make_study(frame, y="y", x="x", covariates=covs)
        _through_everything(study, tmp)
    except BendwiseError as exc:
        _one_line(exc)


@pytest.mark.slow
@FUZZ_SQL
@given(frame=odd_frames())
def test_duckdb_engine_never_raises_anything_but_one_line(frame, tmp_path_factory):
    pytest.importorskip("duckdb")
    from bendwise.engine.backends.duckdb import make_sql_study

    tmp = tmp_path_factory.mktemp("oddsql")
    path = tmp / "odd.csv"
    frame.to_csv(path, index=False, float_format="%.17g")
    covs = ["lot"] if "lot" in frame else []
    try:
        study = make_sql_study(str(path), y="y", x="x", covariates=covs)
        result = engine.check(study)
        assert result.as_json()
        tree = RemedyTree(study)
        tree.grow(2)
        assert tree.suggest().reason
    except BendwiseError as exc:
        _one_line(exc)


# ----------------------------------------------------------------------------- scale and location

def _exact_lack_of_fit(x: np.ndarray, y: np.ndarray) -> tuple[Fraction, Fraction, Fraction]:
    """(SS_lack, SS_pure, F) of the straight line in exact rational arithmetic on the float values."""
    xs = [Fraction(float(v)) for v in x]
    ys = [Fraction(float(v)) for v in y]
    n = len(xs)
    mx, my = sum(xs) / n, sum(ys) / n
    sxx = sum((a - mx) ** 2 for a in xs)
    sxy = sum((a - mx) * (b - my) for a, b in zip(xs, ys, strict=True))
    b1 = sxy / sxx
    b0 = my - b1 * mx
    sse = sum((b - b0 - b1 * a) ** 2 for a, b in zip(xs, ys, strict=True))
    groups: dict[Fraction, list[Fraction]] = {}
    for a, b in zip(xs, ys, strict=True):
        groups.setdefault(a, []).append(b)
    ss_pure = sum(sum((b - sum(g) / len(g)) ** 2 for b in g) for g in groups.values())
    c = len(groups)
    ss_lack = sse - ss_pure
    f = (ss_lack / (c - 2)) / (ss_pure / (n - c)) if ss_pure else Fraction(0)
    return ss_lack, ss_pure, f


def _bent_data() -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(20261205)
    x = np.repeat(np.linspace(1.0, 10.0, 6), 3)
    y = 10 + 2 * x + 0.05 * x**2 + rng.normal(0, 1.0, x.size)
    return x, y


@pytest.mark.parametrize("a", [1e-8, 1e-4, 1.0, 1e4, 1e8])
@pytest.mark.parametrize("b", [0.0, 1e4, -1e8, 1e8])
def test_check_agrees_with_exact_arithmetic_after_any_affine_map(a, b):
    x, y0 = _bent_data()
    y = a * y0 + b
    try:
        result = engine.check(engine.make_study(pd.DataFrame({"x": x, "y": y}), y="y", x="x"))
    except BendwiseError as exc:  # the map erased every difference: said in one line
        _one_line(exc)
        assert np.ptp(y) == 0
        return
    ss_lack, ss_pure, f = _exact_lack_of_fit(x, y)
    lof = result.lack_of_fit
    if not lof.testable:
        # only when the replicates differ at the level of rounding of values this size
        assert "rounding" in lof.reason or "is 0" in lof.reason
        assert float(ss_pure) <= 18 * (64 * 2.2e-16 * float(np.max(np.abs(y)))) ** 2
        return
    # reference: exact rational arithmetic on the same float values (Python fractions)
    assert math.isclose(lof.ss_pure, float(ss_pure), rel_tol=1e-8)
    assert math.isclose(lof.f, float(f), rel_tol=1e-8), (lof.f, float(f))


def _exact_maps() -> list[tuple[float, float]]:
    """(a, b) powers of two for which a·y + b holds every digit of y (y on a grid of 2⁻¹⁰)."""
    _, y0 = _bent_data()
    y0 = np.round(y0 * 1024) / 1024
    out = []
    for a in (2.0**-27, 2.0**-10, 1.0, 2.0**10, 2.0**27):
        for b in (0.0, 2.0**14, -(2.0**26), 2.0**26, 2.0**40):
            moved = a * y0 + b
            if all(Fraction(float(m)) == Fraction(a) * Fraction(float(v)) + Fraction(b) for m, v in zip(moved, y0, strict=True)):
                out.append((a, b))
    return out


@pytest.mark.parametrize(("a", "b"), _exact_maps())
def test_check_is_invariant_to_an_exact_affine_map(a, b):
    """With y on a grid of 2⁻¹⁰ and a, b powers of two chosen so that a·y + b is exact in double
    precision, the lack-of-fit F and p must not move (1e-9 relative)."""
    x, y0 = _bent_data()
    y0 = np.round(y0 * 1024) / 1024
    base = engine.check(engine.make_study(pd.DataFrame({"x": x, "y": y0}), y="y", x="x")).lack_of_fit
    moved = engine.check(engine.make_study(pd.DataFrame({"x": x, "y": a * y0 + b}), y="y", x="x")).lack_of_fit
    assert len(_exact_maps()) >= 15  # the grid covers a wide range of scales and offsets
    assert moved.testable and base.testable
    assert math.isclose(moved.f, base.f, rel_tol=1e-9) and math.isclose(moved.p, base.p, rel_tol=1e-9)


def test_huge_and_tiny_values_are_refused_in_one_line():
    x = np.repeat([1.0, 2.0, 3.0], 2)
    for y in (np.array([1, 1.1, 2, 2.2, 3, 3.1]) * 1e200, np.array([1, 1.1, 2, 2.2, 3, 3.1]) * 1e-300):
        with pytest.raises(BendwiseError, match="rescale the column") as err:
            engine.make_study(pd.DataFrame({"x": x, "y": y}), y="y", x="x")
        _one_line(err.value)


# ----------------------------------------------------------------------------- regressions

REGRESSIONS = {
    # y ≈ 1e5 + a line: the Box–Cox profile's powers cancelled (count-rate detectors)
    "offset": ("x,y\n1,100001.6\n1,100001.2\n1,100001.7\n2,100003.2\n2,100004.1\n2,100005.2\n3,100006.4\n"
               "3,100006.2\n3,100007.0\n4,100008.7\n4,100009.5\n4,100006.9\n5,100010.5\n5,100011.7\n"
               "5,100010.2\n6,100011.9\n6,100010.1\n6,100012.3\n"),
    # an exact fit at two levels
    "exact": "x,y\n0,5\n0,5\n1,7\n1,7\n",
    # y = 10 + 20/x: the weights' power ran away and overflowed
    "recip": ("x,y\n0.5,50.1\n0.5,49.8\n0.5,50.3\n1,30.2\n1,29.9\n1,29.8\n2,20.1\n2,19.7\n2,20.2\n4,15.2\n"
              "4,14.9\n4,15.0\n8,12.4\n8,12.6\n8,12.5\n16,11.3\n16,11.2\n16,11.3\n"),
    # replicates equal after rounding: pure error must be 0, not 1e-32
    "rounded": "x,y\n0,0.1\n0,0.1\n0,0.1\n1,0.3\n1,0.3\n1,0.3\n2,0.5\n2,0.5\n2,0.5\n3,0.7\n3,0.7\n3,0.7\n",
    # tiny values
    "tiny": ("x,y\n1,1.1e-8\n1,1.3e-8\n1,1.2e-8\n2,2.1e-8\n2,2.4e-8\n2,2.2e-8\n3,3.3e-8\n3,3.1e-8\n3,3.2e-8\n"
             "4,4.2e-8\n4,4.4e-8\n4,4.1e-8\n"),
}


@pytest.mark.parametrize("name", sorted(REGRESSIONS))
def test_cases_that_once_broke_the_tree(name, tmp_path):
    path = tmp_path / f"{name}.csv"
    path.write_text(REGRESSIONS[name])
    study = engine.make_study(engine.load_table(path), y="y", x="x", source=path.name)
    _through_everything(study, tmp_path)


def test_rounded_replicates_are_untestable_not_a_false_alarm(tmp_path):
    path = tmp_path / "rounded.csv"
    path.write_text(REGRESSIONS["rounded"])
    study = engine.make_study(engine.load_table(path), y="y", x="x")
    result = engine.check(study)
    assert not result.lack_of_fit.testable and result.lack_found is None
    assert result.lack_of_fit.ss_pure is None
    assert all(r.sd == 0 for r in result.level_rows)
    tree = RemedyTree(study)
    tree.grow(2)
    sug = tree.suggest()
    assert sug.node == "root" and "cannot be tested" in sug.reason and "bendwise plan" in sug.reason


def test_untestable_design_gets_no_transform():
    # 2 levels × 2: the line saturates the levels, nothing can be tested
    frame = pd.DataFrame({"x": [1.0, 1.0, 2.0, 2.0], "y": [3.1, 2.9, 5.2, 4.7]})
    tree = RemedyTree(engine.make_study(frame, y="y", x="x"))
    tree.grow(2)
    sug = tree.suggest()
    assert sug.node == "root" and "no remedy is suggested without evidence" in sug.reason


def test_exact_fit_has_no_infinite_criteria():
    frame = pd.DataFrame({"x": [0.0, 0.0, 1.0, 1.0], "y": [5.0, 5.0, 7.0, 7.0]})
    tree = RemedyTree(engine.make_study(frame, y="y", x="x"))
    s = tree.root.score
    assert s.criteria.aic is None and s.criteria.aicc is None and s.criteria.bic is None
    assert any("exactly" in w for w in s.warnings)


def test_weights_power_stays_bounded_on_a_reciprocal_curve(tmp_path):
    path = tmp_path / "recip.csv"
    path.write_text(REGRESSIONS["recip"])
    tree = RemedyTree(engine.make_study(engine.load_table(path), y="y", x="x"))
    trend = tree.spread_evidence()
    assert trend.available
    from bendwise.engine.stats.variance import THETA_MAX, THETA_MIN

    assert THETA_MIN <= trend.theta_hat <= THETA_MAX
    tree.grow(2)
    for node in tree.nodes.values():
        if node.spec.weights is not None:
            assert THETA_MIN <= node.spec.weights.theta <= THETA_MAX
            assert node.score is None or math.isfinite(node.score.fit.sse)
