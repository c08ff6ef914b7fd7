"""Predictions from a handed-on model: the mean response with confidence and prediction intervals.

The model lives on the fitted scale z = g(y). On that scale ẑ₀ = x₀′β̂ with
Var(ẑ₀) = x₀′ V x₀ (V the coefficient covariance) and a new observation adds σ²/w₀. On the
original scale the median is g⁻¹(ẑ₀); the mean is Duan's smearing estimate
Ê[y | x₀] = mean_i g⁻¹(ẑ₀ + ê_i/√w₀) over the training residuals ê_i = √w_i (z_i − ẑ_i)
(Duan, JASA 78:605, 1983). Interval ends are mapped through g⁻¹ (monotone), so the
prediction interval keeps its coverage and the confidence interval becomes one for the
median. Rows are rebuilt from the spec's raw terms (``predict_terms``): no formula is evaluated.

No number is given where the model gives none: where ẑ₀ lies outside the values g can take
(past the pole of 1/y, below 0 for √y) the row's original-scale numbers are null and its
``flag`` says why; where a back-transformed value over- or underflows floating point (e^ẑ far
outside the data) likewise — never a 0 or an infinity passed off as a result.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from ..errors import DataError, UsageError
from ..read.columns import numeric_column, resolve_column
from ..stats.dist import t_ppf
from ..stats.transforms import Transform
from ..tree.scoring import Term, predict_terms
from .specfile import HandedModel

if TYPE_CHECKING:
    import pandas as pd

__all__ = [
    "ForwardPrediction",
    "NewInputs",
    "FLAGS",
    "back_interval",
    "check_level",
    "in_image",
    "lost_to_range",
    "new_inputs",
    "predict_forward",
    "term_matrix",
    "weight_at",
]

SMEAR_BLOCK = 4_000_000
"""Largest (rows × residuals) block evaluated at once while smearing."""


def check_level(level: float) -> float:
    """A confidence level strictly between 0 and 1."""
    if not (isinstance(level, (int, float)) and 0 < level < 1):
        raise UsageError(f"level {level!r} must lie strictly between 0 and 1, e.g. 0.95")
    return float(level)


@dataclass(frozen=True, slots=True)
class OverCategories:
    """A categorical covariate averaged over its categories with equal weight: the design row is
    the mean of the rows at each category, so predictions follow the average curve over, say, the
    days of the calibration. The interval is that of the average curve; a new day's own shift is
    not in it."""

    levels: tuple[str, ...]


def term_matrix(terms: tuple[Term, ...], t: np.ndarray, covs: dict[str, Any]) -> np.ndarray:
    """Design rows (len(t) × p) of the raw terms; ``X @ beta`` equals :func:`predict_terms`.
    A covariate given as :class:`OverCategories` gets the mean of the rows at each category."""
    spread = {k: v for k, v in covs.items() if isinstance(v, OverCategories)}
    if spread:
        import itertools

        names = list(spread)
        total = None
        combos = list(itertools.product(*(spread[k].levels for k in names)))
        for combo in combos:
            fixed = dict(covs)
            fixed.update({k: np.full(t.shape[0], lev, dtype=object) for k, lev in zip(names, combo, strict=True)})
            part = term_matrix(terms, t, fixed)
            total = part if total is None else total + part
        assert total is not None
        return total / len(combos)
    p = len(terms)
    cols = []
    for j in range(p):
        unit = np.zeros(p)
        unit[j] = 1.0
        cols.append(predict_terms(terms, unit, t, covs))
    return np.column_stack(cols) if cols else np.zeros((t.shape[0], 0))


def weight_at(model: HandedModel, zhat: np.ndarray, user_w: np.ndarray | None) -> np.ndarray:
    """Weight of a new observation: |ẑ|^(−2θ)/G for power-of-mean weights, times user weights.

    At fitting time the weights used each level's mean; here the fitted value stands in for
    the unknown mean (an approximation, as the weights themselves were estimated).
    """
    w = np.ones_like(zhat, dtype=float)
    if model.weight_theta is not None:
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            w = np.abs(zhat) ** (-2.0 * model.weight_theta) / model.weight_normaliser
    if user_w is not None:
        w = w * user_w
    return w


FLAGS = ("no back-transform", "overflow", "underflow", "no smearing mean")
"""Values of a row's ``flag``: the first three leave every original-scale number of the row null."""


def in_image(tr: Transform, z: np.ndarray, y_sign: int = 1) -> np.ndarray:
    """True where g⁻¹(z) is defined: z inside the image of g over the data's y (an edge counts
    when y is finite there, e.g. z = 0 for √y; never the pole of 1/y)."""
    z = np.asarray(z, dtype=float)
    z_lo, z_hi, y_lo, y_hi = _z_limits(tr, y_sign)
    above = (z >= z_lo) if math.isfinite(y_lo) and math.isfinite(z_lo) else (z > z_lo)
    below = (z <= z_hi) if math.isfinite(y_hi) and math.isfinite(z_hi) else (z < z_hi)
    return np.isfinite(z) & above & below


def lost_to_range(tr: Transform, z: np.ndarray, y: np.ndarray, y_sign: int = 1) -> tuple[np.ndarray, np.ndarray]:
    """(overflow, underflow) where y = g⁻¹(z) left floating point: z is finite and strictly
    inside the image of g, yet y is ±inf, or (under a transform) 0 or subnormal."""
    z = np.asarray(z, dtype=float)
    y = np.asarray(y, dtype=float)
    if tr.is_identity:
        return np.isfinite(z) & np.isinf(y), np.zeros(z.shape, dtype=bool)
    z_lo, z_hi, _, _ = _z_limits(tr, y_sign)
    strictly = np.isfinite(z) & (z > z_lo) & (z < z_hi)
    over = strictly & np.isinf(y)
    under = strictly & np.isfinite(y) & (np.abs(y) < np.finfo(float).tiny)
    return over, under


def _z_limits(tr: Transform, y_sign: int) -> tuple[float, float, float, float]:
    """(z_lo, z_hi, y at z_lo, y at z_hi) for the image of g over the data's y."""
    inf = math.inf
    k = tr.kind
    if k == "identity":
        return -inf, inf, -inf, inf
    if k == "log":
        return -inf, inf, 0.0, inf
    if k == "sqrt":
        return 0.0, inf, 0.0, inf
    if k == "reciprocal":
        return (0.0, inf, inf, 0.0) if y_sign > 0 else (-inf, 0.0, 0.0, -inf)
    if k == "boxcox":
        lam = float(tr.param)  # type: ignore[arg-type]
        if lam == 0:
            return -inf, inf, 0.0, inf
        edge = -1.0 / lam
        return (edge, inf, 0.0, inf) if lam > 0 else (-inf, edge, 0.0, inf)
    raise ValueError(k)


def back_interval(tr: Transform, lo: np.ndarray, hi: np.ndarray, y_sign: int = 1) -> tuple[np.ndarray, np.ndarray]:
    """{y : g(y) ∈ [lo, hi]} as (low, high) on the original scale; ±inf marks an open end.

    The z interval is first cut to the image of g (e.g. z ≥ 0 for √y), so an interval that
    reaches past it is reported as reaching the edge of the y range, never as a wrong number.
    NaN where the interval misses the image altogether.
    """
    z_lo, z_hi, y_at_lo, y_at_hi = _z_limits(tr, y_sign)
    lo = np.asarray(lo, dtype=float)
    hi = np.asarray(hi, dtype=float)
    a = np.clip(lo, z_lo, z_hi)
    b = np.clip(hi, z_lo, z_hi)
    with np.errstate(all="ignore"):
        ya = np.where(a <= z_lo, y_at_lo, np.where(a >= z_hi, y_at_hi, tr.inverse(a)))
        yb = np.where(b <= z_lo, y_at_lo, np.where(b >= z_hi, y_at_hi, tr.inverse(b)))
    low = np.fmin(ya, yb)
    high = np.fmax(ya, yb)
    miss = (hi < z_lo) | (lo > z_hi) | np.isnan(lo) | np.isnan(hi)
    return np.where(miss, np.nan, low), np.where(miss, np.nan, high)


@dataclass(frozen=True, slots=True, eq=False)
class NewInputs:
    """Checked columns of a new table for one model."""

    values: np.ndarray
    """x (forward) or y (inverse) per row."""
    covs: dict[str, np.ndarray]
    """Numeric covariates as floats, categorical ones as category labels."""
    user_w: np.ndarray | None
    """User weights per row when the table has the model's weights column, else None."""
    cov_text: dict[str, list]
    """Covariate values per row for output (numbers, or category labels)."""


def unusable_numbers(values: Any, col: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(values as floats, unusable mask, missing mask) of a numeric column of a new table."""
    arr, missing, non_num, non_fin = numeric_column(values, col)
    return arr, missing | non_num | non_fin, missing


def _numeric(frame: pd.DataFrame, col: str, role: str, first_row: int = 1,
             more_bad: Callable[[str], int] | None = None) -> np.ndarray:
    arr, bad, missing = unusable_numbers(frame[col], col)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        what = "is empty" if missing[i] else f"has {str(frame[col].iloc[i])!r}, not a finite number"
        total = int(bad.sum()) + (more_bad(col) if more_bad is not None else 0)
        raise DataError(f"{role} column {col!r} row {i + first_row} {what} ({total} such row(s)); "
                        "fix or remove those rows")
    return arr


AVERAGE = "average"
"""The value of ``set_values`` that averages a categorical covariate over its categories."""


def held_covariates(model: HandedModel, set_values: dict[str, str], n: int) -> tuple[dict[str, Any], dict[str, list]]:
    """Covariates held at one value for every row (``apply --hold NAME=VALUE``): a category the model
    saw, a number for a numeric covariate, or ``average`` (categorical only: the equal-weight
    average over the model's categories, :class:`OverCategories`)."""
    known = {c.name.casefold(): c for c in model.covariates}
    covs: dict[str, Any] = {}
    text: dict[str, list] = {}
    for name, value in set_values.items():
        cov = known.get(name.casefold())
        if cov is None:
            uses = ", ".join(repr(c.name) for c in model.covariates) or "none"
            raise UsageError(f"--hold {name}=…: the model has no covariate {name!r} (it uses {uses})")
        value = value.strip()
        if cov.kind == "numeric":
            try:
                number = float(value)
            except ValueError:
                raise UsageError(f"--hold {cov.name}={value}: {cov.name!r} is numeric; give a number") from None
            if not math.isfinite(number):
                raise UsageError(f"--hold {cov.name}={value}: give a finite number")
            covs[cov.name] = np.full(n, number)
            text[cov.name] = [number] * n
        elif value.casefold() == AVERAGE:
            covs[cov.name] = OverCategories(tuple(cov.levels))
            text[cov.name] = [f"average of {len(cov.levels)}"] * n
        elif value in cov.levels:
            covs[cov.name] = np.full(n, value, dtype=object)
            text[cov.name] = [value] * n
        else:
            raise UsageError(f"--hold {cov.name}={value}: the model never saw category {value!r}; use one of "
                             f"{', '.join(cov.levels)} or 'average'")
    return covs, text


def new_inputs(model: HandedModel, frame: pd.DataFrame, role: str,
               set_values: dict[str, str] | None = None, *, first_row: int = 1,
               more_bad: Callable[[str], int] | None = None) -> NewInputs:
    """Pick and check the columns a new table needs: the predictor (role 'x') or the response
    (role 'y'), and every covariate the model uses that ``set_values`` does not hold (see
    :func:`held_covariates`). Missing columns and bad values raise :class:`DataError` naming the
    column and row.

    For one batch of a larger table, ``first_row`` is the table's row number of the frame's first
    row, and ``more_bad(col)`` counts the unusable numbers of ``col`` in the batches still unread,
    so the message names the same row and count as for the whole table."""
    name = model.predictor_name if role == "x" else model.response_name
    label = "predictor" if role == "x" else "response"
    col = resolve_column(frame, name, f"{label} column")
    values = _numeric(frame, col, label, first_row, more_bad)
    covs, text = held_covariates(model, set_values or {}, values.shape[0])
    for cov in model.covariates:
        if cov.name in covs:
            continue
        c = resolve_column(frame, cov.name, "covariate column")
        if cov.kind == "numeric":
            covs[cov.name] = _numeric(frame, c, "covariate", first_row, more_bad)
            text[cov.name] = [float(v) for v in covs[cov.name]]
        else:
            labels = frame[c].astype("string").str.strip()
            missing = (labels.isna() | (labels == "")).to_numpy(dtype=bool)
            if missing.any():
                i = int(np.flatnonzero(missing)[0])
                raise DataError(f"covariate column {c!r} row {i + first_row} is empty; give one of "
                                f"{', '.join(cov.levels)}")
            arr = labels.to_numpy(dtype=object).astype(str)
            unknown = ~np.isin(arr, np.array(cov.levels, dtype=object))
            if unknown.any():
                i = int(np.flatnonzero(unknown)[0])
                raise DataError(f"covariate column {c!r} row {i + first_row} has category {str(arr[i])!r}, which the model "
                                f"never saw; use one of {', '.join(cov.levels)}, or hold it for every row with "
                                f"--hold {cov.name}=CATEGORY or --hold {cov.name}=average (the average over them)")
            covs[cov.name] = arr
            text[cov.name] = list(arr)
    user_w = None
    if model.user_weights is not None:
        cols = {str(k).casefold(): str(k) for k in frame.columns}
        hit = cols.get(model.user_weights.casefold())
        if hit is not None:
            user_w = _numeric(frame, hit, "weights", first_row, more_bad)
            if (user_w <= 0).any():
                i = int(np.flatnonzero(user_w <= 0)[0])
                raise DataError(f"weights column {hit!r} row {i + first_row} is {user_w[i]:g}; weights must be > 0")
    return NewInputs(values, covs, user_w, text)


@dataclass(frozen=True, slots=True, eq=False)
class ForwardPrediction:
    """Predictions at new x on the original scale, with intervals at ``level``."""

    x: np.ndarray
    """Predictor values."""
    z_fit: np.ndarray
    """ẑ₀ on the fitted scale."""
    z_se: np.ndarray
    """Standard error of ẑ₀ on the fitted scale."""
    fit: np.ndarray
    """Mean response on the original scale (smearing; equals ``median`` without a response transform)."""
    median: np.ndarray
    """g⁻¹(ẑ₀): the naive back-transform, a median under symmetric errors."""
    ci_low: np.ndarray
    """Lower end of the confidence interval (for the mean; for the median under a transform)."""
    ci_high: np.ndarray
    """Upper end of the confidence interval."""
    pi_low: np.ndarray
    """Lower end of the prediction interval for one new observation (−inf: open)."""
    pi_high: np.ndarray
    """Upper end of the prediction interval (inf: open)."""
    outside_range: np.ndarray
    """True where x lies outside the calibrated range."""
    level: float
    """Confidence level of both intervals."""
    notes: tuple[str | None, ...]
    """Per-row note (unbounded ends, back-transform problems), or None."""
    ci_of: str
    """'mean' or 'median' — what the confidence interval covers on the original scale."""
    flags: tuple[str | None, ...] = ()
    """Per row: None, or why a number is missing (one of :data:`FLAGS`)."""

    def rows(self, covs: dict[str, list] | None = None) -> list[dict[str, Any]]:
        """One dict per row with plain floats (non-finite values become None)."""
        out = []
        for i in range(self.x.shape[0]):
            row: dict[str, Any] = {"row": i + 1, "x": float(self.x[i])}
            for name, vals in (covs or {}).items():
                row[name] = vals[i]
            row.update(
                fit=_f(self.fit[i]), median=_f(self.median[i]),
                ci_low=_f(self.ci_low[i]), ci_high=_f(self.ci_high[i]),
                pi_low=_f(self.pi_low[i]), pi_high=_f(self.pi_high[i]),
                outside_range=bool(self.outside_range[i]),
                z_fit=_f(self.z_fit[i]), z_se=_f(self.z_se[i]), note=self.notes[i],
                flag=self.flags[i] if self.flags else None,
            )
            out.append(row)
        return out


def _f(v: float) -> float | None:
    v = float(v)
    return v if math.isfinite(v) else None


def outside(model: HandedModel, x: np.ndarray) -> np.ndarray:
    """True where x lies outside the calibrated range (a relative 1e-12 slack for rounding)."""
    slack = 1e-12 * max(abs(model.x_min), abs(model.x_max), model.x_max - model.x_min)
    return (x < model.x_min - slack) | (x > model.x_max + slack)


def _t_values(model: HandedModel, x: np.ndarray, column: str) -> np.ndarray:
    problem = model.predictor.domain_problem(x, column, "x")
    if problem:
        raise DataError(problem.replace(" of those used", "") + "; the model's predictor transform needs them")
    with np.errstate(all="ignore"):
        return np.asarray(model.predictor.forward(x), dtype=float)


def smear_mean(model: HandedModel, zhat: np.ndarray, w0: np.ndarray) -> np.ndarray:
    """Duan's smearing mean per row; NaN where some smeared value leaves the range of g⁻¹
    (for 1/y: crosses its pole)."""
    r = model.residuals
    tr = model.response
    if zhat.shape[0] == 0:
        return np.empty(0)
    if tr.is_log and np.all(w0 == w0[0]):
        # exp(ẑ + e) = exp(ẑ)·exp(e): one smearing factor serves every row (same estimator, exact)
        with np.errstate(over="ignore"):
            return np.exp(zhat) * float(np.mean(np.exp(r / np.sqrt(w0[0]))))
    out = np.empty(zhat.shape[0])
    step = max(1, SMEAR_BLOCK // max(r.shape[0], 1))
    with np.errstate(all="ignore"):
        for s in range(0, zhat.shape[0], step):
            z = zhat[s:s + step, None] + r[None, :] / np.sqrt(w0[s:s + step, None])
            vals = np.where(in_image(tr, z, model.y_sign), model.response.inverse(z), np.nan)
            out[s:s + step] = np.mean(vals, axis=1)  # NaN propagates
    return out


def predict_forward(model: HandedModel, x: np.ndarray, covs: dict[str, np.ndarray] | None = None, *,
                    level: float = 0.95, user_w: np.ndarray | None = None) -> ForwardPrediction:
    """Mean response, confidence and prediction intervals at new predictor values.

    Var(ẑ₀) = x₀′Vx₀; a new observation has variance σ²/w₀ + Var(ẑ₀); intervals use
    Student's t on the model's residual df.
    """
    level = check_level(level)
    x = np.asarray(x, dtype=float)
    covs = covs or {}
    for cov in model.covariates:
        if cov.name not in covs:
            raise DataError(f"covariate {cov.name!r} is needed for predictions; add the column to the table")
    t = _t_values(model, x, model.predictor_name)
    with np.errstate(all="ignore"):
        xm = term_matrix(model.terms, t, covs)
        z = xm @ model.beta if any(isinstance(v, OverCategories) for v in covs.values()) \
            else predict_terms(model.terms, model.beta, t, covs)
        var_mean = np.einsum("ij,jk,ik->i", xm, model.cov, xm)
        se = np.sqrt(np.clip(var_mean, 0.0, None))
        w0 = weight_at(model, z, user_w)
        se_obs = np.sqrt(model.sigma**2 / w0 + se**2)
    tq = t_ppf(0.5 + level / 2, model.df_resid)
    tr = model.response
    with np.errstate(all="ignore"):
        ends = {"ci": (z - tq * se, z + tq * se), "pi": (z - tq * se_obs, z + tq * se_obs)}
    ci_lo, ci_hi = back_interval(tr, *ends["ci"], model.y_sign)
    pi_lo, pi_hi = back_interval(tr, *ends["pi"], model.y_sign)
    defined = in_image(tr, z, model.y_sign)
    with np.errstate(all="ignore"):
        median = np.where(defined, np.asarray(tr.inverse(z), dtype=float), np.nan)
    mean = median.copy() if tr.is_identity else smear_mean(model, z, w0)
    over, under = _lost_to_range(model, z, se, median, mean, ends, defined)
    intervals = (ci_lo, ci_hi, pi_lo, pi_hi)
    notes, flags, blank = _row_notes(model, z, defined, over, under, mean, intervals, w0, user_w)
    if blank.any():
        mean, median, ci_lo, ci_hi, pi_lo, pi_hi = (np.where(blank, np.nan, v)
                                                    for v in (mean, median, ci_lo, ci_hi, pi_lo, pi_hi))
    return ForwardPrediction(
        x=x, z_fit=z, z_se=se, fit=mean, median=median, ci_low=ci_lo, ci_high=ci_hi,
        pi_low=pi_lo, pi_high=pi_hi, outside_range=outside(model, x), level=level,
        notes=tuple(notes), ci_of="mean" if tr.is_identity else "median", flags=tuple(flags),
    )


def _lost_to_range(model: HandedModel, z: np.ndarray, se: np.ndarray, median: np.ndarray, mean: np.ndarray,
                   ends: dict[str, tuple[np.ndarray, np.ndarray]],
                   defined: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Rows where the point, the smearing mean or an interval end over- or underflows."""
    tr = model.response
    # the point, the smearing mean (its "z" is ẑ) and each interval end
    over, under = lost_to_range(tr, z, median, model.y_sign)
    checks = [(z, mean)]
    with np.errstate(all="ignore"):
        checks += [(e, np.asarray(tr.inverse(e), dtype=float)) for e in (*ends["ci"], *ends["pi"])]
    for zs, ys in checks:
        o, u = lost_to_range(tr, zs, ys, model.y_sign)
        over |= o & defined
        under |= u & defined
    over |= ~np.isfinite(z) | ~np.isfinite(se)
    return over, under


def _row_notes(model: HandedModel, z: np.ndarray, defined: np.ndarray, over: np.ndarray, under: np.ndarray,
               mean: np.ndarray, intervals: tuple[np.ndarray, ...], w0: np.ndarray,
               user_w: np.ndarray | None) -> tuple[list[str | None], list[str | None], np.ndarray]:
    """Per row: a note in words, a flag for a value that cannot be given, and whether to blank the row."""
    tr = model.response
    ci_lo, ci_hi, pi_lo, pi_hi = intervals
    no_w_column = model.user_weights is not None and user_w is None
    notes: list[str | None] = []
    flags: list[str | None] = []
    blank = np.zeros(z.shape[0], dtype=bool)
    for i in range(z.shape[0]):
        parts = []
        flag = None
        if over[i] or (not np.isfinite(z[i])):
            flag = "overflow"
            parts.append("a value here exceeds the floating-point range (about 1.8e308): no number"
                         + (f" (ẑ = {z[i]:.6g})" if np.isfinite(z[i]) else ""))
        elif not defined[i]:
            flag = "no back-transform"
            parts.append(f"ẑ = {z[i]:.6g} is {_beyond(tr, model.y_sign)}: the model gives no "
                         f"{model.response_name!r} here")
        elif under[i]:
            flag = "underflow"
            parts.append(f"ẑ = {z[i]:.6g} puts a value below the smallest normal float (about 2.2e-308): "
                         "no number")
        elif not np.isfinite(mean[i]):
            flag = "no smearing mean"
            parts.append("smearing undefined: some smeared values leave the range of the back-transform")
        if flag in ("overflow", "no back-transform", "underflow"):
            blank[i] = True
        elif np.isinf(pi_lo[i]) or np.isinf(pi_hi[i]) or np.isinf(ci_lo[i]) or np.isinf(ci_hi[i]):
            parts.append("an interval end is open (null): it runs to the edge of the response range")
        if no_w_column:
            parts.append(f"no {model.user_weights!r} column: a new observation is given weight 1")
        if not blank[i] and (not np.isfinite(w0[i]) or w0[i] <= 0):
            parts.append("the weight at this point is undefined (fitted mean 0): no prediction interval")
        notes.append("; ".join(parts) or None)
        flags.append(flag)
    return notes, flags, blank


def _beyond(tr: Transform, y_sign: int) -> str:
    """Where an ẑ without a back-transform lies, in words."""
    return tr.beyond_words("y")
