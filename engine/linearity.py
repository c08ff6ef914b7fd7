"""Is the straight line adequate? The lack-of-fit split, Mandel's test, spread across levels,
and replicate-free checks when no setting was repeated.

Sources: Kutner, Nachtsheim, Neter & Li (2005) §3.7 for the pure-error test; ISO 8466-1 for
Mandel's test; Brown & Forsythe (1974) for the spread test; statsmodels for RESET, rainbow and
Harvey–Collier. Joglekar, Schuenemeyer & LaRiccia (1989) and Christensen (1989) for groups
formed by a tolerance (the model tested against itself plus group indicators).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .dist import f_sf
from .errors import DataError
from .groups import GroupStats
from .linalg import Column, Design, fit_design, poly_map
from .results import AnovaRow, Criteria, Fit, LackOfFit, LevelRow, SideTest
from .study import Study

__all__ = [
    "CheckResult",
    "check",
    "pure_error",
    "lack_of_fit",
    "criteria_from",
    "poly_design",
    "nested_f",
    "spread_test",
    "power_label",
]

_SUPERSCRIPT = str.maketrans("0123456789", "⁰¹²³⁴⁵⁶⁷⁸⁹")
MANDEL_ALPHA = 0.01


def power_label(name: str, k: int) -> str:
    """'x', 'x²', 'x³' … for the k-th power of a term."""
    return name if k == 1 else f"{name}{str(k).translate(_SUPERSCRIPT)}"


def poly_design(
    t_group: np.ndarray,
    degree: int,
    *,
    name: str,
    intercept: bool = True,
    centre: float | None = None,
    scale: float | None = None,
    base_offset: int | None = None,
) -> Design:
    """Polynomial in t of ``degree`` on centred and scaled powers; raw names t, t², …

    With ``base_offset`` the powers are within-varying bases (groups formed by a tolerance):
    base ``base_offset + k - 1`` must hold u^k row by row.
    """
    lo, hi = float(np.min(t_group)), float(np.max(t_group))
    if centre is None:
        centre = (lo + hi) / 2 if intercept else 0.0
    if scale is None:
        scale = (hi - lo) / 2 if intercept else max(abs(lo), abs(hi))
        scale = scale or 1.0
    u = (t_group - centre) / scale
    ones = np.ones_like(t_group, dtype=float)
    cols: list[Column] = []
    names: list[str] = []
    if intercept:
        cols.append(Column(ones))
        names.append("intercept")
    for k in range(1, degree + 1):
        if base_offset is None:
            cols.append(Column(u**k))
        else:
            cols.append(Column(ones, base_offset + k - 1))
        names.append(power_label(name, k))
    return Design(tuple(cols), tuple(names), poly_map(degree, centre, scale, intercept), intercept)


def criteria_from(loglik: float, k: int, n: int) -> Criteria:
    """AIC, AICc and BIC from a log-likelihood with k estimated parameters (Burnham & Anderson 2002).

    An exact fit has an unbounded likelihood: its criteria are None, never −∞.
    """
    if not math.isfinite(loglik):
        return Criteria(loglik, k, n, None, None, None)
    aic = -2.0 * loglik + 2.0 * k
    aicc = aic + 2.0 * k * (k + 1) / (n - k - 1) if n - k - 1 > 0 else None
    bic = -2.0 * loglik + k * math.log(n)
    return Criteria(loglik, k, n, aic, aicc, bic)


def nested_f(sse_r: float, df_r: int, sse_f: float, df_f: int, kind: str, approximate: bool = False,
             floor: float = 0.0) -> LackOfFit:
    """F test of a reduced model against a fuller one that contains it.

    ``floor``: a residual sum of squares at or below it is rounding noise (``Fit.rounding``).
    """
    if df_r - df_f <= 0:
        return LackOfFit(False, "the richer model adds no degrees of freedom: nothing to test", kind)
    if df_f <= 0:
        return LackOfFit(False, "the richer model leaves no residual degrees of freedom", kind)
    if sse_f <= floor or not math.isfinite(sse_f):
        return LackOfFit(
            False,
            "the richer model fits exactly (residual sum of squares 0): the F ratio is undefined; "
            "check for duplicated rows or a response rounded to its resolution",
            kind,
        )
    ss = max(sse_r - sse_f, 0.0)
    f = (ss / (df_r - df_f)) / (sse_f / df_f)
    return LackOfFit(True, None, kind, ss, sse_f, df_r - df_f, df_f, f, f_sf(f, df_r - df_f, df_f), approximate)


def lack_of_fit(stats: GroupStats, fit: Fit, *, approximate: bool = False) -> LackOfFit:
    """Classical pure-error lack-of-fit test for a fit whose columns are constant within groups."""
    n, c, p = stats.n, stats.c, fit.rank
    if fit.aliased:
        return LackOfFit(
            False,
            f"the model cannot be fitted in full ({', '.join(fit.aliased)} is collinear with the other terms"
            f"{' under these weights' if approximate or stats.sum_log_w else ''}): its lack of fit is not a test "
            "of the model named",
        )
    if c == n:
        return LackOfFit(
            False,
            f"no setting was measured more than once ({n} rows, {n} distinct settings): pure error needs "
            "repeated measurements; repeat some settings, or group near-equal settings with --tolerance "
            "(approximate)",
        )
    if c <= p:
        return LackOfFit(
            False,
            f"the model has as many parameters as there are levels (c = {c}, p = {p}): it passes through "
            "every level mean and nothing is left to test; measure more levels",
        )
    ss_pure = stats.ss_pure
    if not ss_pure > fit.rounding:
        exact = "is 0" if not ss_pure > 0 else "is at the level of floating-point rounding"
        return LackOfFit(
            False,
            f"replicates agree exactly (pure error {exact}): the F ratio is undefined; check for duplicated "
            "rows or a response rounded to its resolution",
        )
    df_pure = n - c
    ss_lack = max(fit.sse - ss_pure, 0.0)
    df_lack = c - p
    f = (ss_lack / df_lack) / (ss_pure / df_pure)
    return LackOfFit(True, None, "pure error", ss_lack, ss_pure, df_lack, df_pure, f, f_sf(f, df_lack, df_pure), approximate)


def pure_error(study: Study) -> tuple[float, int]:
    """Pooled pure-error sum of squares and its df for the study's x levels (unweighted)."""
    z, _ = study.transformed(_identity())
    stats = study.group_stats(z, ("z", _identity().key()))
    if stats.df_pure <= 0:
        raise DataError(
            f"no level of {study.x_name!r} is replicated in {study.source}; pure error needs repeated "
            "measurements (or --tolerance to group near-equal settings)"
        )
    return stats.ss_pure, stats.df_pure


def spread_test(z: np.ndarray, codes: np.ndarray, c: int, order: np.ndarray | None = None) -> SideTest:
    """Brown–Forsythe test of equal spread: one-way ANOVA of |z − group median| (unweighted).

    Levels with one row carry no spread and are left out (as scipy.stats.levene would need).
    ``order`` (rows sorted by group, e.g. ``Study.group_order()``) saves a sort.
    """
    name = "equal spread (Brown–Forsythe)"
    counts = np.bincount(codes, minlength=c)
    ok = counts >= 2
    if ok.sum() < 2:
        return SideTest(name, False, reason="needs at least two levels with two or more replicates")
    if order is None:
        order = np.argsort(codes.astype(np.uint16) if c <= 65535 else codes.astype(np.int64), kind="stable")
    zs = z[order]
    ends = np.cumsum(counts)
    starts = ends - counts
    sums = np.zeros(c)
    sq = np.zeros(c)
    dsq = np.zeros(c)
    if c <= 5000:
        for g in np.flatnonzero(ok):
            seg = zs[starts[g]:ends[g]]
            dg = np.abs(seg - np.median(seg))
            sums[g] = dg.sum()
            dev = dg - sums[g] / counts[g]
            sq[g] = np.einsum("i,i->", dev, dev)  # einsum: BLAS dot is slow on some OpenBLAS builds
            dsq[g] = np.einsum("i,i->", dg, dg)
    else:
        import pandas as pd

        med = pd.Series(zs).groupby(np.repeat(np.arange(c), counts)).median().to_numpy()
        d = np.abs(zs - np.repeat(med, counts))
        nz = counts > 0
        sums[nz] = np.add.reduceat(d, starts[nz])
        dev = d - np.repeat(np.divide(sums, counts, out=np.zeros(c), where=nz), counts)
        sq[nz] = np.add.reduceat(dev * dev, starts[nz])
        dsq[nz] = np.add.reduceat(d * d, starts[nz])
    means = np.divide(sums, counts, out=np.zeros(c), where=counts > 0)
    nk = counts[ok].astype(float)
    k = int(ok.sum())
    total = float(nk.sum())
    grand = float(sums[ok].sum() / total)
    ssb = float((nk * (means[ok] - grand) ** 2).sum())
    ssw = float(sq[ok].sum())
    scale = float(dsq[ok].sum())
    if ssw <= 1e-12 * scale or scale == 0:
        # e.g. two rows per level: both deviations from the median are equal, so the within
        # sum of squares is 0 up to rounding and F would be a ratio of rounding noise
        return SideTest(name, False, reason="the absolute deviations do not vary within levels (e.g. two "
                        "replicates per level): the spread test needs three or more replicates somewhere")
    f = (ssb / (k - 1)) / (ssw / (total - k))
    return SideTest(name, True, f, (k - 1, total - k), f_sf(f, k - 1, total - k))


def _mandel(fit1: Fit, fit2: Fit | None, n: int, c: int) -> SideTest:
    name = "curvature (Mandel, ISO 8466-1)"
    if fit2 is None or c < 3:
        return SideTest(name, False, reason="needs at least 3 levels of x")
    if n - 3 <= 0 or fit2.sse <= 0:
        return SideTest(name, False, reason="the quadratic leaves no residual variation to compare with")
    pg = (fit1.sse - fit2.sse) / (fit2.sse / (n - 3))
    pg = max(pg, 0.0)
    return SideTest(
        name, True, pg, (1, n - 3), f_sf(pg, 1, n - 3),
        reason="partial F for adding x²; ISO 8466-1 judges it at the 99% level", alpha=MANDEL_ALPHA,
    )


def _replicate_free(study: Study) -> tuple[SideTest, ...]:
    """Checks that need no replicates (statsmodels), on rows sorted by x. All approximate."""
    import statsmodels.api as sm
    from statsmodels.stats import diagnostic as dg

    order = np.argsort(study.x, kind="stable")
    xs, ys = study.x[order], study.y[order]
    exog = np.column_stack([np.ones_like(xs), xs])
    if study.weights is None:
        res = sm.OLS(ys, exog).fit()
    else:
        res = sm.WLS(ys, exog, weights=study.weights[order]).fit()
    out: list[SideTest] = []
    try:
        r = dg.linear_reset(res, power=3, test_type="fitted", use_f=True)
        out.append(SideTest("RESET (powers 2–3 of the fit)", True, float(r.fvalue), (float(r.df_num), float(r.df_denom)), float(r.pvalue), approximate=True))
    except Exception as exc:  # noqa: BLE001 - statsmodels raises assorted errors on tiny data
        out.append(SideTest("RESET (powers 2–3 of the fit)", False, reason=f"not computable here ({type(exc).__name__})"))
    try:
        f, p = dg.linear_rainbow(res, frac=0.5)
        out.append(SideTest("rainbow (middle half of x)", True, float(f), (), float(p), approximate=True))
    except Exception as exc:  # noqa: BLE001
        out.append(SideTest("rainbow (middle half of x)", False, reason=f"not computable here ({type(exc).__name__})"))
    try:
        t, p = dg.linear_harvey_collier(res, skip=3)
        ok = math.isfinite(float(t))
        out.append(
            SideTest("Harvey–Collier (recursive residuals in x order)", ok, float(t) if ok else None, (), float(p) if ok else None,
                     reason=None if ok else "recursive residuals are degenerate here", approximate=True)
        )
    except Exception as exc:  # noqa: BLE001
        out.append(SideTest("Harvey–Collier (recursive residuals in x order)", False, reason=f"not computable here ({type(exc).__name__})"))
    return tuple(out)


@dataclass(frozen=True, slots=True)
class CheckResult:
    """Everything ``bendwise check`` reports about the straight line on one study."""

    source: str
    """Data file name."""
    y_name: str
    """Response column."""
    x_name: str
    """Predictor column."""
    n: int
    """Rows used."""
    n_dropped: int
    """Rows dropped in cleaning (see ``cleaning``)."""
    cleaning: tuple[str, ...]
    """One line per reason rows were dropped."""
    levels: int
    """Distinct settings (replicate groups) of x."""
    replicated_levels: int
    """Levels measured more than once."""
    tolerance: str | None
    """Tolerance used to group near-equal settings (None: exact values)."""
    grouped_approximately: bool
    """True when the tolerance merged distinct values: the test is then approximate."""
    weights: str | None
    """Weights column (None: unweighted)."""
    alpha: float
    """Level of the verdict."""
    fit: Fit
    """The straight-line fit."""
    anova: tuple[AnovaRow, ...]
    """Model / residual / lack of fit / pure error / total."""
    lack_of_fit: LackOfFit
    """The lack-of-fit test (or the reason it is unavailable)."""
    level_rows: tuple[LevelRow, ...]
    """Per-level summary."""
    mandel: SideTest
    """Mandel's curvature test."""
    spread: SideTest
    """Brown–Forsythe test of equal spread across levels."""
    replicate_free: tuple[SideTest, ...]
    """RESET, rainbow, Harvey–Collier when no level is replicated (approximate)."""
    criteria: Criteria
    """Log-likelihood and information criteria of the line."""
    verdict: str
    """The answer in words."""
    lack_found: bool | None
    """True when lack of fit is significant at alpha; None when untestable."""

    def as_json(self) -> dict:
        """Stable JSON shape (names documented in the README)."""
        return {
            "source": self.source,
            "response": self.y_name,
            "predictor": self.x_name,
            "n": self.n,
            "n_dropped": self.n_dropped,
            "cleaning": list(self.cleaning),
            "levels": self.levels,
            "replicated_levels": self.replicated_levels,
            "tolerance": self.tolerance,
            "grouped_approximately": self.grouped_approximately,
            "weights": self.weights,
            "alpha": self.alpha,
            "coefficients": {
                c.name: {"estimate": c.estimate, "se": c.se, "t": c.t, "p": c.p, "low": c.low, "high": c.high}
                for c in self.fit.coefficients
            },
            "sigma": self.fit.sigma,
            "r2": self.fit.r2,
            "r2_adj": self.fit.r2_adj,
            "sse": self.fit.sse,
            "df_resid": self.fit.df_resid,
            "anova": [
                {"source": r.source, "df": r.df, "ss": r.ss, "ms": r.ms, "f": r.f, "p": r.p} for r in self.anova
            ],
            "lack_of_fit": self.lack_of_fit.as_json(),
            "lack_found": self.lack_found,
            "verdict": self.verdict,
            "per_level": [
                {"level": r.level, "x": r.x, "n": r.n, "mean": r.mean, "sd": r.sd, "fitted": r.fitted, "residual": r.residual}
                for r in self.level_rows
            ],
            "mandel": self.mandel.as_json(),
            "spread": self.spread.as_json(),
            "replicate_free": [t.as_json() for t in self.replicate_free],
            "criteria": self.criteria.as_json(),
        }


def _line_and_quadratic(study: Study) -> tuple[GroupStats, Fit, Fit | None, LackOfFit]:
    """Fit the line (and quadratic) and test lack of fit, exact or near-replicate."""
    w = study.weights
    wkey = study.weights_name
    lv = study.x_level_values
    z, _ = study.transformed(_identity())
    zkey = ("z", _identity().key())
    if not study.approximate_groups:
        stats = study.group_stats(z, zkey, weights=w, weights_key=wkey)
        line = poly_design(lv, 1, name=study.x_name)
        fit1 = fit_design(stats, line)
        fit2 = fit_design(stats, poly_design(lv, 2, name=study.x_name)) if study.c >= 3 else None
        lof = lack_of_fit(stats, fit1, approximate=w is not None and False)
        return stats, fit1, fit2, lof
    # Near replicates: x varies inside a group, so powers of x are within-varying bases.
    lo, hi = study.x_min, study.x_max
    centre, scale = (lo + hi) / 2, (hi - lo) / 2

    def build() -> np.ndarray:
        u = (study.x - centre) / scale
        return np.column_stack([u, u * u])

    bkey = ("u", centre, scale, 2)
    bases = study.base_rows(bkey, build)
    stats = study.group_stats(z, zkey, weights=w, weights_key=wkey, bases=bases, bases_key=bkey)
    line = poly_design(lv, 1, name=study.x_name, centre=centre, scale=scale, base_offset=0)
    fit1 = fit_design(stats, line)
    fit2 = fit_design(stats, poly_design(lv, 2, name=study.x_name, centre=centre, scale=scale, base_offset=0)) if study.c >= 3 else None
    # Richer model: one mean per group plus the within-group slope on x.
    indicators = tuple(Column((np.arange(stats.c) == g).astype(float)) for g in range(stats.c))
    full = Design(indicators + (Column(np.ones(stats.c), 0),), tuple(f"g{g}" for g in range(stats.c + 1)),
                  np.eye(stats.c + 1, dtype=np.longdouble))
    full_fit = fit_design(stats, full)
    if stats.c <= fit1.rank:
        lof = LackOfFit(False, f"the line saturates the {stats.c} groups; use a smaller tolerance", "near-replicate (approximate)")
    else:
        lof = nested_f(fit1.sse, fit1.df_resid, full_fit.sse, full_fit.df_resid, "near-replicate (approximate)", True)
    return stats, fit1, fit2, lof


def check(study: Study, *, alpha: float = 0.05) -> CheckResult:
    """Test the straight line y ~ x on the study: the lack-of-fit split and supporting checks."""
    if not 0 < alpha < 1:
        from .errors import UsageError

        raise UsageError(f"alpha {alpha!r} must lie strictly between 0 and 1, e.g. 0.05")
    stats, fit1, fit2, lof = _line_and_quadratic(study)
    n, c = study.n, study.c
    p = fit1.rank
    ss_tot = fit1.ss_total
    ss_model = max(ss_tot - fit1.sse, 0.0)
    df_model = p - 1
    ms_resid = fit1.sse / fit1.df_resid if fit1.df_resid > 0 else None
    f_model = (ss_model / df_model) / ms_resid if ms_resid and df_model > 0 else None
    rows = [
        AnovaRow("model", df_model, ss_model, ss_model / df_model if df_model else None, f_model,
                 f_sf(f_model, df_model, fit1.df_resid) if f_model is not None else None),
        AnovaRow("residual", fit1.df_resid, fit1.sse, ms_resid, None, None),
    ]
    if lof.testable:
        ms_lack = lof.ss_lack / lof.df_lack  # type: ignore[operator]
        ms_pure = lof.ss_pure / lof.df_pure  # type: ignore[operator]
        rows.append(AnovaRow("lack of fit", lof.df_lack, lof.ss_lack, ms_lack, lof.f, lof.p))  # type: ignore[arg-type]
        rows.append(AnovaRow("pure error", lof.df_pure, lof.ss_pure, ms_pure, None, None))  # type: ignore[arg-type]
    rows.append(AnovaRow("total", n - 1, ss_tot, None, None, None))

    centre_x, scale_x = (study.x_min + study.x_max) / 2, (study.x_max - study.x_min) / 2
    counts = stats.count
    sd = np.sqrt(np.where(counts > 1, stats.ss / np.maximum(counts - 1, 1), np.nan))
    fitted = np.asarray(fit1.group_fitted)
    if study.approximate_groups:
        xbar = stats.base_mean[:, 0] * scale_x + centre_x
    else:
        xbar = study.x_level_values
    level_rows = tuple(
        LevelRow(study.x_level_labels[g], float(xbar[g]), int(counts[g]), float(stats.mean[g]),
                 None if counts[g] < 2 else float(sd[g]), float(fitted[g]), float(stats.mean[g] - fitted[g]))
        for g in range(stats.c)
    )
    replicated = int((counts > 1).sum())
    mandel = _mandel(fit1, fit2, n, c)
    z, _ = study.transformed(_identity())
    spread = study.spread_by_level(z, (_identity().key(), None), None)
    exact_replicates = study.exact_replicates()
    if not exact_replicates and n >= 6 and study.has_rows:
        free = _replicate_free(study)
    elif not exact_replicates and not study.has_rows:
        free = (SideTest("replicate-free checks", False, reason="need the rows in memory; use --engine memory"),)
    else:
        free = ()
    crit = criteria_from(fit1.loglik, p + 1, n)
    lack_found = None if not lof.testable else bool(lof.p < alpha)  # type: ignore[operator]
    verdict = _verdict(lof, alpha, study)
    return CheckResult(
        source=study.source,
        y_name=study.y_name,
        x_name=study.x_name,
        n=n,
        n_dropped=study.report.n_dropped,
        cleaning=tuple(study.report.lines()),
        levels=c,
        replicated_levels=replicated,
        tolerance=study.tolerance_text,
        grouped_approximately=study.approximate_groups,
        weights=study.weights_name,
        alpha=alpha,
        fit=fit1,
        anova=tuple(rows),
        lack_of_fit=lof,
        level_rows=level_rows,
        mandel=mandel,
        spread=spread,
        replicate_free=free,
        criteria=crit,
        verdict=verdict,
        lack_found=lack_found,
    )


def _identity():
    from .transforms import IDENTITY

    return IDENTITY


def _verdict(lof: LackOfFit, alpha: float, study: Study) -> str:
    approx = " (approximate: settings were grouped by a tolerance)" if lof.approximate else ""
    if not lof.testable:
        return f"The lack-of-fit test cannot be run: {lof.reason}."
    stat = f"F = {lof.f:.4g} on {lof.df_lack} and {lof.df_pure} df, p = {_p(lof.p)}"
    if lof.p < alpha:  # type: ignore[operator]
        return (
            f"NOT A STRAIGHT LINE: the level means depart from the line by more than the replicates "
            f"scatter ({stat} < α = {alpha:g}){approx}. Try a remedy: bendwise grow."
        )
    return (
        f"LINE ADEQUATE: no evidence of lack of fit at α = {alpha:g} ({stat}){approx}. "
        "This is absence of evidence, not proof: check the power with bendwise plan."
    )


def _p(p: float | None) -> str:
    if p is None:
        return "—"
    return "<1e-12" if p < 1e-12 else f"{p:.3g}"
