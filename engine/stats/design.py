"""Polynomial designs on centred and scaled powers, and the labels of their terms."""

from __future__ import annotations

import numpy as np

from .linalg import Column, Design, poly_map

__all__ = ["poly_design", "power_label"]


_SUPERSCRIPT = str.maketrans("0123456789", "⁰¹²³⁴⁵⁶⁷⁸⁹")


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
