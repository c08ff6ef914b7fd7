"""One row-source protocol: the memory study and the DuckDB study answer the same questions —
every row or why not, and a seeded sample — so what needs rows never checks which engine it has."""

from __future__ import annotations

import bendwise.engine as engine
import numpy as np
import pandas as pd
import pytest
from bendwise.engine.stats.rows import NoRows, Rows, RowSource

duckdb = pytest.importorskip("duckdb")


@pytest.fixture(scope="module")
def studies(tmp_path_factory):
    rng = np.random.default_rng(11)
    x = np.repeat([1.0, 2.0, 4.0, 6.0, 8.0], 6)
    frame = pd.DataFrame({"x": x, "y": 2 + 0.8 * x + rng.normal(0, 0.1, x.size),
                          "lot": np.tile(["A", "B", "C"], 10)})
    path = tmp_path_factory.mktemp("rows") / "t.parquet"
    frame.to_parquet(path)
    from bendwise.engine.backends.duckdb import make_sql_study

    mem = engine.make_study(frame, y="y", x="x", covariates=["lot"])
    sql = make_sql_study(str(path), y="y", x="x", covariates=["lot"])
    return mem, sql


def test_both_studies_are_row_sources(studies):
    for study in studies:
        assert isinstance(study, RowSource)


def test_memory_has_every_row_and_sql_says_why_not(studies):
    mem, sql = studies
    every = mem.rows()
    assert isinstance(every, Rows) and every.n == mem.n and not every.sampled
    assert set(every.covariates["lot"]) == {"A", "B", "C"}
    why = sql.rows()
    assert isinstance(why, NoRows) and "SQL engine" in why.reason and "--engine memory" in why.reason


def test_a_sample_of_at_least_n_is_every_row_in_both(studies):
    mem, sql = studies
    a, b = mem.row_sample(1000), sql.row_sample(1000)
    assert not a.sampled and not b.sampled and a.n == b.n == mem.n
    assert np.allclose(np.sort(a.y), np.sort(b.y), rtol=1e-12)
    assert sorted(a.covariates["lot"]) == sorted(b.covariates["lot"])


@pytest.mark.parametrize("which", [0, 1])
def test_a_smaller_sample_is_seeded(studies, which):
    study = studies[which]
    a, b, c = study.row_sample(7, seed=3), study.row_sample(7, seed=3), study.row_sample(7, seed=4)
    assert a.sampled and a.n == 7 and a.total == study.n
    assert np.array_equal(a.y, b.y)
    assert not np.array_equal(np.sort(a.y), np.sort(c.y))


def test_row_pictures_work_through_the_sample(studies):
    from bendwise.engine.handon.chart_data import curve_chart
    from bendwise.engine.tree.residuals import residuals_by_level

    for study in studies:
        tree = engine.grow(study, depth=0)
        chart = curve_chart(study, tree.root.score)
        assert chart.x.size == study.n
        res = residuals_by_level(study, tree.root.score)
        assert res.residual.size == study.n


def test_category_labels_are_made_when_first_read():
    """The rows' category labels cost a pass each: made on first read, then kept; the values
    are the labels of the rows (numbers pass through)."""
    import numpy as np
    import pandas as pd
    from bendwise.engine import make_study

    frame = pd.DataFrame({"x": [1.0, 1, 2, 2, 3, 3], "y": [1.0, 1.2, 2.1, 2.0, 2.9, 3.1],
                          "lot": ["b", "a", "b", "a", "b", "a"], "t": [5.0, 6, 5, 6, 5, 6]})
    rows = make_study(frame, y="y", x="x", covariates=["lot", "t"]).rows()
    assert rows.covariates._made == {}  # nothing made yet
    assert list(rows.covariates["lot"]) == ["b", "a", "b", "a", "b", "a"]
    assert rows.covariates["lot"] is rows.covariates["lot"]
    np.testing.assert_array_equal(rows.covariates["t"], [5.0, 6, 5, 6, 5, 6])
    assert set(rows.covariates) == {"lot", "t"} and len(rows.covariates) == 2
