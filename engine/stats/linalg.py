"""Least squares from group statistics: stacked QR on scaled columns, raw-basis results.

A design column is ``group[g]`` (constant within a group) or ``group[g] · base`` (a
covariate varying within the group). With group means ȳ_g, weights W_g and the per-group
centred cross-products C_g of [bases, y], the weighted residual sum of squares is

    SSE(β) = Σ_g W_g (ȳ_g − x̄_g′β)² + [β_B; −1]′ (Σ_g a a′ ∘ C_g) [β_B; −1]

so the fit solves a small stacked least-squares problem of (groups + within-factor) rows.
Columns are built in a well-conditioned working basis (centred, scaled powers) and mapped
back to the raw basis by a fixed matrix (computed in extended precision).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from .dist import t_ppf
from .groups import GroupStats
from .results import Coefficient, Fit

__all__ = ["Column", "Design", "fit_design", "fit_rss_rank", "RssRank", "design_rss", "poly_map", "solve_stacked",
           "rounding_floor"]

_EPS = np.finfo(float).eps


@dataclass(frozen=True, slots=True, eq=False)
class Column:
    """A working-basis design column."""

    group: np.ndarray
    """(c,) value per group."""
    base: int | None = None
    """Index of a within-varying base multiplying ``group``; None for a pure group column."""


@dataclass(frozen=True, slots=True, eq=False)
class Design:
    """Working columns plus the map to raw coefficients (β_raw = to_raw @ β_work)."""

    columns: tuple[Column, ...]
    """Working columns."""
    names: tuple[str, ...]
    """Raw coefficient names, one per column."""
    to_raw: np.ndarray
    """Square map from working to raw coefficients (longdouble)."""
    intercept: bool = True
    """Whether the column space contains the constant (R² is centred then)."""

    @property
    def p(self) -> int:
        """Number of columns."""
        return len(self.columns)


def poly_map(degree: int, centre: float, scale: float, intercept: bool = True) -> np.ndarray:
    """Map from coefficients of powers of u = (t − centre)/scale to powers of t.

    Column k of the result expresses u^k in raw powers t^j (binomial expansion), in
    extended precision; rows/columns start at power 0 with an intercept, at 1 without.
    """
    ld = np.longdouble
    m, s = ld(centre), ld(scale)
    full = np.zeros((degree + 1, degree + 1), dtype=ld)
    for k in range(degree + 1):
        for j in range(k + 1):
            full[j, k] = ld(math.comb(k, j)) * (-m) ** (k - j) / s**k
    return full if intercept else full[1:, 1:]


def _mean_rows(stats: GroupStats, design: Design) -> np.ndarray:
    cols = []
    for col in design.columns:
        if col.base is None:
            cols.append(col.group)
        else:
            cols.append(col.group * stats.base_mean[:, col.base])
    return np.column_stack(cols) if cols else np.zeros((stats.c, 0))


def _within_rows(stats: GroupStats, design: Design) -> np.ndarray | None:
    """Rows R with R′R = within cross-product of [design columns, y]; None if no base columns."""
    based = [j for j, col in enumerate(design.columns) if col.base is not None]
    if not based or stats.cross is None:
        return None
    q = stats.cross.shape[1] - 1
    r = len(based)
    m = np.zeros((r + 1, r + 1))
    for a, j in enumerate(based):
        cj = design.columns[j]
        for b in range(a, r):
            ck = design.columns[based[b]]
            v = float(np.dot(cj.group * ck.group, stats.cross[:, cj.base, ck.base]))
            m[a, b] = m[b, a] = v
        v = float(np.dot(cj.group, stats.cross[:, cj.base, q]))
        m[a, r] = m[r, a] = v
    m[r, r] = float(stats.cross[:, q, q].sum())
    lam, vec = np.linalg.eigh(m)
    # directions below 1e-12 of the largest are rounding noise of the cross-products
    keep = lam > lam.max() * 1e-12 * (r + 1) if lam.max() > 0 else np.zeros(r + 1, bool)
    factor = (np.sqrt(lam[keep])[:, None] * vec[:, keep].T)  # (k, r+1)
    rows = np.zeros((factor.shape[0], design.p + 1))
    rows[:, based] = factor[:, :r]
    rows[:, -1] = factor[:, r]
    return rows


@dataclass(frozen=True, slots=True, eq=False)
class _Solution:
    beta: np.ndarray
    cov_unscaled: np.ndarray
    rank: int
    aliased: tuple[int, ...]
    rss: float


def _back_substitute(r: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Solve r x = b for upper-triangular r (small p; plain loops beat library call overhead)."""
    p = r.shape[0]
    x = np.array(b, dtype=float, copy=True)
    for i in range(p - 1, -1, -1):
        if i + 1 < p:
            x[i] -= r[i, i + 1 :] @ x[i + 1 :]
        x[i] /= r[i, i]
    return x


def _stacked(stats: GroupStats, design: Design, shift: float = 0.0
             ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray | None]:
    """(group-mean rows, stacked matrix, stacked target, within-factor rows or None).

    ``shift`` is subtracted from every group mean first: with the constant in the column space
    this changes no residual, and a response far from zero (1e8 + a few units) keeps its digits.
    """
    xm = _mean_rows(stats, design)
    sw = np.sqrt(stats.wsum)
    a = xm * sw[:, None]
    t = stats.mean - shift
    if shift and stats.mean_lo is not None:
        t = t + stats.mean_lo  # exact digits of a mean far from zero, after the shift removed its bulk
    t = t * sw
    within = _within_rows(stats, design)
    if within is not None:
        a = np.vstack([a, within[:, :-1]])
        t = np.concatenate([t, within[:, -1]])
    return xm, a, t, within


def _centre(stats: GroupStats, design: Design) -> float:
    """The weighted grand mean when the response sits far from zero relative to its spread (more
    than 100 times) and the constant lies in the design's column space; else 0 (a shift would
    only add rounding of its own)."""
    if not design.intercept or stats.c == 0:
        return 0.0
    total = float(stats.wsum.sum())
    mean = float((stats.wsum * stats.mean).sum() / total)
    spread = math.sqrt(float((stats.wsum * (stats.mean - mean) ** 2).sum() + stats.ss.sum()) / total)
    return mean if abs(mean) > 100.0 * spread else 0.0


def _leads_with_constant(design: Design) -> bool:
    first = design.columns[0] if design.columns else None
    return first is not None and first.base is None and bool(np.all(first.group == 1.0))


def design_rss(stats: GroupStats, design: Design) -> float:
    """Residual sum of squares only (no inference): for profiles that call it many times."""
    _, a, t, within = _stacked(stats, design, _centre(stats, design))
    norms = np.sqrt((a * a).sum(axis=0))
    norms[norms == 0] = 1.0
    beta, *_ = np.linalg.lstsq(a / norms, t, rcond=None)
    r = t - (a / norms) @ beta
    rss = float(r @ r)
    return max(rss if within is not None else rss + stats.ss_pure, 0.0)


def solve_stacked(a: np.ndarray, t: np.ndarray, *, with_cov: bool = True) -> _Solution:
    """Least squares min ||t − a β|| by column-scaled, column-pivoted QR with one refinement.

    ``with_cov=False`` skips the unscaled covariance (left as an empty array) for callers that
    need only the coefficients, the rank and the residual sum of squares.
    """
    from scipy.linalg import qr

    m, p = a.shape
    norms = np.sqrt((a * a).sum(axis=0))
    norms[norms == 0] = 1.0
    a_s = a / norms
    q, r, piv = qr(a_s, mode="economic", pivoting=True)
    diag = np.abs(np.diag(r))
    tol = max(m, p) * _EPS * 10 * (diag[0] if diag.size else 0.0)
    rank = int((diag > tol).sum())
    r1 = r[:rank, :rank]
    q1 = q[:, :rank]
    beta_s = np.zeros(p)
    sub = _back_substitute(r1, q1.T @ t)
    resid = t - a_s[:, piv[:rank]] @ sub
    sub = sub + _back_substitute(r1, q1.T @ resid)  # iterative refinement
    beta_s[piv[:rank]] = sub
    resid = t - a_s @ beta_s
    beta = beta_s / norms
    aliased = tuple(sorted(int(i) for i in piv[rank:]))
    if not with_cov:
        return _Solution(beta, np.empty((0, 0)), rank, aliased, float(resid @ resid))
    rinv = _back_substitute(r1, np.eye(rank))
    cov_s = np.zeros((p, p))
    cov_s[np.ix_(piv[:rank], piv[:rank])] = rinv @ rinv.T
    cov = cov_s / np.outer(norms, norms)
    return _Solution(beta, cov, rank, aliased, float(resid @ resid))


@dataclass(frozen=True, slots=True)
class RssRank:
    """Residual sum of squares, rank and residual df of a design (no inference)."""

    sse: float
    """Residual sum of squares (pure error included), as ``Fit.sse``."""
    rank: int
    """Rank of the design, as ``Fit.rank``."""
    df_resid: int
    """n − rank, as ``Fit.df_resid``."""


def fit_rss_rank(stats: GroupStats, design: Design) -> RssRank:
    """The ``sse``, ``rank`` and ``df_resid`` that :func:`fit_design` would report, without the
    coefficients, covariance and intervals (for the x-as-factor comparison models)."""
    _, a, t, within = _stacked(stats, design, _centre(stats, design))
    sol = solve_stacked(a, t, with_cov=False)
    sse = sol.rss if within is not None else sol.rss + stats.ss_pure
    return RssRank(sse if sse > rounding_floor(stats) else 0.0, sol.rank, stats.n - sol.rank)


def _is_identity(m: np.ndarray) -> bool:
    return m.shape[0] == m.shape[1] and bool(np.array_equal(m, np.eye(m.shape[0], dtype=m.dtype)))


def _t_sf2_many(ts: list[float], df: float) -> list[float]:
    """Two-sided t p-values of several statistics on one ``df`` in one call (the values of
    ``dist.t_sf2``: 0 for an infinite statistic, NaN for a missing one)."""
    from scipy.special import stdtr

    if not ts:
        return []
    arr = np.asarray(ts, dtype=float)
    finite = np.isfinite(arr)
    out = np.where(finite, 2.0 * stdtr(df, -np.abs(np.where(finite, arr, 0.0))), 0.0)
    out[np.isnan(arr)] = np.nan
    return out.tolist()


def fit_design(stats: GroupStats, design: Design, conf: float = 0.95) -> Fit:
    """Fit ``design`` to the grouped response; coefficients reported in the raw basis."""
    shift = _centre(stats, design) if _leads_with_constant(design) else 0.0
    xm, a, t, within = _stacked(stats, design, shift)
    sol = solve_stacked(a, t)
    # the constant column's coefficient takes the shift back, in extended precision
    beta_ld = sol.beta.astype(np.longdouble)
    beta_ld[0] += np.longdouble(shift) if shift else 0
    sse = sol.rss if within is not None else sol.rss + stats.ss_pure
    rounding = rounding_floor(stats)
    sse = sse if sse > rounding else 0.0
    n = stats.n
    df = n - sol.rank
    sigma2 = sse / df if df > 0 else math.nan
    beta_raw, cov_raw = _to_raw_basis(design.to_raw, sol, beta_ld, sigma2, df)
    aliased_names = tuple(design.names[i] for i in sol.aliased)
    coefs = _coefficients(design.names, beta_raw, cov_raw, aliased_names, df, conf)
    ss_tot, r2, r2_adj = _totals(stats, design.intercept, sse, df)
    if sse > 0:
        loglik = -0.5 * n * (math.log(2 * math.pi) + math.log(sse / n) + 1.0) + 0.5 * stats.sum_log_w
    else:
        loglik = math.inf
    fitted = xm @ sol.beta + shift
    lev = np.einsum("gi,ij,gj->g", xm, sol.cov_unscaled, xm) if design.p else np.zeros(stats.c)
    return Fit(
        coefficients=coefs,
        cov=tuple(map(tuple, cov_raw.tolist())),
        n=n,
        rank=sol.rank,
        df_resid=df,
        sse=sse,
        sigma=math.sqrt(sigma2) if df > 0 else math.nan,
        r2=r2,
        r2_adj=r2_adj,
        ss_total=ss_tot,
        loglik=loglik,
        aliased=aliased_names,
        conf_level=conf,
        group_fitted=tuple(fitted.tolist()),
        group_leverage=tuple(lev.tolist()),
        rounding=rounding,
    )


def _to_raw_basis(to_raw: np.ndarray, sol: Any, beta_ld: np.ndarray, sigma2: float,
                  df: int) -> tuple[np.ndarray, np.ndarray]:
    """Coefficients and their covariance moved from the working basis to the raw one."""
    cov_work = sol.cov_unscaled * sigma2 if df > 0 else np.full_like(sol.cov_unscaled, np.nan)
    if _is_identity(to_raw) and np.isfinite(sol.beta).all() and np.isfinite(cov_work).all():
        # the working basis is the raw basis: the extended-precision products are exact copies
        return beta_ld.astype(float), cov_work + 0.0
    beta_raw = (to_raw @ beta_ld).astype(float)
    tr = to_raw.astype(float)
    cov_raw = (to_raw @ cov_work.astype(np.longdouble) @ to_raw.T).astype(float) if df > 0 else tr @ cov_work @ tr.T
    return beta_raw, cov_raw


def _coefficients(names: Sequence[str], beta_raw: np.ndarray, cov_raw: np.ndarray, aliased_names: tuple[str, ...],
                  df: int, conf: float) -> tuple[Coefficient, ...]:
    """Estimate, standard error, t, two-sided p and interval of each coefficient (NaN where undefined)."""
    tq = t_ppf(0.5 + conf / 2, df) if df > 0 else math.nan
    ests = beta_raw.tolist()
    variances = np.diagonal(cov_raw).tolist()
    ses: list[float] = []
    tvals: list[float] = []
    for name, est, var in zip(names, ests, variances, strict=True):
        se = math.sqrt(var) if var > 0 else (0.0 if var == 0 else math.nan)
        if name in aliased_names or df <= 0:
            tval = math.nan
        else:
            tval = est / se if se > 0 else math.copysign(math.inf, est) if est else math.nan
        ses.append(se)
        tvals.append(tval)
    pvals = _t_sf2_many(tvals, df) if df > 0 else [math.nan] * len(tvals)
    return tuple(
        Coefficient(name, est, se, tval, pval, est - tq * se if df > 0 else math.nan,
                    est + tq * se if df > 0 else math.nan)
        for name, est, se, tval, pval in zip(names, ests, ses, tvals, pvals, strict=True)
    )


def _totals(stats: GroupStats, intercept: bool, sse: float, df: int) -> tuple[float, float, float]:
    """Total sum of squares (about the weighted mean, or about 0 without an intercept), r², adjusted r²."""
    n = stats.n
    wbar = float((stats.wsum * stats.mean).sum() / stats.wsum.sum())
    if intercept:
        ss_tot = float(stats.ss.sum() + (stats.wsum * (stats.mean - wbar) ** 2).sum())
        dft = n - 1
    else:
        ss_tot = float(stats.ss.sum() + (stats.wsum * stats.mean**2).sum())
        dft = n
    r2 = 1.0 - sse / ss_tot if ss_tot > 0 else math.nan
    r2_adj = 1.0 - (sse / df) / (ss_tot / dft) if df > 0 and ss_tot > 0 else math.nan
    return ss_tot, r2, r2_adj


def rounding_floor(stats: GroupStats) -> float:
    """The largest sum of squares that floating-point rounding of the response alone can produce.

    Each value carries a relative error of about ε (2.2e-16); sums, means and the QR solve
    multiply it by a modest factor. 64·ε·(largest |level mean| + largest level SD) per row,
    squared and summed over the rows, bounds what a residual or pure-error sum of squares of
    data that agree exactly can show (e.g. three copies of 0.1 give a pure error of 1e-33, not 0).
    """
    if stats.c == 0:
        return 0.0
    spread = np.sqrt(np.divide(stats.ss, stats.wsum, out=np.zeros(stats.c), where=stats.wsum > 0))
    scale = float(np.max(np.abs(stats.mean)) + np.max(spread))
    wmax = float(np.max(stats.wsum / np.maximum(stats.count, 1)))
    return float(stats.n * wmax * (64.0 * _EPS * scale) ** 2)
