"""Small numerical routines the engine needs without importing scipy.optimize or
scipy.interpolate (about 0.2 s to import): a bracketing root finder, a not-a-knot cubic spline
with its tridiagonal solver, and golden-section maximisation.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

__all__ = ["brentq", "CubicSpline", "solve_tridiagonal", "golden_max"]


def brentq(f: Callable[[float], float], xa: float, xb: float, xtol: float = 2e-12,
            rtol: float = 4 * float(np.finfo(float).eps), maxiter: int = 100) -> float:
    """Root of ``f`` bracketed by [xa, xb] by Brent's method (inverse quadratic interpolation,
    secant and bisection steps), step for step as ``scipy.optimize.brentq``.

    Raises ValueError when the ends do not bracket a sign change or ``f`` returns NaN, and
    RuntimeError after ``maxiter`` steps.
    """
    def call(x: float) -> float:
        fx = float(f(x))
        if math.isnan(fx):
            raise ValueError(f"the function is undefined (NaN) at {x:.6g}")
        return fx

    xpre, xcur = float(xa), float(xb)
    xblk = fblk = spre = scur = 0.0
    fpre, fcur = call(xpre), call(xcur)
    if fpre == 0:
        return xpre
    if fcur == 0:
        return xcur
    if math.copysign(1.0, fpre) == math.copysign(1.0, fcur):
        raise ValueError("the ends of the bracket give values of the same sign")
    for _ in range(maxiter):
        if fpre != 0 and fcur != 0 and math.copysign(1.0, fpre) != math.copysign(1.0, fcur):
            xblk, fblk = xpre, fpre
            spre = scur = xcur - xpre
        if abs(fblk) < abs(fcur):  # keep the best point in xcur
            xpre, xcur, xblk = xcur, xblk, xcur
            fpre, fcur, fblk = fcur, fblk, fcur
        delta = (xtol + rtol * abs(xcur)) / 2
        sbis = (xblk - xcur) / 2
        if fcur == 0 or abs(sbis) < delta:
            return xcur
        if abs(spre) > delta and abs(fcur) < abs(fpre):
            if xpre == xblk:  # secant
                stry = -fcur * (xcur - xpre) / (fcur - fpre)
            else:  # inverse quadratic
                dpre = (fpre - fcur) / (xpre - xcur)
                dblk = (fblk - fcur) / (xblk - xcur)
                stry = -fcur * (fblk * dblk - fpre * dpre) / (dblk * dpre * (fblk - fpre))
            if 2 * abs(stry) < min(abs(spre), 3 * abs(sbis) - delta):
                spre, scur = scur, stry
            else:
                spre = scur = sbis
        else:
            spre = scur = sbis
        xpre, fpre = xcur, fcur
        xcur += scur if abs(scur) > delta else (delta if sbis > 0 else -delta)
        fcur = call(xcur)
    raise RuntimeError(f"the root search did not converge in {maxiter} steps")


class CubicSpline:
    """Cubic interpolating spline with not-a-knot ends through (x, y), x increasing, 4+ points;
    the values of ``scipy.interpolate.CubicSpline(x, y)`` (same system, same elimination order)."""

    def __init__(self, x: np.ndarray, y: np.ndarray) -> None:
        x = np.asarray(x, dtype=float)
        y = np.asarray(y, dtype=float)
        if not np.isfinite(y).all():
            raise ValueError("spline values must be finite")
        n = x.size
        dx = np.diff(x)
        slope = np.diff(y) / dx
        # first derivatives s solve sub[i]·s[i−1] + diag[i]·s[i] + sup[i]·s[i+1] = b[i]
        sub, diag, sup, b = np.zeros(n), np.zeros(n), np.zeros(n), np.empty(n)
        diag[1:-1] = 2 * (dx[:-1] + dx[1:])
        sup[1:-1] = dx[:-1]
        sub[1:-1] = dx[1:]
        b[1:-1] = 3 * (dx[1:] * slope[:-1] + dx[:-1] * slope[1:])
        d = x[2] - x[0]
        diag[0], sup[0] = dx[1], d
        b[0] = ((dx[0] + 2 * d) * dx[1] * slope[0] + dx[0] ** 2 * slope[1]) / d
        d = x[-1] - x[-3]
        diag[-1], sub[-1] = dx[-2], d
        b[-1] = (dx[-1] ** 2 * slope[-2] + (2 * d + dx[-1]) * dx[-2] * slope[-1]) / d
        s = solve_tridiagonal(sub, diag, sup, b)
        t = (s[:-1] + s[1:] - 2 * slope) / dx
        self._x = x
        self._c = np.array([t / dx, (slope - s[:-1]) / dx - t, s[:-1], y[:-1]])

    def __call__(self, v: np.ndarray | float) -> np.ndarray:
        v = np.asarray(v, dtype=float)
        i = np.clip(np.searchsorted(self._x, v, side="right") - 1, 0, self._x.size - 2)
        h = v - self._x[i]
        c = self._c
        return c[3, i] + c[2, i] * h + c[1, i] * (h * h) + c[0, i] * (h * h * h)


def solve_tridiagonal(sub: np.ndarray, diag: np.ndarray, sup: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Gaussian elimination with partial pivoting on a tridiagonal system (a row swap adds a
    second super-diagonal), then back substitution column by column."""
    n = diag.size
    u0, u1, u2 = diag.tolist(), sup.tolist(), [0.0] * n
    low, rhs = sub.tolist(), b.tolist()
    for j in range(n - 1):
        if abs(low[j + 1]) > abs(u0[j]):  # the row below holds the larger pivot: swap
            last = j + 1 == n - 1
            u0[j], u1[j], u2[j], low[j + 1], u0[j + 1], nxt = (
                low[j + 1], u0[j + 1], 0.0 if last else u1[j + 1], u0[j], u1[j], u2[j])
            if not last:
                u1[j + 1] = nxt
            rhs[j], rhs[j + 1] = rhs[j + 1], rhs[j]
        m = low[j + 1] / u0[j]
        u0[j + 1] = u0[j + 1] - m * u1[j]
        if j + 1 < n - 1:
            u1[j + 1] = u1[j + 1] - m * u2[j]
        rhs[j + 1] = rhs[j + 1] - m * rhs[j]
    for i in range(n - 1, -1, -1):
        rhs[i] = rhs[i] / u0[i]
        if i >= 1:
            rhs[i - 1] = rhs[i - 1] - rhs[i] * u1[i - 1]
        if i >= 2:
            rhs[i - 2] = rhs[i - 2] - rhs[i] * u2[i - 2]
    return np.array(rhs)


def golden_max(f, a: float, b: float, tol: float = 1e-9) -> float:
    """Maximiser of a unimodal ``f`` on [a, b] by golden-section search (NaN-safe: the left part
    is kept unless the right probe is clearly better)."""
    g = (math.sqrt(5.0) - 1.0) / 2.0
    c, d = b - g * (b - a), a + g * (b - a)
    fc, fd = f(c), f(d)
    while b - a > tol:
        if not (fc < fd):
            b, d, fd = d, c, fc
            c = b - g * (b - a)
            fc = f(c)
        else:
            a, c, fc = c, d, fd
            d = a + g * (b - a)
            fd = f(d)
    return 0.5 * (a + b)
