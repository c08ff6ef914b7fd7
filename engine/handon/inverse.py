"""Inverse prediction (calibration): which x produced a measured response?

For a straight line the estimate is x̂₀ = (ȳ₀ − b₀)/b₁ with the standard error
s_x0 = (s/|b₁|)·√[1/m + 1/n + (ȳ₀ − ȳ)²/(b₁²Sxx)] (Miller & Miller, *Statistics and
Chemometrics for Analytical Chemistry*, ch. 5), written here through the coefficient
covariance so it also holds for user weights. The exact interval is Fieller's: the x where
(ȳ₀ − b₀ − b₁x)² ≤ t²[σ²/m + Var(b₀ + b₁x)], a quadratic inequality (Eisenhart, Ann Math Stat
10:162, 1939). It is finite only when g = t²·Var(b₁)/b₁² < 1; otherwise the set is a half
line, the whole line, or two pieces, and is reported as such.

For any other model the same inequality is solved numerically on the fitted scale: a fine grid
in the transformed predictor over the calibrated range extended by its width on each side,
kept to the part where the fitted curve is monotone, with every crossing refined by root finding.

A result is never a number that floating point lost: a set whose ends lie beyond about 1.8e308
is reported as ``interval = 'overflow'`` with null ends and a note, not as a finite interval.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..errors import DataError, UsageError
from ..stats.dist import t_ppf
from ..tree.scoring import predict_terms
from .predict import OverCategories, check_level, outside, term_matrix, weight_at
from .specfile import HandedModel

__all__ = ["InverseResult", "fieller_line", "inverse_predict", "GRID_POINTS"]

GRID_POINTS = 2001
"""Grid points in the transformed predictor for the numeric solution."""

Piece = tuple[float | None, float | None]


@dataclass(frozen=True, slots=True)
class InverseResult:
    """The x compatible with one measured response."""

    y: float
    """The response value given (a mean of ``replicates`` readings)."""
    replicates: int
    """Readings averaged into ``y``."""
    x: float | None
    """Point estimate x̂ (None when the curve does not reach y, or reaches it more than once)."""
    interval: str
    """'finite', 'unbounded' (a side is open), 'split' (two or more pieces), 'none' (empty) or
    'overflow' (the numbers lie beyond the floating-point range; no ends are given)."""
    low: float | None
    """Lower end for a finite interval (or the closed end of a half line); None when open."""
    high: float | None
    """Upper end (None when open)."""
    pieces: tuple[Piece, ...]
    """The set as (low, high) pieces in x order; None marks an open end."""
    s_x0: float | None
    """Standard error of x̂ for a straight line (Miller & Miller); None otherwise."""
    g: float | None
    """t²·Var(b₁)/b₁² for a straight line: the interval is finite only when g < 1."""
    outside_range: bool | None
    """True when x̂ lies outside the calibrated range (None without x̂)."""
    method: str
    """'closed form (Fieller)' or 'numeric'."""
    note: str | None = None
    """What the set means when it is not a finite interval, and any approximation."""
    covariates: dict[str, Any] = field(default_factory=dict)
    """Covariate values of the row (as given)."""
    flag: str | None = None
    """None, or 'overflow' when a number of the result left the floating-point range."""

    def as_json(self) -> dict[str, Any]:
        """Plain JSON row."""
        return {
            "y": self.y, "replicates": self.replicates, **self.covariates,
            "x": self.x, "low": self.low, "high": self.high, "interval": self.interval,
            "pieces": [list(p) for p in self.pieces], "s_x0": self.s_x0, "g": self.g,
            "outside_range": self.outside_range, "method": self.method, "note": self.note, "flag": self.flag,
        }


def fieller_line(d: float, b1: float, v00: float, v01: float, v11: float, s2_obs: float,
                 tq: float) -> tuple[str, tuple[Piece, ...]]:
    """Solve (d − b₁x)² ≤ t²(s2_obs + v00 + 2v01·x + v11·x²) for x, with d = ȳ₀ − b₀.

    A x² + B x + C ≤ 0 with A = b₁² − t²v11, B = −2(d·b₁ + t²v01), C = d² − t²(s2_obs + v00).
    A > 0 gives a finite interval; A < 0 the outside of the roots (two pieces) or every x;
    A = 0 a half line. Returns (kind, pieces).

    For a very large |d| (beyond 1e100) the inequality is solved for x/|d| and the roots scaled
    back, so d² never overflows.
    """
    if abs(d) > 1e100 and math.isfinite(d):
        sc = abs(d)
        kind, pieces = fieller_line(d / sc, b1, v00 / sc / sc, v01 / sc, v11, s2_obs / sc / sc, tq)
        return kind, tuple((None if lo is None else lo * sc, None if hi is None else hi * sc) for lo, hi in pieces)
    q = tq * tq
    a = b1 * b1 - q * v11
    b = -2.0 * (d * b1 + q * v01)
    c = d * d - q * (s2_obs + v00)
    if a == 0.0:
        if b == 0.0:
            return ("unbounded", ((None, None),)) if c <= 0 else ("none", ())
        r = -c / b
        return "unbounded", (((None, r),) if b > 0 else ((r, None),))
    disc = b * b - 4.0 * a * c
    if disc <= 0.0:
        if a > 0:  # touches at one point at most (only when the variance is 0)
            r = -b / (2.0 * a)
            return ("finite", ((r, r),)) if disc == 0.0 else ("none", ())
        return "unbounded", ((None, None),)
    root = math.sqrt(disc)
    qq = -0.5 * (b + math.copysign(root, b))
    r1, r2 = sorted((qq / a, c / qq))
    if a > 0:
        return "finite", ((r1, r2),)
    return "split", ((None, r1), (r2, None))


def _ends(kind: str, pieces: tuple[Piece, ...]) -> tuple[float | None, float | None]:
    if kind == "finite":
        return pieces[0]
    if kind == "unbounded" and len(pieces) == 1:
        return pieces[0]
    return None, None


def _closed_rows(model: HandedModel, ys: np.ndarray, m: int, tq: float, user_w: np.ndarray | None,
                 ) -> list[InverseResult]:
    idx = {(t.kind, t.power): j for j, t in enumerate(model.terms)}
    i0, i1 = idx[("const", 0)], idx[("tpow", 1)]
    b0, b1 = float(model.beta[i0]), float(model.beta[i1])
    v00, v01, v11 = float(model.cov[i0, i0]), float(model.cov[i0, i1]), float(model.cov[i1, i1])
    s2 = model.sigma**2
    g = tq * tq * v11 / (b1 * b1) if b1 != 0 else math.inf
    out = []
    for k, y0 in enumerate(ys):
        w = 1.0 if user_w is None else float(user_w[k])
        s2_obs = s2 / (m * w)
        d = float(y0) - b0
        kind, pieces = fieller_line(d, b1, v00, v01, v11, s2_obs, tq)
        x_hat = d / b1 if b1 != 0 else None
        s_x0 = None
        if x_hat is not None and abs(x_hat) <= 1e100:
            var = s2_obs + v00 + 2.0 * v01 * x_hat + v11 * x_hat * x_hat
            s_x0 = math.sqrt(max(var, 0.0)) / abs(b1)
        elif x_hat is not None and math.isfinite(x_hat):  # scaled, so that x̂² cannot overflow
            sc = abs(x_hat)
            u = x_hat / sc
            var = (s2_obs / sc + v00 / sc) / sc + 2.0 * v01 * u / sc + v11 * u * u
            s_x0 = sc * math.sqrt(max(var, 0.0)) / abs(b1)
        note = None
        if kind != "finite":
            note = (f"g = {g:.3g} ≥ 1: the slope is not clearly different from 0 at this level, so the "
                    "response does not pin x down" if g >= 1 else "the set is not a finite interval")
        lo, hi = _ends(kind, pieces)
        out.append(InverseResult(
            y=float(y0), replicates=m, x=x_hat, interval=kind, low=lo, high=hi, pieces=pieces,
            s_x0=s_x0, g=g, outside_range=None if x_hat is None else bool(outside(model, np.array([x_hat]))[0]),
            method="closed form (Fieller)", note=note,
        ))
    return out


def _t_search(model: HandedModel) -> tuple[float, float, float, float]:
    """Calibrated t range and the extended search range (both in the transformed predictor)."""
    ends = np.sort(np.asarray(model.predictor.forward(np.array([model.x_min, model.x_max])), dtype=float))
    t_lo, t_hi = float(ends[0]), float(ends[1])
    width = t_hi - t_lo
    s_lo, s_hi = t_lo - width, t_hi + width
    k = model.predictor.kind
    tiny = width * 1e-9
    if k == "sqrt":
        s_lo = max(s_lo, 0.0)
    elif k in ("reciprocal", "power"):
        if t_lo > 0:
            s_lo = max(s_lo, tiny)
        elif t_hi < 0:
            s_hi = min(s_hi, -tiny)
    return t_lo, t_hi, s_lo, s_hi


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """Index ranges [a, b] of consecutive True values."""
    if not mask.any():
        return []
    d = np.diff(np.concatenate(([0], mask.astype(np.int8), [0])))
    starts = np.flatnonzero(d == 1)
    stops = np.flatnonzero(d == -1) - 1
    return list(zip(starts.tolist(), stops.tolist(), strict=True))


def _numeric_row(model: HandedModel, y0: float, m: int, tq: float, covs: dict[str, np.ndarray],
                 w_user: float | None) -> InverseResult:
    """x̂ and its confidence set by search: where the curve meets the reading, and where the reading
    lies inside the band, on a grid refined by root finding."""
    tr = model.response
    with np.errstate(all="ignore"):
        z0 = float(tr.forward(np.array([y0], dtype=float))[0])
    t_lo, t_hi, s_lo, s_hi = _t_search(model)
    grid = np.linspace(s_lo, s_hi, GRID_POINTS)
    grid[np.argmin(np.abs(grid - t_lo))] = t_lo
    grid[np.argmin(np.abs(grid - t_hi))] = t_hi
    band_of = _Band(model, m, tq, covs, None if w_user is None else np.array([w_user]), z0)
    z, band = band_of.curve(grid)
    a, b, notes = _searched_span(grid, z, t_lo, t_hi)
    x_hat = _point_estimate(model, band_of, grid, z, a, b, notes)
    pieces, opened = _band_pieces(model, band_of, grid, z, band, a, b)
    kind = _set_kind(band_of, pieces, opened, grid, a, b, notes)
    if model.weight_theta is not None:
        notes.append("weights estimated from the replicates: the interval is approximate")
    if not tr.is_identity and m > 1:
        notes.append(f"the mean of {m} readings is treated as a mean on the fitted scale (approximate)")
    lo, hi = _ends(kind, tuple(pieces))
    return InverseResult(
        y=float(y0), replicates=m, x=x_hat, interval=kind, low=lo, high=hi, pieces=tuple(pieces),
        s_x0=None, g=None,
        outside_range=None if x_hat is None else bool(outside(model, np.array([x_hat]))[0]),
        method="numeric", note="; ".join(notes) or None,
    )


class _Band:
    """The fitted curve on the working x scale t and the band a reading z0 must fall in."""

    def __init__(self, model: HandedModel, m: int, tq: float, covs: dict[str, np.ndarray],
                 uw: np.ndarray | None, z0: float) -> None:
        self.model, self.m, self.tq, self.covs, self.uw, self.z0 = model, m, tq, covs, uw, z0

    def curve(self, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Fitted z at t and the squared half-width tq²·(σ²/(m·w) + var of the fitted value)."""
        model = self.model
        cv = {k: v if isinstance(v, OverCategories) else np.repeat(v, t.shape[0]) for k, v in self.covs.items()}
        xm = term_matrix(model.terms, t, cv)
        z = xm @ model.beta if any(isinstance(v, OverCategories) for v in cv.values()) \
            else predict_terms(model.terms, model.beta, t, cv)
        var = np.einsum("ij,jk,ik->i", xm, model.cov, xm)
        w = weight_at(model, z, None if self.uw is None else np.repeat(self.uw, t.shape[0]))
        with np.errstate(divide="ignore", invalid="ignore"):
            band = self.tq * self.tq * (model.sigma**2 / (self.m * w) + np.clip(var, 0.0, None))
        return z, band

    def gap(self, t: float) -> float:
        """Negative where the reading lies inside the band at t."""
        z, band = self.curve(np.array([t]))
        return float((self.z0 - z[0]) ** 2 - band[0])

    def level_gap(self, t: float) -> float:
        """Fitted z at t minus the reading."""
        z, _ = self.curve(np.array([t]))
        return float(z[0] - self.z0)

    def to_x(self, t: float) -> float:
        """x from the working scale t."""
        return float(self.model.predictor.inverse(np.array([t]))[0])


def _searched_span(grid: np.ndarray, z: np.ndarray, t_lo: float, t_hi: float) -> tuple[int, int, list[str]]:
    """Grid indices searched: beyond the calibrated range while the curve stays monotone, else only
    the calibrated range (with a note)."""
    i0 = int(np.searchsorted(grid, t_lo))
    i1 = int(np.searchsorted(grid, t_hi, side="right") - 1)
    steps = np.sign(np.diff(z))
    trend = float(np.sign(z[i1] - z[i0]))
    if trend != 0 and not (steps[i0:i1] == -trend).any():
        a = i0
        while a > 0 and steps[a - 1] == trend:
            a -= 1
        b = i1
        while b < grid.size - 1 and steps[b] == trend:
            b += 1
        return a, b, []
    return i0, i1, ["the fitted curve is not monotone over the calibrated range: several x can give one "
                    "response, so only the calibrated range was searched"]


def _point_estimate(model: HandedModel, band_of: _Band, grid: np.ndarray, z: np.ndarray, a: int, b: int,
                    notes: list[str]) -> float | None:
    """x̂ where the curve meets the reading, when it does so once in the searched span."""
    from scipy.optimize import brentq

    z0 = band_of.z0
    if not math.isfinite(z0):
        notes.append(f"the response is outside the range of {model.response.short('y')}")
        return None
    diff = z[a:b + 1] - z0
    cross = [j for j in range(diff.size - 1) if diff[j] == 0 or diff[j] * diff[j + 1] < 0]
    if diff[-1] == 0:
        cross.append(diff.size - 1)
    roots = []
    for j in cross:
        ta, tb = grid[a + j], grid[min(a + j + 1, b)]
        roots.append(ta if diff[j] == 0 or ta == tb else
                     brentq(band_of.level_gap, ta, tb, xtol=1e-14 * max(1, abs(ta))))
    if len(roots) == 1:
        return band_of.to_x(roots[0])
    if len(roots) > 1:
        notes.append(f"the curve reaches this response at {len(roots)} points; no single x̂")
    else:
        notes.append("the fitted curve does not reach this response within the searched range")
    return None


def _band_pieces(model: HandedModel, band_of: _Band, grid: np.ndarray, z: np.ndarray, band: np.ndarray,
                 a: int, b: int) -> tuple[list[Piece], bool]:
    """The x intervals where the reading lies inside the band (None for an open end), sorted, and
    whether a piece reaches the end of the searched span."""
    from scipy.optimize import brentq

    z0 = band_of.z0
    ok = ((z0 - z) ** 2 <= band) if math.isfinite(z0) else np.zeros_like(z, dtype=bool)
    ok[:a] = False
    ok[b + 1:] = False
    opened = False
    pieces: list[Piece] = []
    for ra, rb in _runs(ok):
        left: float | None = None
        right: float | None = None
        if ra == a:
            opened = True
        else:
            left = band_of.to_x(brentq(band_of.gap, grid[ra - 1], grid[ra], xtol=1e-14 * max(1.0, abs(grid[ra]))))
        if rb == b:
            opened = True
        else:
            right = band_of.to_x(brentq(band_of.gap, grid[rb], grid[rb + 1], xtol=1e-14 * max(1.0, abs(grid[rb]))))
        pieces.append((left, right) if not model.predictor.decreasing else (right, left))
    pieces.sort(key=lambda p: -math.inf if p[0] is None else p[0])
    return pieces, opened


def _set_kind(band_of: _Band, pieces: list[Piece], opened: bool, grid: np.ndarray, a: int, b: int,
              notes: list[str]) -> str:
    """'none', 'split', 'unbounded' or 'finite', with a note for the first and third."""
    span = _rng(band_of.to_x(grid[a]), band_of.to_x(grid[b]))
    if not pieces:
        notes.append(f"no x in the searched range {span} is consistent with this response")
        return "none"
    if len(pieces) > 1:
        return "split"
    if opened:
        edge = "the end of the searched range" if (a == 0 or b == grid.size - 1) else \
            "a turning point of the fitted curve"
        notes.append(f"the set reaches {edge} (searched {span}): that side is open")
        return "unbounded"
    return "finite"


def _rng(a: float, b: float) -> str:
    lo, hi = sorted((a, b))
    return f"{lo:.6g} … {hi:.6g}"


def inverse_predict(model: HandedModel, y: np.ndarray, *, replicates: int = 1,
                    covs: dict[str, np.ndarray] | None = None, level: float = 0.95,
                    user_w: np.ndarray | None = None, method: str = "auto") -> list[InverseResult]:
    """x̂ and its Fieller-type set for each response value (each a mean of ``replicates`` readings).

    ``method`` 'auto' uses the closed form for a straight line and the numeric solution
    otherwise; 'numeric' forces the grid solution (used to cross-check the closed form).
    """
    level = check_level(level)
    if isinstance(replicates, bool) or not isinstance(replicates, int) or replicates < 1:
        raise UsageError(f"replicates {replicates!r} must be a whole number ≥ 1 (readings averaged per value)")
    if method not in ("auto", "numeric"):
        raise UsageError(f"method {method!r} must be 'auto' or 'numeric'")
    ys = np.asarray(y, dtype=float)
    covs = covs or {}
    for cov in model.covariates:
        if cov.name not in covs:
            raise DataError(f"covariate {cov.name!r} is needed for inverse predictions; add the column to the table")
    if not model.response.is_identity:
        problem = model.response.domain_problem(ys, model.response_name, "y")
        if problem:
            raise DataError(problem.replace(" of those used", "") + "; the model's response transform needs them")
    tq = t_ppf(0.5 + level / 2, model.df_resid)
    with np.errstate(all="ignore"):
        if method == "auto" and model.is_line:
            return [_checked(r) for r in _closed_rows(model, ys, replicates, tq, user_w)]
        out = []
        for k, y0 in enumerate(ys):
            row_cov = {name: v if isinstance(v, OverCategories) else np.asarray(v)[k:k + 1]
                       for name, v in covs.items()}
            w = None if user_w is None else float(user_w[k])
            out.append(_checked(_numeric_row(model, float(y0), replicates, tq, row_cov, w)))
    return out


def _checked(r: InverseResult) -> InverseResult:
    """The result, or an 'overflow' result when one of its numbers left the floating-point range
    (a null end must only ever mean an open side)."""
    import dataclasses

    numbers = [r.x, r.s_x0, *(v for piece in r.pieces for v in piece)]
    if all(v is None or math.isfinite(v) for v in numbers):
        return r
    note = ("the x that fits this response lies beyond the floating-point range (about 1.8e308): no number"
            + (f"; {r.note}" if r.note else ""))
    return dataclasses.replace(r, x=None, interval="overflow", low=None, high=None, pieces=(), s_x0=None,
                               outside_range=None, note=note, flag="overflow")
