"""Score one candidate model (a ModelSpec) on a Study from cached group statistics.

Every node gets: its fit; lack of fit of the shape in x (the node against the same model
with x as a factor) and the classical pure-error test (grouping by every predictor variable);
the log-likelihood of the ORIGINAL y (Jacobian added) so AIC/AICc/BIC compare across
response transforms; PRESS and the largest studentized residual; spread across levels;
the largest departure of the fitted curve from the straight line; warnings.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from ..checks.lack_of_fit import lack_of_fit, nested_f
from ..checks.results import LackOfFit
from ..errors import BendwiseError, UsageError
from ..stats.design import power_label
from ..stats.linalg import Column, Design, fit_design, fit_rss_rank, poly_map
from ..stats.results import Criteria, Fit, SideTest, criteria_from
from ..stats.rows import NoRows
from ..stats.spread import spread_test
from ..stats.study import Study
from ..stats.transforms import Transform
from .model_spec import ModelSpec

if TYPE_CHECKING:
    from ..stats.groups import GroupStats

__all__ = [
    "Term", "NodeScore", "score_spec", "ROW_PASS_LIMIT", "MAX_FACTOR_LEVELS", "predict_terms",
]

ROW_PASS_LIMIT = 200_000
"""Above this many rows, per-row diagnostics that have no group-level shortcut are skipped."""
MAX_FACTOR_LEVELS = 2000
"""Largest number of x levels for the x-as-factor comparison with covariates."""


@dataclass(frozen=True, slots=True)
class Term:
    """One raw-basis term of a node, enough to rebuild predictions without formulas."""

    kind: str
    """'const', 'tpow' (power of the transformed predictor), 'cat' (dummy), 'num' (covariate),
    'tcat' (t × dummy), 'tnum' (t × covariate)."""
    power: int = 0
    """Power of t for 'tpow' (1 for interactions)."""
    covariate: str | None = None
    """Covariate name for cat/num/tcat/tnum."""
    level: str | None = None
    """Category for cat/tcat."""

    def as_json(self) -> dict:
        """JSON description."""
        return {"kind": self.kind, "power": self.power, "covariate": self.covariate, "level": self.level}


@dataclass(frozen=True, slots=True)
class NodeScore:
    """All scores of one candidate model on one study."""

    spec: ModelSpec
    """The candidate."""
    terms: tuple[Term, ...]
    """Raw-basis terms, in the order of ``fit.coefficients``."""
    fit: Fit
    """Least-squares fit on the transformed (and weighted) scale."""
    lack_of_fit: LackOfFit
    """Shape in x: the node against itself with x as a factor."""
    lack_of_fit_pure: LackOfFit
    """Classical pure-error test grouping by every predictor variable of the node."""
    criteria: Criteria
    """Criteria on the original y scale."""
    press: float | None
    """Σ (y − leave-one-out prediction)² on the original y scale; None with ``press_note``."""
    press_note: str | None
    """Why PRESS is missing or how it was computed."""
    max_studentized: float | None
    """Largest |internally studentized residual| (fitted scale)."""
    spread: SideTest
    """Brown–Forsythe across x levels on the node's (weighted) residuals."""
    max_deviation: float | None
    """Largest |fitted curve − straight line| over the x levels, in y units (single predictor)."""
    deviation_note: str | None
    """Why ``max_deviation`` is missing, or None."""
    warnings: tuple[str, ...]
    """Leverage, back-transform, rank and approximation warnings."""
    centre: float
    """Centre of the transformed predictor in the working basis."""
    scale: float
    """Scale of the transformed predictor in the working basis."""
    level_x: tuple[float, ...] = field(default=(), repr=False)
    """x of each level (for charts)."""
    level_fitted_y: tuple[float, ...] = field(default=(), repr=False)
    """Fitted curve at each level on the original y scale (median back-transform)."""

    @property
    def k(self) -> int:
        """Estimated parameters counted by the criteria."""
        return self.criteria.k


# ----- cached pieces --------------------------------------------------------------------

def _response(study: Study, t: Transform) -> tuple[np.ndarray | None, float]:
    return study.transformed(t)


def level_means(study: Study, z: np.ndarray | None, key) -> np.ndarray:
    """Unweighted mean of z per x level."""
    return study.group_stats(z, key).mean


def _weights(study: Study, spec: ModelSpec) -> tuple[np.ndarray | None, object, np.ndarray | None]:
    rule = spec.weights
    if rule is None:
        return study.weights, study.weights_name, None
    key = ("w", spec.response.key(), rule.theta, study.weights_name)
    hit = study.cache_get(key)
    if hit is None:
        from ..stats.variance import level_weights

        z, _ = _response(study, spec.response)
        try:
            w_level = level_weights(level_means(study, z, ("z", spec.response.key())), rule.theta)
        except ValueError as exc:
            raise UsageError(f"power-of-mean weights are not possible here: {exc}") from None
        hit = study.cache_put(key, (study.level_weight_rows(w_level), key, w_level))
    return hit


def _cat_names(study: Study) -> tuple[str, ...]:
    return tuple(c.name for c in study.covariates if c.kind == "categorical")


def _num_names(study: Study) -> tuple[str, ...]:
    return tuple(c.name for c in study.covariates if c.kind == "numeric")


def t_range(study: Study, predictor: Transform) -> tuple[float, float]:
    """Centre and half-range of the transformed predictor (fixed per transform)."""
    ends = np.asarray(predictor.forward(np.array([study.x_min, study.x_max], dtype=float)), dtype=float)
    lo, hi = float(ends.min()), float(ends.max())
    scale = (hi - lo) / 2 or 1.0
    return (lo + hi) / 2, scale


@dataclass(frozen=True, slots=True, eq=False)
class _Frame:
    z: np.ndarray | None
    jac: float
    w: np.ndarray | None
    wkey: object
    w_level: np.ndarray | None
    by: tuple[str, ...]
    nums: tuple[str, ...]
    bases: np.ndarray | None
    bases_key: object
    centre: float
    scale: float
    approximate: bool


def _frame(study: Study, spec: ModelSpec) -> _Frame:
    """The node's response rows, weights, grouping and bases (cached on the study per spec: the
    scoring, the moves and the searches ask for it several times per node)."""
    key = ("frame", spec)
    hit = study.cache_get(key)
    if hit is None:
        hit = study.cache_put(key, _make_frame(study, spec))
    return hit


def _make_frame(study: Study, spec: ModelSpec) -> _Frame:
    z, jac = _response(study, spec.response)
    w, wkey, w_level = _weights(study, spec)
    by = _cat_names(study)
    nums = _num_names(study)
    centre, scale = t_range(study, spec.predictor)
    bkey: tuple = ("nums", nums)
    if study.approximate_groups:
        bkey = ("nums", nums, spec.predictor.key(), spec.degree, centre, scale)

    def build() -> np.ndarray | None:
        cols = [study.covariate(nm).values for nm in nums]
        if study.approximate_groups:
            u = (np.asarray(spec.predictor.forward(study.x), dtype=float) - centre) / scale
            cols += [u**k for k in range(1, spec.degree + 1)]
        return np.column_stack(cols) if cols else None

    bases = study.base_rows(bkey, build)
    approx = study.approximate_groups or spec.weights is not None
    return _Frame(z, jac, w, wkey, w_level, by, nums, bases, bkey if bases is not None else None, centre, scale,
                  approx)


def _stats(study: Study, spec: ModelSpec, fr: _Frame, extremes: bool = False):
    return study.group_stats(
        fr.z, ("z", spec.response.key()), by=fr.by, weights=fr.w, weights_key=fr.wkey,
        bases=fr.bases, bases_key=fr.bases_key, extremes=extremes, level_weights=fr.w_level, transform=spec.response,
    )


# ----- designs --------------------------------------------------------------------------

def build_design(study: Study, spec: ModelSpec, fr: _Frame) -> tuple[Design, tuple[Term, ...]]:
    """Working-basis design for ``spec`` on the groups of ``fr`` and its raw terms."""
    codes, c = study.group_codes(fr.by)
    xg = study.group_parent(fr.by)
    t_levels = np.asarray(spec.predictor.forward(study.x_level_values), dtype=float)
    u_g = (t_levels[xg] - fr.centre) / fr.scale
    ones = np.ones(c)
    cols: list[Column] = [Column(ones)]
    names = ["intercept"]
    terms = [Term("const")]
    tname = spec.predictor.short(study.x_name)
    tpar = f"({tname})" if not spec.predictor.is_identity else tname
    tol = study.approximate_groups
    for k in range(1, spec.degree + 1):
        cols.append(Column(ones, len(fr.nums) + k - 1) if tol else Column(u_g**k))
        names.append(power_label(tpar, k) if k > 1 else tname)
        terms.append(Term("tpow", k))
    main_index: dict[tuple[str, str | None], int] = {}
    for cov_name in spec.covariates:
        cov = study.covariate(cov_name)
        if cov.kind == "categorical":
            cat_g = study.group_category(fr.by, cov_name)
            for j in range(1, len(cov.levels)):
                main_index[(cov_name, cov.levels[j])] = len(cols)
                cols.append(Column((cat_g == j).astype(float)))
                names.append(f"{cov_name}[{cov.levels[j]}]")
                terms.append(Term("cat", 0, cov_name, cov.levels[j]))
        else:
            main_index[(cov_name, None)] = len(cols)
            cols.append(Column(ones, fr.nums.index(cov_name)))
            names.append(cov_name)
            terms.append(Term("num", 0, cov_name))
    inter: list[tuple[int, int]] = []
    for cov_name in spec.interactions:
        cov = study.covariate(cov_name)
        if tol:
            raise UsageError("interactions with x are not available when settings are grouped by a tolerance")
        if cov.kind == "categorical":
            cat_g = study.group_category(fr.by, cov_name)
            for j in range(1, len(cov.levels)):
                inter.append((len(cols), main_index[(cov_name, cov.levels[j])]))
                cols.append(Column(u_g * (cat_g == j)))
                names.append(f"{tname}:{cov_name}[{cov.levels[j]}]")
                terms.append(Term("tcat", 1, cov_name, cov.levels[j]))
        else:
            inter.append((len(cols), main_index[(cov_name, None)]))
            cols.append(Column(u_g, fr.nums.index(cov_name)))
            names.append(f"{tname}:{cov_name}")
            terms.append(Term("tnum", 1, cov_name))
    p = len(cols)
    to_raw = np.eye(p, dtype=np.longdouble)
    to_raw[: spec.degree + 1, : spec.degree + 1] = poly_map(spec.degree, fr.centre, fr.scale)
    for j_int, j_main in inter:
        to_raw[j_int, j_int] = np.longdouble(1) / np.longdouble(fr.scale)
        to_raw[j_main, j_int] = -np.longdouble(fr.centre) / np.longdouble(fr.scale)
    return Design(tuple(cols), tuple(names), to_raw, True), tuple(terms)


def _factor_design(study: Study, spec: ModelSpec, fr: _Frame) -> Design:
    """The node with every function of x replaced by x as a factor."""
    codes, c = study.group_codes(fr.by)
    xg = study.group_parent(fr.by)
    cols: list[Column] = []
    ind = [(xg == lvl).astype(float) for lvl in range(study.c)]
    cols += [Column(v) for v in ind]
    if study.approximate_groups:
        cols += [Column(np.ones(c), len(fr.nums) + k - 1) for k in range(1, spec.degree + 1)]
    for cov_name in spec.covariates:
        cov = study.covariate(cov_name)
        if cov.kind == "categorical":
            cat_g = study.group_category(fr.by, cov_name)
            cols += [Column((cat_g == j).astype(float)) for j in range(1, len(cov.levels))]
        else:
            cols.append(Column(np.ones(c), fr.nums.index(cov_name)))
    for cov_name in spec.interactions:
        cov = study.covariate(cov_name)
        if cov.kind == "categorical":
            cat_g = study.group_category(fr.by, cov_name)
            for j in range(1, len(cov.levels)):
                cols += [Column(v * (cat_g == j)) for v in ind]
        else:
            cols += [Column(v, fr.nums.index(cov_name)) for v in ind]
    p = len(cols)
    return Design(tuple(cols), tuple(f"c{i}" for i in range(p)), np.eye(p, dtype=np.longdouble), True)


def predict_terms(terms: tuple[Term, ...], beta: np.ndarray, t: np.ndarray,
                  covs: Mapping[str, np.ndarray]) -> np.ndarray:
    """Fitted values on the transformed scale from raw terms (no formulas evaluated).

    ``t`` is the transformed predictor; ``covs`` maps each numeric covariate to values and each
    categorical covariate to its category labels (strings).
    """
    out = np.zeros_like(t, dtype=float)
    for term, b in zip(terms, beta, strict=True):
        if term.kind == "const":
            v = np.ones_like(t, dtype=float)
        elif term.kind == "tpow":
            v = t**term.power
        elif term.kind == "cat":
            v = (np.asarray(covs[str(term.covariate)]) == term.level).astype(float)
        elif term.kind == "num":
            v = np.asarray(covs[str(term.covariate)]).astype(float)
        elif term.kind == "tcat":
            v = t * (np.asarray(covs[str(term.covariate)]) == term.level)
        elif term.kind == "tnum":
            v = t * np.asarray(covs[str(term.covariate)]).astype(float)
        else:
            raise ValueError(term.kind)
        out = out + b * v
    return out


# ----- scoring --------------------------------------------------------------------------

def score_spec(study: Study, spec: ModelSpec, *, root_line: np.ndarray | None = None) -> NodeScore:
    """Score ``spec`` on ``study``. ``root_line`` is the straight line's fitted y per x level."""
    problem = study.domain_problem(spec.predictor, "x")
    if problem:
        raise UsageError(problem)
    fr = _frame(study, spec)
    big = study.n > ROW_PASS_LIMIT or isinstance(study.rows(), NoRows)
    stats = _stats(study, spec, fr, extremes=big)
    design, terms = build_design(study, spec, fr)
    fit = fit_design(stats, design)
    warnings: list[str] = []
    if fit.aliased:
        warnings.append(f"collinear terms dropped: {', '.join(fit.aliased)}")
    lof_shape, lof_pure = _lack_of_fit_pair(study, spec, fr, stats, fit)
    loglik_y = fit.loglik + fr.jac
    k = fit.rank + 1 + spec.extra_params
    crit = criteria_from(loglik_y, k, study.n)
    if not math.isfinite(loglik_y):
        warnings.append("fits every row exactly (residual sum of squares 0 up to rounding): the likelihood "
                        "is unbounded, so AIC, AICc and BIC are undefined")
    y_levels = _level_curve(study, spec, terms, fit, warnings)
    max_dev, dev_note = _departure(spec, root_line, y_levels)
    press, press_note, rmax, spread = _row_diagnostics(study, spec, fr, stats, design, fit, big)
    warnings += _design_warnings(study, spec, stats, fit)
    return NodeScore(
        spec=spec, terms=terms, fit=fit, lack_of_fit=lof_shape, lack_of_fit_pure=lof_pure, criteria=crit,
        press=press, press_note=press_note, max_studentized=rmax, spread=spread,
        max_deviation=max_dev, deviation_note=dev_note, warnings=tuple(warnings),
        centre=fr.centre, scale=fr.scale,
        level_x=tuple(float(v) for v in study.x_level_values),
        level_fitted_y=tuple(float(v) for v in y_levels),
    )


def _lack_of_fit_pair(study: Study, spec: ModelSpec, fr: _Frame, stats: GroupStats,
                      fit: Fit) -> tuple[LackOfFit, LackOfFit]:
    """The node's shape-in-x test (x as a factor) and the classical pure-error test (grouping by x
    and the covariates), each with its reason when it cannot run."""
    if not spec.covariates and not study.approximate_groups:
        sx = study.group_stats(fr.z, ("z", spec.response.key()), weights=fr.w, weights_key=fr.wkey,
                               level_weights=fr.w_level)
        lof_pure = lack_of_fit(sx, fit, approximate=fr.approximate)
        lof_shape = LackOfFit(lof_pure.testable, lof_pure.reason, "shape in x (x as a factor)", lof_pure.ss_lack,
                              lof_pure.ss_pure, lof_pure.df_lack, lof_pure.df_pure, lof_pure.f, lof_pure.p,
                              lof_pure.approximate)
    else:
        lof_shape = _shape_test(study, spec, fr, stats, fit)
        if study.approximate_groups:
            lof_pure = LackOfFit(False, "settings were grouped by a tolerance: there are no exact replicates", "pure error")
        else:
            try:
                _, c_fine = study.group_codes(tuple(spec.covariates))
            except BendwiseError as exc:
                c_fine = -1
                lof_pure = LackOfFit(False, str(exc), "pure error")
            if 0 <= c_fine < study.n:
                sp = study.group_stats(fr.z, ("z", spec.response.key()), by=tuple(spec.covariates), weights=fr.w,
                                       weights_key=fr.wkey, level_weights=fr.w_level)
                lof_pure = lack_of_fit(sp, fit, approximate=fr.approximate)
            if c_fine == study.n:
                lof_pure = LackOfFit(False, "no combination of the predictor variables is repeated "
                                     f"({', '.join((study.x_name, *spec.covariates))}); the shape-in-x test stands in",
                                     "pure error")

    return lof_shape, lof_pure


def _level_curve(study: Study, spec: ModelSpec, terms: Any, fit: Fit, warnings: list[str]) -> np.ndarray:
    """Fitted y per x level on the original scale (median back-transform), covariates at their
    reference category or mean; a warning when some levels cannot be back-transformed."""
    t_levels = np.asarray(spec.predictor.forward(study.x_level_values), dtype=float)
    beta = np.array([c.estimate for c in fit.coefficients])
    covs_ref: dict[str, np.ndarray] = {}
    for cov_name in spec.covariates:
        cov = study.covariate(cov_name)
        covs_ref[cov_name] = (np.full(study.c, cov.levels[0]) if cov.kind == "categorical"
                              else np.full(study.c, study.covariate_mean(cov_name)))
    with np.errstate(all="ignore"):
        z_levels = predict_terms(terms, np.nan_to_num(beta), t_levels, covs_ref)
        y_levels = np.asarray(spec.response.inverse(z_levels), dtype=float)
    if np.isnan(y_levels).any():
        warnings.append(
            f"fitted values at {int(np.isnan(y_levels).sum())} level(s) fall outside the range of "
            f"{spec.response.short('y')}: they cannot be back-transformed"
        )
    return y_levels


def _departure(spec: ModelSpec, root_line: np.ndarray | None, y_levels: np.ndarray) -> tuple[float | None, str | None]:
    """Largest distance between this node's level curve and the straight line's, or why there is none."""
    if spec.covariates:
        return None, "defined for a single predictor; this node has covariates"
    if root_line is None:
        return 0.0, None
    d = np.abs(y_levels - root_line)
    return (float(np.nanmax(d)), None) if np.isfinite(d).any() else (None, "curve undefined")


def _design_warnings(study: Study, spec: ModelSpec, stats: GroupStats, fit: Fit) -> list[str]:
    """High leverage, high polynomial degree, estimated weights and tolerance-formed levels."""
    warnings: list[str] = []
    if fit.group_leverage:
        wg = stats.wsum / stats.count
        hmax = float(np.max(np.asarray(fit.group_leverage) * wg))
        if hmax > max(0.5, 3.0 * fit.rank / study.n):
            warnings.append(f"high leverage: a single row carries up to {hmax:.2f} of its own fit")
    if spec.degree >= 3:
        warnings.append(f"polynomial of degree {spec.degree}: trust it between the levels only, never beyond")
    if spec.weights is not None:
        warnings.append("weights estimated from the same replicates: tests are approximate")
    if study.approximate_groups:
        warnings.append("levels formed by a tolerance: lack of fit is approximate")
    return warnings


def _shape_test(study: Study, spec: ModelSpec, fr: _Frame, stats, fit: Fit) -> LackOfFit:
    kind = "shape in x (x as a factor)"
    if fit.aliased:
        return LackOfFit(False, f"the model cannot be fitted in full ({', '.join(fit.aliased)} is collinear with "
                         "the other terms): its lack of fit is not a test of the model named", kind)
    if study.c == study.n:
        return LackOfFit(False, "no setting of x was measured more than once: x as a factor saturates the data", kind)
    if study.c > MAX_FACTOR_LEVELS:
        return LackOfFit(False, f"x has {study.c} levels (more than {MAX_FACTOR_LEVELS}) for the x-as-factor "
                         "comparison; group settings with --tolerance", kind)
    key = ("factorfit", spec.response.key(), fr.wkey, spec.covariates, spec.interactions,
           (spec.predictor.key(), spec.degree) if study.approximate_groups else None)
    full = study.cache_get(key)
    if full is None:
        full = study.cache_put(key, fit_rss_rank(stats, _factor_design(study, spec, fr)))
    if full.rank <= fit.rank:
        return LackOfFit(False, f"the model already spends as many parameters on x as there are levels "
                         f"({study.c}): nothing is left to test", kind)
    return nested_f(fit.sse, fit.df_resid, full.sse, full.df_resid, kind, fr.approximate)


def _row_design(study: Study, design: Design, fr: _Frame) -> np.ndarray:
    codes, _ = study.group_codes(fr.by)
    cols = []
    for col in design.columns:
        v = col.group[codes]
        if col.base is not None:
            v = v * fr.bases[:, col.base]  # type: ignore[index]
        cols.append(v)
    return np.column_stack(cols)


def _row_diagnostics(study, spec, fr, stats, design, fit, big):
    """PRESS (original y scale), largest studentized residual and spread on residuals.

    Long because the three share one pass over the rows (leverages and residuals), which is the
    expensive part on a large table."""
    name = "equal spread of residuals (Brown–Forsythe)"
    from ..stats.linalg import _mean_rows, solve_stacked  # noqa: F401 - internal reuse

    sigma = fit.sigma
    if not math.isfinite(sigma) or sigma <= 0:
        return None, "no residual degrees of freedom", None, SideTest(name, False, reason="no residual variation")
    # working-basis coefficients and unscaled covariance from the raw ones
    to_raw = design.to_raw.astype(float)
    beta_raw = np.array([0.0 if c.name in fit.aliased else c.estimate for c in fit.coefficients])
    beta_w = np.linalg.solve(to_raw, beta_raw)
    cov_raw = np.array(fit.cov)
    inv = np.linalg.inv(to_raw)
    cov_w = inv @ cov_raw @ inv.T / sigma**2
    if not big:
        xr = _row_design(study, design, fr)
        zhat = xr @ beta_w
        w = np.ones(study.n) if fr.w is None else fr.w
        h = w * np.einsum("ij,jk,ik->i", xr, cov_w, xr)
        e = fr.z - zhat
        one_h = 1.0 - h
        with np.errstate(all="ignore"):
            r = np.sqrt(w) * e / (sigma * np.sqrt(np.clip(one_h, 1e-300, None)))
            rmax = float(np.nanmax(np.abs(r)))
            if (one_h <= 1e-10).any():
                press, note = None, "a row is fitted exactly (leverage 1): leave-one-out is undefined"
            else:
                loo = spec.response.inverse(fr.z - e / one_h)
                if np.isnan(loo).any():
                    press, note = None, "some leave-one-out predictions cannot be back-transformed"
                else:
                    press, note = float(np.sum((study.y - loo) ** 2)), None
        spread = spread_test(np.sqrt(w) * e, study.x_codes, study.c)
        spread = SideTest(name, spread.testable, spread.statistic, spread.df, spread.p, spread.reason,
                          method=spread.method)
        return press, note, rmax, spread
    # large tables: group-level shortcuts where exact, else a stated omission
    group_only = all(col.base is None for col in design.columns) and study.weights_name is None
    rmax = None
    press = None
    note = f"skipped above {ROW_PASS_LIMIT:,} rows for this model (needs a pass over the rows)"
    if group_only:
        fitted = np.asarray(fit.group_fitted)
        wg = stats.wsum / stats.count
        hg = wg * np.asarray(fit.group_leverage)
        emax = np.maximum(np.abs(stats.zmax - fitted), np.abs(stats.zmin - fitted))
        rmax = float(np.max(np.sqrt(wg) * emax / (sigma * np.sqrt(np.clip(1 - hg, 1e-300, None)))))
        if spec.response.is_identity:
            if (1 - hg <= 1e-10).any():
                note = "a row is fitted exactly (leverage 1): leave-one-out is undefined"
            else:
                resid = stats.mean - fitted
                ss_unw = stats.ss / wg + stats.count * resid**2
                press, note = float(np.sum(ss_unw / (1 - hg) ** 2)), None
    sp = study.spread_by_level(fr.z, (spec.response.key(), fr.wkey), fr.w, transform=spec.response,
                               level_weights=fr.w_level)
    reason = (None if not (spec.covariates or study.approximate_groups)
              else "computed on the response, not the residuals (no row pass here)")
    # the study names its test (Brown–Forsythe from rows, Bartlett from level variances in SQL)
    name = sp.name.replace("equal spread (", "equal spread of residuals (")
    spread = SideTest(name, sp.testable, sp.statistic, sp.df, sp.p, "; ".join(r for r in (sp.reason, reason) if r) or None,
                      method=sp.method)
    return press, note, rmax, spread




def model_frame(study: Study, spec: ModelSpec) -> _Frame:
    """The grouping and within-group bases of ``spec``'s design on ``study`` (for the moves)."""
    return _frame(study, spec)
