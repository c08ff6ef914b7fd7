"""Each Transform carries its forward, inverse, Jacobian, domain check, label and SQL in one place."""

from __future__ import annotations

import numpy as np
import pytest
from bendwise.engine.stats.transforms import (
    IDENTITY,
    LOG,
    RECIPROCAL,
    SQRT,
    Transform,
    boxcox,
    power,
)

ALL = [IDENTITY, LOG, SQRT, RECIPROCAL, boxcox(0.5), boxcox(-0.75), boxcox(0.0), boxcox(2.0), power(0.37), power(-1.5),
       power(2.0)]
V = np.array([0.3, 0.9, 1.0, 2.5, 7.0, 40.0])


@pytest.mark.parametrize("t", ALL, ids=lambda t: t.short("y"))
def test_inverse_undoes_forward(t):
    assert np.allclose(t.inverse(t.forward(V)), V, rtol=1e-12)


@pytest.mark.parametrize("t", ALL, ids=lambda t: t.short("y"))
def test_jacobian_is_the_log_of_the_derivative(t):
    h = 1e-6 * V
    numeric = (t.forward(V + h) - t.forward(V - h)) / (2 * h)  # central difference (common practice)
    assert np.allclose(t.log_abs_derivative(V), np.log(np.abs(numeric)), atol=1e-6)


@pytest.mark.parametrize("t", [t for t in ALL if t.kind != "power"], ids=lambda t: t.short("y"))
def test_sql_expression_equals_numpy_in_duckdb(t):
    duckdb = pytest.importorskip("duckdb")
    con = duckdb.connect()
    con.execute("CREATE TABLE v (y DOUBLE)")
    con.executemany("INSERT INTO v VALUES (?)", [(float(a),) for a in V])
    got = np.array([r[0] for r in con.execute(f'SELECT {t.sql(chr(34) + "y" + chr(34))} FROM v ORDER BY y').fetchall()])
    assert np.allclose(got, t.forward(np.sort(V)), rtol=1e-12)


def test_a_power_has_no_sql_form():
    with pytest.raises(ValueError, match="no SQL form"):
        power(0.37).sql("y")


@pytest.mark.parametrize("t, values", [
    (LOG, np.array([1.0, 0.0, 2.0])), (SQRT, np.array([1.0, -1.0])), (RECIPROCAL, np.array([1.0, 0.0])),
    (RECIPROCAL, np.array([1.0, -1.0])), (boxcox(0.5), np.array([2.0, -3.0])), (power(0.5), np.array([0.0, 1.0])),
])
@pytest.mark.parametrize("role", ["y", "x"])
def test_counts_and_values_give_the_same_domain_verdict(t, values, role):
    by_values = t.domain_problem(values, "col", role)
    by_counts = t.count_problem(role, "col", values.size, int((values <= 0).sum()), int((values == 0).sum()),
                                int((values < 0).sum()))
    assert (by_values is None) == (by_counts is None), (by_values, by_counts)


def test_questions_callers_ask():
    assert IDENTITY.is_identity and not LOG.is_identity
    assert LOG.is_log and boxcox(0.0).is_log and not boxcox(0.5).is_log
    assert RECIPROCAL.decreasing and power(-1.5).decreasing and not power(2.0).decreasing
    assert SQRT.is_named and not boxcox(0.37).is_named
    assert Transform("boxcox", 0.5).canonical() == boxcox(0.5)


@pytest.mark.parametrize("kind, param, message", [
    ("boxcox", None, "needs a number"), ("power", 0.0, "a power of 0"), ("boxcox", 11.0, "between −10 and 10"),
    ("log", 2.0, "must be null"),
])
def test_from_parts_refuses_in_words(kind, param, message):
    with pytest.raises(ValueError, match=message):
        Transform.from_parts(kind, param)


def test_from_log_is_forward_and_jacobian_bit_for_bit():
    """The study takes log and Box–Cox responses from log y computed once: the same bits as
    forward() and the summed log_abs_derivative(); other kinds decline."""
    import numpy as np
    from bendwise.engine.stats.transforms import IDENTITY, LOG, RECIPROCAL, SQRT, boxcox

    y = np.random.default_rng(7).gamma(2.0, 3.0, 5000) + 1e-3
    for t in (LOG, boxcox(0.0), boxcox(0.37), boxcox(-1.2), boxcox(2.0)):
        assert t.of_log
        z, jac = t.from_log(np.log(y))
        np.testing.assert_array_equal(z, t.forward(y))
        assert jac == float(np.sum(t.log_abs_derivative(y)))
    for t in (IDENTITY, SQRT, RECIPROCAL):
        assert not t.of_log and t.from_log(np.log(y)) is None
