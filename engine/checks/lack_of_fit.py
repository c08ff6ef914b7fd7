"""The pure-error lack-of-fit test and the nested F test of a model against a richer one.

Sources: Kutner, Nachtsheim, Neter & Li (2005) §3.7 for the pure-error test.
"""

from __future__ import annotations

import math

from ..stats.dist import f_sf
from ..stats.groups import GroupStats
from ..stats.results import Fit
from .results import LackOfFit, NestedTest

__all__ = ["lack_of_fit", "nested_f", "nested_test"]


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


def nested_test(sse_r: float, df_r: int, sse_f: float, df_f: int, kind: str = "nested F",
                approximate: bool = False, floor: float = 0.0) -> NestedTest:
    """``nested_f`` as a test between two models (its own type, not a lack-of-fit result)."""
    t = nested_f(sse_r, df_r, sse_f, df_f, kind, approximate, floor)
    if not t.testable:
        return NestedTest(False, t.reason, kind)
    return NestedTest(True, None, kind, t.ss_lack, t.ss_pure, t.df_lack, t.df_pure, t.f, t.p, t.approximate)


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
