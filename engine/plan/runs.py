"""Planning a calibration spread over R runs (days, batches, instruments).

The planned design is balanced: every run measures the same ``c`` levels, ``m`` times each, so
there are R·c·m measurements. The model is y = b0 + b1·x + bend(x) + u_run + e with run offsets
u ~ N(0, σ_b²) and within-run noise e ~ N(0, σ_w²), as in ``check --runs``.

Three things are worked out for such a design (docs/METHODS.md, "Planning over several runs"):

* the power of the lack-of-fit test within runs (line + run offsets against run + level means,
  error = pure error within run × level cells). Run offsets are removed by the blocks, so only
  σ_w enters: the statistic is noncentral F(c−2, R·c·(m−1), λ) with λ = R·m·Σ_j d_j²/σ_w², d_j
  the true level means' departures from the straight line through them;
* optionally, the power of the shape test (run × level interaction against the same pure error)
  when each run × level cell carries its own random departure with SD τ: the statistic is then
  (1 + m·τ²/σ_w²) times a central F((R−1)(c−1), R·c·(m−1));
* the half-width of the interval for x̂ from the mean of ``new_readings`` readings taken in a
  new run, to first order in the slope (delta method), with between-run variance included and a
  Satterthwaite degrees of freedom for the t quantile.

Cost of a design = R·run_cost + R·c·m·measurement_cost; :func:`search_runs_designs` lists the
cheapest designs over R and m that reach a target power and/or x̂ half-width.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ..errors import UsageError
from .power import (
    _alpha,
    _as_levels,
    _critical,
    _delta,
    _noncentralities,
    _positive,
    _power,
    _probability,
    _shape,
    _target,
)

__all__ = [
    "RunsTestPower",
    "XhatPrecision",
    "RunsDesign",
    "RunsCandidate",
    "RunsSearch",
    "DEFAULT_RUNS",
    "DEFAULT_RUN_REPLICATES",
    "design_cost",
    "xhat_precision",
    "runs_design",
    "search_runs_designs",
]

DEFAULT_RUNS = tuple(range(2, 13))
"""Run counts the search tries when the caller does not give them."""
DEFAULT_RUN_REPLICATES = tuple(range(2, 11))
"""Replicates per level within a run that the search tries."""
SHOWN_CANDIDATES = 5
"""How many of the cheapest feasible designs a search keeps."""


@dataclass(frozen=True, slots=True)
class RunsTestPower:
    """Power of one F test of a multi-run design."""

    df_num: int
    """Numerator degrees of freedom."""
    df_den: int
    """Denominator degrees of freedom (pure error within run × level cells)."""
    noncentrality: float
    """λ of the lack-of-fit statistic; for the shape test, the scale factor 1 + m·τ²/σ_w²."""
    critical_f: float
    """F value the statistic must exceed at α."""
    power: float
    """Probability of rejecting."""


@dataclass(frozen=True, slots=True)
class XhatPrecision:
    """Approximate interval for x̂ from a new run's reading, at one x."""

    at: float
    """The true x of the reading."""
    level: float
    """Confidence level of the interval."""
    new_readings: int
    """Readings averaged in the new run."""
    sd: float
    """Approximate SD of x̂ (x units): sqrt(var(ȳ_new − ŷ(x))) / |slope|."""
    df: float
    """Satterthwaite degrees of freedom of the estimated variance."""
    half_width: float
    """t quantile on ``df`` times ``sd``."""


@dataclass(frozen=True, slots=True)
class RunsDesign:
    """Everything planned for one design of R runs × levels × replicates."""

    runs: int
    levels: tuple[float, ...]
    replicates: int
    """Observations per level within each run."""
    total: int
    """R·c·m measurements."""
    sigma_within: float
    sigma_between: float
    alpha: float
    shape: str
    """``quadratic`` or ``given means``."""
    delta: float
    deviations: tuple[float, ...]
    lack_of_fit: RunsTestPower
    shape_differs: RunsTestPower | None
    """Power of the run × level test; None without an interaction SD."""
    precision: XhatPrecision | None
    """x̂ interval; None without a slope."""
    precision_by_level: tuple[XhatPrecision, ...]
    """The same at each level (empty without a slope)."""
    cost: float


@dataclass(frozen=True, slots=True)
class RunsCandidate:
    """One design tried in a search."""

    runs: int
    replicates: int
    total: int
    cost: float
    power: float | None
    """Power of the within-run lack-of-fit test, or None when only precision was targeted."""
    half_width: float | None
    """x̂ half-width at the stated x, or None when only power was targeted."""
    feasible: bool


@dataclass(frozen=True, slots=True)
class RunsSearch:
    """The designs tried, and the cheapest that meet every target."""

    levels: tuple[float, ...]
    target_power: float | None
    target_half_width: float | None
    run_cost: float
    measurement_cost: float
    rows: tuple[RunsCandidate, ...]
    """Every design tried, by runs then replicates."""
    best: tuple[RunsCandidate, ...]
    """The cheapest feasible designs, cheapest first (at most ``SHOWN_CANDIDATES``)."""


# ---------------------------------------------------------------- checks of the inputs


def _whole(name: str, value: object, low: int, hint: str) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer, float)):
        raise UsageError(f"{name}: {value!r} is not a whole number; {hint}")
    if not math.isfinite(float(value)) or float(value) != math.floor(float(value)):
        raise UsageError(f"{name}: {value!r} is not a whole number; {hint}")
    if value < low:
        raise UsageError(f"{name}: {value!r} is below {low}; {hint}")
    return int(value)


def _runs(value: object) -> int:
    return _whole("runs", value, 2, "plan at least 2 runs (3 or more to estimate the between-run SD)")


def _cost(name: str, value: float) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise UsageError(f"{name}: {value!r} is not a number; give a cost of 0 or more") from None
    if not math.isfinite(v) or v < 0:
        raise UsageError(f"{name}: {value!r} is negative or not finite; give a cost of 0 or more")
    return v


def _nonnegative_sd(name: str, value: float) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise UsageError(f"{name}: {value!r} is not a number; give an SD of 0 or more") from None
    if not math.isfinite(v) or v < 0:
        raise UsageError(f"{name}: {value!r} is negative or not finite; give an SD of 0 or more")
    return v


def design_cost(runs: int, level_count: int, replicates: int, run_cost: float,
                measurement_cost: float) -> float:
    """R·run_cost + R·c·m·measurement_cost."""
    return runs * run_cost + runs * level_count * replicates * measurement_cost


# ---------------------------------------------------------------- the two tests


def _lack_of_fit(runs: int, reps: int, x: np.ndarray, dev: np.ndarray, sigma_w: float,
                 alpha: float) -> RunsTestPower:
    """Within-run lack-of-fit test: noncentral F(c−2, R·c·(m−1), R·m·Σd²/σ_w²)."""
    c = x.size
    per_level = np.full(c, runs * reps)
    lam = _noncentralities(x, per_level, dev, sigma_w)[0]
    d1, d2 = c - 2, runs * c * (reps - 1)
    crit = _critical(alpha, d1, d2)
    return RunsTestPower(d1, d2, lam, crit, _power(crit, d1, d2, lam))


def _shape_test(runs: int, reps: int, c: int, tau: float, sigma_w: float,
                alpha: float) -> RunsTestPower:
    """Run × level test when cell departures are random with SD τ: a scaled central F."""
    from scipy.stats import f

    d1, d2 = (runs - 1) * (c - 1), runs * c * (reps - 1)
    scale = 1.0 + reps * tau * tau / (sigma_w * sigma_w)
    crit = _critical(alpha, d1, d2)
    return RunsTestPower(d1, d2, scale, crit, float(f.sf(crit / scale, d1, d2)))


# ---------------------------------------------------------------- x̂ precision


def xhat_precision(levels: Sequence[float], runs: int, replicates: int, *, sigma_within: float,
                   sigma_between: float, slope: float, at: float, level: float = 0.95,
                   new_readings: int = 1) -> XhatPrecision:
    """Approximate interval for x̂ = (ȳ_new − b̂0)/b̂1 from ``new_readings`` readings in a new run.

    For the balanced design the fitted line (OLS, equal to REML here) has
    var(b̂1) = σ_w²/(R·m·Sxx) and var(ŷ at x̄) = σ_b²/R + σ_w²/(R·c·m), uncorrelated, Sxx the sum
    of squared level deviations from their mean. The new run's mean reading adds σ_b² + σ_w²/m0.
    So var(ȳ_new − ŷ(x)) = σ_b²(1 + 1/R) + σ_w²·K, K = 1/m0 + 1/(R·c·m) + (x − x̄)²/(R·m·Sxx),
    and x̂'s SD is its root over |b1| (first order in the slope's error). Written in the two mean
    squares of the analysis, between runs (df R−1, mean σ_w² + c·m·σ_b²) and within runs
    (df R·c·m − R − 1, mean σ_w²), the variance is A·MS_B + B·MS_W; Satterthwaite's df is
    (A·E MS_B + B·E MS_W)² / ((A·E MS_B)²/(R−1) + (B·E MS_W)²/df_W).
    """
    from scipy.stats import t as t_dist

    x = _as_levels(levels)
    r = _runs(runs)
    m = _whole("replicates", replicates, 1, "give a count of 1 or more per level and run")
    m0 = _whole("new readings", new_readings, 1, "give a count of 1 or more")
    sw = _positive("sigma", sigma_within, "give the within-run SD as a number above 0")
    sb = _nonnegative_sd("between-run SD", sigma_between)
    b1 = float(slope)
    if not math.isfinite(b1) or b1 == 0.0:
        raise UsageError(f"slope: {slope!r} is zero or not finite; give the expected slope, y per x")
    conf = _probability("interval level", level, "give a level such as 0.95")
    c = x.size
    sxx = float(np.sum((x - x.mean()) ** 2))
    k = 1.0 / m0 + 1.0 / (r * c * m) + (float(at) - float(x.mean())) ** 2 / (r * m * sxx)
    var = sb * sb * (1.0 + 1.0 / r) + sw * sw * k
    a = (1.0 + 1.0 / r) / (c * m)
    b = k - a
    ms_b, ms_w = sw * sw + c * m * sb * sb, sw * sw
    df_b, df_w = r - 1, r * c * m - r - 1
    df = var * var / ((a * ms_b) ** 2 / df_b + (b * ms_w) ** 2 / df_w)
    sd = math.sqrt(var) / abs(b1)
    q = float(t_dist.ppf(0.5 + conf / 2.0, df))
    return XhatPrecision(float(at), conf, m0, sd, float(df), q * sd)


# ---------------------------------------------------------------- one design


def runs_design(
    levels: Sequence[float],
    runs: int,
    replicates: int,
    *,
    delta: float | None = None,
    means: Sequence[float] | None = None,
    sigma_within: float = 1.0,
    sigma_between: float = 0.0,
    alpha: float = 0.05,
    interaction_sd: float | None = None,
    slope: float | None = None,
    at: float | None = None,
    level: float = 0.95,
    new_readings: int = 1,
    run_cost: float = 0.0,
    measurement_cost: float = 1.0,
) -> RunsDesign:
    """Power of the within-run lack-of-fit test (and of the shape test, given ``interaction_sd``)
    and, given ``slope``, the x̂ half-width at ``at`` (default: the middle of the levels' range)
    and at every level, for R runs × levels × ``replicates`` per level and run.

    The bend is ``delta`` (a quadratic of that largest departure, y units) or ``means``. The cost
    is R·run_cost + R·c·m·measurement_cost.
    """
    x = _as_levels(levels)
    r = _runs(runs)
    m = _whole("replicates", replicates, 2,
               "the lack-of-fit test within runs needs 2 or more per level in each run")
    sw = _positive("sigma", sigma_within, "give the within-run SD as a number above 0")
    sb = _nonnegative_sd("between-run SD", sigma_between)
    a = _alpha(alpha)
    unit, size, shape = _shape(x, means)
    if delta is None and means is None:
        raise UsageError("delta: not given; state the bend size or the true means per level")
    d = size if delta is None else _delta(delta)
    dev = d * unit
    shape_power = None
    if interaction_sd is not None:
        tau = _nonnegative_sd("interaction SD", interaction_sd)
        shape_power = _shape_test(r, m, x.size, tau, sw, a)
    precision: XhatPrecision | None = None
    by_level: tuple[XhatPrecision, ...] = ()
    if slope is not None:
        mid = 0.5 * (float(x.min()) + float(x.max())) if at is None else float(at)
        xs = [float(v) for v in x]

        def at_x(v: float) -> XhatPrecision:
            return xhat_precision(xs, r, m, at=v, sigma_within=sw, sigma_between=sb, slope=slope, level=level,
                                  new_readings=new_readings)

        precision, by_level = at_x(mid), tuple(at_x(v) for v in xs)
    cost = design_cost(r, x.size, m, _cost("run cost", run_cost),
                       _cost("measurement cost", measurement_cost))
    return RunsDesign(
        runs=r, levels=tuple(float(v) for v in x), replicates=m, total=r * x.size * m,
        sigma_within=sw, sigma_between=sb, alpha=a, shape=shape, delta=d,
        deviations=tuple(float(v) for v in dev), lack_of_fit=_lack_of_fit(r, m, x, dev, sw, a),
        shape_differs=shape_power, precision=precision, precision_by_level=by_level, cost=cost,
    )


# ---------------------------------------------------------------- search


def _candidate(x, r, m, *, dev, sw, sb, alpha, slope, at, level, new_readings, target_power,
               target_half_width, run_cost, measurement_cost) -> RunsCandidate:
    power = hw = None
    ok = True
    if target_power is not None:
        power = _lack_of_fit(r, m, x, dev, sw, alpha).power
        ok = ok and power >= target_power
    if target_half_width is not None:
        hw = xhat_precision(x, r, m, sigma_within=sw, sigma_between=sb, slope=slope, at=at,
                            level=level, new_readings=new_readings).half_width
        ok = ok and hw <= target_half_width
    cost = design_cost(r, x.size, m, run_cost, measurement_cost)
    return RunsCandidate(r, m, r * x.size * m, cost, power, hw, ok)


def search_runs_designs(
    levels: Sequence[float],
    *,
    delta: float | None = None,
    means: Sequence[float] | None = None,
    sigma_within: float = 1.0,
    sigma_between: float = 0.0,
    alpha: float = 0.05,
    target_power: float | None = None,
    target_half_width: float | None = None,
    slope: float | None = None,
    at: float | None = None,
    level: float = 0.95,
    new_readings: int = 1,
    run_cost: float = 0.0,
    measurement_cost: float = 1.0,
    runs: Sequence[int] = DEFAULT_RUNS,
    replicates: Sequence[int] = DEFAULT_RUN_REPLICATES,
) -> RunsSearch:
    """Every design of ``runs`` × ``replicates`` at the given levels, and the cheapest feasible.

    Feasible = reaches ``target_power`` for the within-run lack-of-fit test (needs the bend) and
    has an x̂ half-width at ``at`` no wider than ``target_half_width`` (needs ``slope``); at least
    one target is required. Cheapest = lowest cost, ties to more power, then a narrower x̂
    interval, then fewer runs.
    """
    x = _as_levels(levels)
    a = _alpha(alpha)
    if target_power is None and target_half_width is None:
        raise UsageError("target: none given; give a target power, a target x̂ half-width, or both")
    tp = None if target_power is None else _target(target_power, a)
    th = None
    if target_half_width is not None:
        th = _positive("target half-width", target_half_width, "give a half-width above 0, x units")
        if slope is None:
            raise UsageError("slope: needed for a target x̂ half-width; give the expected slope")
    dev = np.zeros_like(x)
    if tp is not None:
        if delta is None and means is None:
            raise UsageError("delta: not given; state the bend size or the true means per level")
        unit, size, _ = _shape(x, means)
        dev = (size if delta is None else _delta(delta)) * unit
    rc, mc = _cost("run cost", run_cost), _cost("measurement cost", measurement_cost)
    sw = _positive("sigma", sigma_within, "give the within-run SD as a number above 0")
    sb = _nonnegative_sd("between-run SD", sigma_between)
    mid = 0.5 * (float(x.min()) + float(x.max())) if at is None else float(at)
    run_list = [_runs(v) for v in runs]
    rep_list = [_whole("replicates", v, 2, "search 2 or more per level in each run")
                for v in replicates]
    rows = tuple(
        _candidate(x, r, m, dev=dev, sw=sw, sb=sb, alpha=a, slope=slope, at=mid, level=level,
                   new_readings=new_readings, target_power=tp, target_half_width=th,
                   run_cost=rc, measurement_cost=mc)
        for r in run_list for m in rep_list
    )
    ok = sorted((row for row in rows if row.feasible), key=_rank)
    return RunsSearch(tuple(float(v) for v in x), tp, th, rc, mc, rows,
                      tuple(ok[:SHOWN_CANDIDATES]))


def _rank(row: RunsCandidate) -> tuple[float, float, float, int]:
    power = -row.power if row.power is not None else 0.0
    hw = row.half_width if row.half_width is not None else 0.0
    return (row.cost, power, hw, row.runs)
