"""Power of the lack-of-fit tests before the data exist, and the search for a design.

Two tests of a straight line on replicated data are planned for:

* ``lack_of_fit`` — the pure-error F test, F = [SS_lack/(c−2)] / [SS_pure/(n−c)];
* ``curvature`` — the one-df partial F for adding x² to the line, on (1, n−3) df
  (Mandel's fitting test of ISO 8466-1 is this statistic).

The alternative is a *shape* of departure from a straight line with a *size* δ: the largest
absolute deviation, over the design levels, of the true means from the straight line fitted
(unweighted) through them. The shape is a quadratic bend by default or any curve the user
gives as true means per level. Measuring δ against the unweighted line makes the true curve a
property of the levels alone, so adding replicates never changes what is being detected.

Under the alternative each statistic is (doubly) noncentral F; the noncentralities are squared
lengths of projections of the √n_j-weighted true means (see :func:`_noncentralities`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from bendwise.engine.errors import UsageError

__all__ = [
    "LACK_OF_FIT",
    "CURVATURE",
    "PowerOfTest",
    "DesignPower",
    "SigmaEstimate",
    "DesignRow",
    "DesignChoice",
    "PlanSearch",
    "spaced_levels",
    "design_power",
    "detectable_delta",
    "sigma_from_pure_error",
    "search_designs",
]

LACK_OF_FIT = "lack_of_fit"
CURVATURE = "curvature"
_TESTS = (LACK_OF_FIT, CURVATURE)

# Search grid used when the caller does not give one.
DEFAULT_REPLICATES = tuple(range(2, 11))
DEFAULT_LEVEL_COUNTS = tuple(range(4, 13))


@dataclass(frozen=True, slots=True)
class PowerOfTest:
    """Power of one test at one design against one alternative."""

    test: str
    """``lack_of_fit`` (pure-error F) or ``curvature`` (partial F for x²)."""
    df_num: int
    """Numerator degrees of freedom: c − 2, or 1."""
    df_den: int
    """Denominator degrees of freedom: n − c, or n − 3."""
    noncentrality: float
    """λ of the numerator: Σ n_j (part of the true means the test measures)² / σ²."""
    den_noncentrality: float
    """λ of the denominator; nonzero only for ``curvature`` when the true curve is not a quadratic."""
    critical_f: float
    """F value the statistic must exceed to reject at α."""
    power: float
    """Probability of rejecting the straight line under the alternative."""


@dataclass(frozen=True, slots=True)
class DesignPower:
    """Both tests' power at one design (levels × replicates) against one alternative."""

    levels: tuple[float, ...]
    """Distinct settings of x, in the order given."""
    replicates: tuple[int, ...]
    """Observations planned at each level."""
    total: int
    """n, the number of measurements."""
    sigma: float
    """Noise SD the plan assumes (1.0 when the bend is stated in σ units)."""
    alpha: float
    """Significance level of both tests."""
    shape: str
    """``quadratic`` or ``given means``."""
    delta: float
    """Largest |true mean − straight line| over the levels, in y units."""
    deviations: tuple[float, ...]
    """True mean minus the unweighted straight line through the true means, per level."""
    lack_of_fit: PowerOfTest | None
    """The pure-error lack-of-fit test; None when it was not asked for."""
    curvature: PowerOfTest | None
    """The one-df test for x²; None when it was not asked for."""


@dataclass(frozen=True, slots=True)
class SigmaEstimate:
    """Noise SD taken from the pure error of earlier data."""

    sigma: float
    """The value to plan with: the upper bound when one was asked for, else the estimate."""
    estimate: float
    """sqrt(SS_pure / df_pure)."""
    upper: float | None
    """One-sided upper confidence bound for σ, or None."""
    confidence: float | None
    """Confidence level of ``upper``, or None."""
    ss_pure: float
    """Pure-error sum of squares the estimate comes from."""
    df: int
    """Pure-error degrees of freedom."""


@dataclass(frozen=True, slots=True)
class DesignRow:
    """One candidate design in a search."""

    levels: tuple[float, ...]
    """Its levels."""
    replicates: int
    """Observations per level (the same at every level)."""
    total: int
    """Number of measurements, levels × replicates."""
    power_lack_of_fit: float
    """Power of the pure-error lack-of-fit test."""
    power_curvature: float
    """Power of the one-df x² test."""

    @property
    def level_count(self) -> int:
        """Number of distinct levels."""
        return len(self.levels)

    def power(self, test: str) -> float:
        """Power of ``test`` at this design."""
        return self.power_lack_of_fit if test == LACK_OF_FIT else self.power_curvature


@dataclass(frozen=True, slots=True)
class DesignChoice:
    """The cheapest design that reaches the target power for one test."""

    test: str
    """Which test the choice is for."""
    design: DesignRow
    """The chosen design."""
    power: float
    """Power of ``test`` there."""
    detectable_delta: float | None
    """Smallest bend size (y units) of the same shape reaching the target there; None if none does."""


@dataclass(frozen=True, slots=True)
class PlanSearch:
    """A table of designs with the power of both tests, and the cheapest per test."""

    target: float
    """Power asked for."""
    alpha: float
    """Significance level."""
    sigma: float
    """Noise SD assumed (1.0 when δ is in σ units)."""
    delta: float
    """Bend size planned for, y units."""
    shape: str
    """``quadratic`` or ``given means``."""
    fixed_levels: bool
    """True when the levels were the user's and only replicates varied."""
    rows: tuple[DesignRow, ...]
    """Every design tried, by level count then replicates."""
    lack_of_fit: DesignChoice | None
    """Cheapest design for the lack-of-fit test, or None when no design reaches the target."""
    curvature: DesignChoice | None
    """Cheapest design for the x² test, or None when no design reaches the target."""


# ---------------------------------------------------------------- validation


def _as_levels(levels: Sequence[object]) -> np.ndarray:
    values = []
    for v in levels:
        if isinstance(v, bool):
            raise UsageError(f"levels: {v!r} is not a number; give numeric levels")
        try:
            fv = float(v)  # type: ignore[arg-type]
        except (TypeError, ValueError):
            raise UsageError(f"levels: {v!r} is not a number; give numeric levels") from None
        if not math.isfinite(fv):
            raise UsageError(f"levels: {v!r} is not a finite number; give finite numeric levels")
        values.append(fv)
    arr = np.asarray(values, dtype=float)
    seen: set[float] = set()
    for fv in values:
        if fv in seen:
            raise UsageError(f"levels: {fv:g} is listed twice; give each level once")
        seen.add(fv)
    if len(values) < 3:
        shown = ", ".join(f"{v:g}" for v in values) or "none"
        raise UsageError(
            f"levels: only {len(values)} distinct ({shown}); give at least 3 distinct levels"
        )
    return arr


def _as_replicates(replicates: int | Sequence[int], count: int) -> np.ndarray:
    items = [replicates] * count if np.ndim(replicates) == 0 else list(replicates)  # type: ignore[arg-type]
    if len(items) != count:
        raise UsageError(
            f"replicates: {len(items)} counts for {count} levels; give one count per level"
        )
    out = []
    for r in items:
        if isinstance(r, bool) or not isinstance(r, (int, np.integer, float)):
            raise UsageError(f"replicates: {r!r} is not a whole number; give a count of 1 or more")
        if float(r) != math.floor(float(r)):
            raise UsageError(f"replicates: {r!r} is not a whole number; give a count of 1 or more")
        if r < 1:
            raise UsageError(f"replicates: {r!r} is below 1; give at least 1 per level")
        out.append(int(r))
    return np.asarray(out, dtype=int)


def _positive(name: str, value: float, hint: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise UsageError(f"{name}: {value!r} is not a number; {hint}") from None
    if not math.isfinite(v) or v <= 0:
        raise UsageError(f"{name}: {value!r} is not a positive number; {hint}")
    return v


def _probability(name: str, value: float, hint: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise UsageError(f"{name}: {value!r} is not a number; {hint}") from None
    if not (0.0 < v < 1.0):
        raise UsageError(f"{name}: {value!r} is outside (0, 1); {hint}")
    return v


def _alpha(alpha: float) -> float:
    return _probability("alpha", alpha, "give a significance level such as 0.05")


def _sigma(sigma: float) -> float:
    return _positive("sigma", sigma, "give the noise SD as a number above 0")


def _delta(delta: float) -> float:
    return _positive("delta", delta, "give the bend size as a number above 0")


def _target(target: float, alpha: float) -> float:
    t = _probability("target power", target, "give a value such as 0.8")
    if t <= alpha:
        raise UsageError(
            f"target power: {target!r} is not above alpha {alpha:g}; "
            "a test rejects that often with no bend at all, give a higher target"
        )
    return t


# ---------------------------------------------------------------- geometry


def _scaled(x: np.ndarray) -> np.ndarray:
    """Centre and scale x so that x² columns stay well conditioned for any units."""
    span = float(np.max(np.abs(x - x.mean())))
    return (x - x.mean()) / span


def _line_residual(x: np.ndarray, values: np.ndarray) -> np.ndarray:
    """values minus their unweighted least-squares straight line in x."""
    basis = np.column_stack([np.ones_like(x), _scaled(x)])
    q, _ = np.linalg.qr(basis)
    return values - q @ (q.T @ values)


def _shape(x: np.ndarray, means: Sequence[float] | None) -> tuple[np.ndarray, float, str]:
    """Unit deviation shape (max |·| = 1), the size of the given curve, and the shape's name."""
    if means is None:
        r = _line_residual(x, _scaled(x) ** 2)
        return r / np.max(np.abs(r)), 0.0, "quadratic"
    vals = []
    for m in means:
        try:
            vals.append(float(m))
        except (TypeError, ValueError):
            raise UsageError(
                f"means: {m!r} is not a number; give one numeric true mean per level"
            ) from None
    mu = np.asarray(vals, dtype=float)
    if mu.shape != x.shape:
        raise UsageError(
            f"means: {mu.size} values for {x.size} levels; give one true mean per level"
        )
    if not np.all(np.isfinite(mu)):
        raise UsageError("means: a value is not finite; give finite true means")
    r = _line_residual(x, mu)
    size = float(np.max(np.abs(r)))
    if size <= 1e-12 * max(1.0, float(np.max(np.abs(mu)))):
        raise UsageError("means: the values lie on a straight line; give a curve that bends")
    return r / size, size, "given means"


def _noncentralities(
    x: np.ndarray, reps: np.ndarray, deviations: np.ndarray, sigma: float
) -> tuple[float, float, float]:
    """(λ_lack, λ_x², λ_beyond_x²) for true-mean deviations at a design.

    On the level means with weights n_j, let v = √n_j · μ_j / σ and Q an orthonormal basis of
    √n_j·[1, x, x²]. Then λ_lack = ‖v − P₁v‖² (P₁ onto the first two columns: the line),
    λ_x² = ‖(P₂ − P₁)v‖² = (q₃·v)² and λ_beyond = ‖v − P₂v‖² (what even a quadratic misses; the
    noncentrality of the x² test's residual SS). Sums over the expanded data equal these
    weighted sums because the design matrix is constant within a level.
    """
    sw = np.sqrt(reps.astype(float))
    xs = _scaled(x)
    q, _ = np.linalg.qr(np.column_stack([sw, sw * xs, sw * xs * xs]))
    v = sw * deviations / sigma
    coef = q.T @ v
    lam_lack = float(np.sum((v - q[:, :2] @ coef[:2]) ** 2))
    lam_quad = float(coef[2] ** 2)
    lam_rest = float(np.sum((v - q @ coef) ** 2))
    tiny = 1e-12 * max(float(v @ v), 1e-300)
    return lam_lack, lam_quad, (lam_rest if lam_rest > tiny else 0.0)


# ---------------------------------------------------------------- distributions


def _power(crit: float, d1: int, d2: int, lam1: float, lam2: float = 0.0) -> float:
    """P(F > crit) for F = (χ²'(d1, λ1)/d1) / (χ²'(d2, λ2)/d2).

    With λ2 = 0 this is ``scipy.stats.ncf``; otherwise the denominator is a Poisson(λ2/2)
    mixture of central χ² on d2 + 2k df, and each term is an ncf tail at a rescaled point.
    (``ncf.sf`` with λ exactly 0 is wrong in scipy 1.17, so the central case uses ``f``.)
    """
    from scipy.stats import f, ncf, poisson

    def tail(point: float, den: int) -> float:
        if lam1 <= 0.0:
            return float(f.sf(point, d1, den))
        return float(ncf.sf(point, d1, den, lam1))

    if lam2 <= 0.0:
        return min(max(tail(crit, d2), 0.0), 1.0)
    k_hi = int(poisson.isf(1e-14, lam2 / 2.0)) + 2
    k = np.arange(0, k_hi + 1)
    weights = poisson.pmf(k, lam2 / 2.0)
    total = 0.0
    for kk, w in zip(k, weights, strict=True):
        if w < 1e-18:
            continue
        den = d2 + 2 * int(kk)
        total += float(w) * tail(crit * den / d2, den)
    return min(max(total, 0.0), 1.0)


def _critical(alpha: float, d1: int, d2: int) -> float:
    from scipy.stats import f

    return float(f.isf(alpha, d1, d2))


def _test_power(test: str, x, reps, deviations, sigma, alpha) -> PowerOfTest:
    c, n = x.size, int(reps.sum())
    lam_lack, lam_quad, lam_rest = _noncentralities(x, reps, deviations, sigma)
    if test == LACK_OF_FIT:
        if n == c:
            raise UsageError(
                "replicates: 1 at every level leaves no pure error for the lack-of-fit test; "
                "plan 2 or more observations at some level"
            )
        d1, d2, lam1, lam2 = c - 2, n - c, lam_lack, 0.0
    else:
        if n <= 3:
            raise UsageError(
                f"replicates: {n} measurements leave no residual df for the x² test; "
                "plan more than 3 measurements"
            )
        d1, d2, lam1, lam2 = 1, n - 3, lam_quad, lam_rest
    crit = _critical(alpha, d1, d2)
    return PowerOfTest(
        test=test,
        df_num=d1,
        df_den=d2,
        noncentrality=lam1,
        den_noncentrality=lam2,
        critical_f=crit,
        power=_power(crit, d1, d2, lam1, lam2),
    )


# ---------------------------------------------------------------- public API


def spaced_levels(count: int, low: float, high: float) -> tuple[float, ...]:
    """``count`` equally spaced levels from ``low`` to ``high`` inclusive."""
    if isinstance(count, bool) or not isinstance(count, (int, np.integer)) or count < 3:
        raise UsageError(f"levels: {count!r} levels is too few; give at least 3 distinct levels")
    lo, hi = float(low), float(high)
    if not (math.isfinite(lo) and math.isfinite(hi)) or lo >= hi:
        raise UsageError(f"range: {low!r},{high!r} is not an interval; give LOW below HIGH")
    return tuple(float(v) for v in np.linspace(lo, hi, int(count)))


def design_power(
    levels: Sequence[float],
    replicates: int | Sequence[int],
    *,
    delta: float | None = None,
    means: Sequence[float] | None = None,
    sigma: float = 1.0,
    alpha: float = 0.05,
    tests: Sequence[str] = _TESTS,
) -> DesignPower:
    """Power of the lack-of-fit test and of the x² test at one design.

    Give the alternative as ``delta`` (a quadratic bend of that size, y units; pass ``sigma=1``
    to state it in σ units), or as ``means`` (true mean per level; ``delta`` then rescales that
    curve's departure from a line to the given size). Under it the lack-of-fit statistic is
    noncentral F(c−2, n−c, λ) with λ = Σ n_j (μ_j − μ̃_j)²/σ², μ̃ the n_j-weighted least-squares
    line through the true means (docs/METHODS.md, "Power of the lack-of-fit test"); the x² statistic is
    F(1, n−3) with numerator noncentrality the part of that sum explained by x² and, when the
    curve is not a quadratic, a noncentral denominator too. ``tests`` limits the work to some
    of the two; the lack-of-fit test needs a level with 2+ observations, the x² test does not.
    """
    for name in tests:
        if name not in _TESTS:
            raise UsageError(f"test: {name!r} is unknown; use {LACK_OF_FIT!r} or {CURVATURE!r}")
    x = _as_levels(levels)
    reps = _as_replicates(replicates, x.size)
    s = _sigma(sigma)
    a = _alpha(alpha)
    unit, size, shape = _shape(x, means)
    if delta is None:
        if means is None:
            raise UsageError("delta: not given; state the bend size or the true means per level")
        d = size
    else:
        d = _delta(delta)
    dev = d * unit
    return DesignPower(
        levels=tuple(float(v) for v in x),
        replicates=tuple(int(r) for r in reps),
        total=int(reps.sum()),
        sigma=s,
        alpha=a,
        shape=shape,
        delta=d,
        deviations=tuple(float(v) for v in dev),
        lack_of_fit=_test_power(LACK_OF_FIT, x, reps, dev, s, a) if LACK_OF_FIT in tests else None,
        curvature=_test_power(CURVATURE, x, reps, dev, s, a) if CURVATURE in tests else None,
    )


def detectable_delta(
    levels: Sequence[float],
    replicates: int | Sequence[int],
    *,
    test: str,
    target: float = 0.8,
    sigma: float = 1.0,
    alpha: float = 0.05,
    means: Sequence[float] | None = None,
) -> float | None:
    """Smallest bend size δ (y units) at which ``test`` reaches ``target`` power.

    The shape is the quadratic bend, or the curve in ``means`` rescaled. Power is found on a
    geometric grid of δ and the first crossing refined by Brent's method, so a curve whose x²
    power does not keep rising with δ (possible when it is far from a quadratic) still gives the
    smallest δ, or None when no δ reaches the target.
    """
    from scipy.optimize import brentq

    if test not in _TESTS:
        raise UsageError(f"test: {test!r} is unknown; use {LACK_OF_FIT!r} or {CURVATURE!r}")
    x = _as_levels(levels)
    reps = _as_replicates(replicates, x.size)
    s = _sigma(sigma)
    a = _alpha(alpha)
    t = _target(target, a)
    unit, _, _ = _shape(x, means)
    base = _test_power(test, x, reps, unit, 1.0, a)  # δ/σ = 1
    if base.noncentrality <= 0.0:
        return None  # the test cannot see this shape at all

    def gap(k: float) -> float:  # k = δ/σ
        k2 = k * k
        p = _power(
            base.critical_f,
            base.df_num,
            base.df_den,
            base.noncentrality * k2,
            base.den_noncentrality * k2,
        )
        return p - t

    grid = np.sqrt(np.geomspace(1e-4, 1e8, 120) / base.noncentrality)
    prev = 0.0
    for k in grid:
        if gap(float(k)) >= 0.0:
            root = brentq(gap, prev, float(k), xtol=1e-12, rtol=1e-12)
            return float(root) * s
        prev = float(k)
    return None


def sigma_from_pure_error(
    ss_pure: float, df_pure: int, confidence: float | None = None
) -> SigmaEstimate:
    """Noise SD from the pure error of earlier data, optionally as an upper confidence bound.

    σ̂ = sqrt(SS_pure/df). Since SS_pure/σ² ~ χ²(df) for normal errors, with probability
    ``confidence`` σ ≤ sqrt(SS_pure / χ²_{1−confidence}(df)), χ²_q the q quantile. Planning with
    that bound guards against an optimistic σ̂ from few df (a common practice in sample-size
    planning), at the price of more measurements.
    """
    from scipy.stats import chi2

    if isinstance(df_pure, bool) or int(df_pure) != df_pure or df_pure < 1:
        raise UsageError(
            f"pure error: {df_pure!r} degrees of freedom; the data need a level with 2+ observations"
        )
    ss = float(ss_pure)
    if not math.isfinite(ss) or ss <= 0:
        raise UsageError(
            f"pure error: sum of squares {ss_pure!r} is not positive; replicates are identical, "
            "give --sigma instead"
        )
    df = int(df_pure)
    est = math.sqrt(ss / df)
    if confidence is None:
        return SigmaEstimate(
            sigma=est, estimate=est, upper=None, confidence=None, ss_pure=ss, df=df
        )
    conf = _probability("sigma upper", confidence, "give a confidence level such as 0.9")
    upper = math.sqrt(ss / float(chi2.ppf(1.0 - conf, df)))
    return SigmaEstimate(sigma=upper, estimate=est, upper=upper, confidence=conf, ss_pure=ss, df=df)


def _candidate_designs(levels: Sequence[float] | None, span: tuple[float, float] | None,
                       means: Sequence[float] | None, level_counts: Sequence[int]) -> list[tuple[float, ...]]:
    """The fixed levels, or each count of levels spread evenly over the span."""
    if levels is not None:
        return [tuple(float(v) for v in _as_levels(levels))]
    if means is not None:
        raise UsageError(
            "means: true means need fixed levels; list the levels instead of a range"
        )
    lo, hi = span  # type: ignore[misc]
    return [spaced_levels(int(c), lo, hi) for c in level_counts]


def _design_rows(designs: list[tuple[float, ...]], reps_list: list[int], *, delta: float | None,
                 means: Sequence[float] | None, sigma: float, alpha: float) -> tuple[list[DesignRow], DesignPower]:
    """Power of both tests at every design × replicate count, and the first design's full result."""
    rows: list[DesignRow] = []
    first: DesignPower | None = None
    for lv in designs:
        for r in reps_list:
            dp = design_power(lv, r, delta=delta, means=means, sigma=sigma, alpha=alpha)
            first = first or dp
            assert dp.lack_of_fit is not None and dp.curvature is not None
            rows.append(DesignRow(levels=lv, replicates=r, total=dp.total,
                                  power_lack_of_fit=dp.lack_of_fit.power, power_curvature=dp.curvature.power))
    assert first is not None
    return rows, first


def search_designs(
    *,
    levels: Sequence[float] | None = None,
    span: tuple[float, float] | None = None,
    delta: float | None = None,
    means: Sequence[float] | None = None,
    sigma: float = 1.0,
    alpha: float = 0.05,
    target: float = 0.8,
    replicates: Sequence[int] = DEFAULT_REPLICATES,
    level_counts: Sequence[int] = DEFAULT_LEVEL_COUNTS,
) -> PlanSearch:
    """Power of both tests over a grid of designs, and the cheapest design per test.

    Either fix ``levels`` (only the replicates vary) or give ``span`` = (low, high), in which case
    each count in ``level_counts`` is spread evenly over it. The alternative is a bend of size
    ``delta`` with the quadratic shape (the true ``means`` shape needs fixed levels), measured
    on each design's own levels. Cheapest means fewest measurements; ties go to more power, then
    fewer levels. At each chosen design the detectable δ for the target is reported too.
    """
    a = _alpha(alpha)
    t = _target(target, a)
    s = _sigma(sigma)
    if (levels is None) == (span is None):
        raise UsageError("levels: none or both of levels and range given; give exactly one")
    reps_list = [int(r) for r in _as_replicates(list(replicates), len(replicates))]
    if not reps_list:
        raise UsageError("replicates: empty search range; give at least one count")
    designs = _candidate_designs(levels, span, means, level_counts)
    if delta is None and means is None:
        raise UsageError("delta: not given; state the bend size or the true means per level")
    rows, first = _design_rows(designs, reps_list, delta=delta, means=means, sigma=s, alpha=a)

    def choose(test: str) -> DesignChoice | None:
        ok = [row for row in rows if row.power(test) >= t]
        if not ok:
            return None
        best = min(ok, key=lambda row: (row.total, -row.power(test), row.level_count))
        dd = detectable_delta(
            best.levels, best.replicates, test=test, target=t, sigma=s, alpha=a, means=means
        )
        return DesignChoice(test=test, design=best, power=best.power(test), detectable_delta=dd)

    return PlanSearch(
        target=t,
        alpha=a,
        sigma=s,
        delta=first.delta,
        shape=first.shape,
        fixed_levels=levels is not None,
        rows=tuple(rows),
        lack_of_fit=choose(LACK_OF_FIT),
        curvature=choose(CURVATURE),
    )
