"""SQL text for the group statistics: quoting, transforms and the two aggregate queries.

Everything here only writes SQL; nothing runs it. Identifiers are always quoted (``q``) and
data-derived strings enter as literals (``lit``). The queries are standard SQL (COUNT, SUM, AVG,
VAR_POP, COVAR_POP, MIN, MAX, LN, EXP, SQRT, CASE, COALESCE, LEFT JOIN), so another engine can
run them; the DuckDB study (``duckdb.py``) and its set-up scans (``scans.py``) use them.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ..errors import UsageError
from ..stats.transforms import Transform
from .dialect import DUCKDB, Dialect

__all__ = ["q", "lit", "transform_sql", "aggregate_sql", "series_sql", "centre_polynomial", "CentreCurve",
           "weighted_aggregate_sql", "weighted_series_sql"]


def q(name: str) -> str:
    """Quote an SQL identifier (DuckDB; other engines ask their :class:`Dialect`)."""
    return DUCKDB.quote(name)


def lit(text: str) -> str:
    """Quote an SQL string literal (DuckDB; other engines ask their :class:`Dialect`)."""
    return DUCKDB.literal(text)


def shifted_transforms(todo: Sequence[Transform], y_mean: float) -> tuple[list[float], list[str]]:
    """Each transform's value at the mean of y (0 where it is not finite) and the SQL of g(y) minus
    it: aggregates of the shifted responses never carry a large offset (added back afterwards)."""
    y_ref = np.array([float(y_mean)])
    shifts = [float(np.asarray(t.forward(y_ref), dtype=float)[0]) for t in todo]
    shifts = [v if math.isfinite(v) else 0.0 for v in shifts]
    return shifts, [f"({transform_sql(t, 'y')} - {v!r})" for t, v in zip(todo, shifts, strict=True)]


def transform_sql(t: Transform, col: str = "y") -> str:
    """Standard-SQL expression of g(col)."""
    try:
        return t.sql(col)
    except ValueError as exc:
        raise UsageError(str(exc)) from None


def aggregate_sql(source: str, keys: Sequence[str], nums: Sequence[str], zs: Sequence[str],
                  d: Dialect = DUCKDB) -> str:
    """The GROUP BY query: per finest group, count, means, co-moments and extremes.

    ``source`` is a table or sub-query with a column ``y`` and the key and numeric columns;
    ``zs`` are SQL expressions of the transformed response. Standard aggregates only.
    """
    q = d.quote
    parts = ["COUNT(*) AS n"]
    for i, b in enumerate(nums):
        parts.append(f"AVG({q(b)}) AS b{i}_m")
    for i, b in enumerate(nums):
        for j in range(i, len(nums)):
            parts.append(f"COVAR_POP({q(b)}, {q(nums[j])}) AS bb{i}_{j}")
    for k, z in enumerate(zs):
        parts.append(f"AVG({z}) AS z{k}_m")
        parts.append(f"VAR_POP({z}) AS z{k}_v")
        for i, b in enumerate(nums):
            parts.append(f"COVAR_POP({z}, {q(b)}) AS z{k}_b{i}")
        parts.append(f"MIN({z}) AS z{k}_lo")
        parts.append(f"MAX({z}) AS z{k}_hi")
    key_list = ", ".join(q(k) for k in keys)
    return f"SELECT {key_list}, {', '.join(parts)} FROM {source} GROUP BY {key_list} ORDER BY {key_list}"


def _with_centre(sel: str, source: str, on: str, shift_table: str | None, fallback_centre: float,
                 curve: CentreCurve | None) -> str:
    """The rows of ``source`` (columns ``sel``) with each group's centre of ln y as ``bw_c``: the
    polynomial ``curve`` in x, else a LEFT JOIN on the group keys to ``shift_table``."""
    if curve is not None:
        return f"SELECT {sel}, {curve.sql()} AS bw_c FROM {source} AS r"
    return (f"SELECT {sel}, COALESCE(s.bw_c, {fallback_centre!r}) AS bw_c "
            f"FROM {source} AS r LEFT JOIN {shift_table} AS s ON {on}")


def series_sql(source: str, keys: Sequence[str], nums: Sequence[str], t_ref: Sequence[float], big_m: int,
               big_k: int, shift_table: str | None, fallback_centre: float, curve: CentreCurve | None = None,
               d: Dialect = DUCKDB) -> str:
    """The one-scan GROUP BY query: per finest group, count, extremes of y, covariate sums and
    cross-products, and power sums Σd^k (k ≤ M), Σd^k·t (k ≤ K) of d = ln y − centre.

    ``source`` has columns y, the keys and the numeric covariates; ``shift_table`` has the keys
    and a column ``bw_c`` (the group's centre; groups missing from it use ``fallback_centre``).
    Instead of the table, ``curve`` may give the centre as a polynomial in x; the query then
    leaves the centre out of its results (``CentreCurve.at`` gives it), else it returns it as ``centre``.
    Dirty data are recognised without a per-row check column: d is NULL where y is missing or
    ≤ 0 (``nchk`` counts the rows where it is not), ``nt{i}`` counts each covariate's present
    cells, a NaN or infinite y or covariate makes Σd or the covariate's sum non-finite, and a
    bad x shows as a non-finite group key. Standard SQL only.
    """
    q = d.quote
    on = " AND ".join(f"r.{q(k)} = s.{q(k)}" for k in keys)
    sel = ", ".join([*(f"r.{q(k)}" for k in keys), "r.y", *(f"r.{q(b)}" for b in nums)])
    joined = _with_centre(sel, source, on, shift_table, fallback_centre, curve)
    cols = [*(q(k) for k in keys), "y", "bw_c", *(f"({q(b)} - {ref!r}) AS {q(b)}" for b, ref in zip(nums, t_ref, strict=True)),
            "CASE WHEN y > 0 THEN LN(y) - bw_c END AS bw_d1"]
    query = f"SELECT {', '.join(cols)} FROM ({joined}) AS bw_j"
    have = 1
    while have < big_m:  # powers by repeated squaring: each level adds d^(h+1) … d^(2h)
        new = [f"bw_d{have} * bw_d{k - have} AS bw_d{k}" for k in range(have + 1, min(2 * have, big_m) + 1)]
        query = f"SELECT *, {', '.join(new)} FROM ({query}) AS bw_p{have}"
        have = min(2 * have, big_m)
    aggs = ["COUNT(*) AS n", "COUNT(bw_d1) AS nchk", "MIN(y) AS ylo", "MAX(y) AS yhi",
            *(["MIN(bw_c) AS centre"] if curve is None else [])]
    for i, b in enumerate(nums):
        aggs += [f"COUNT({q(b)}) AS nt{i}", f"SUM({q(b)}) AS t{i}"]
        aggs += [f"SUM({q(b)} * {q(nums[j])}) AS tt{i}_{j}" for j in range(i, len(nums))]
    aggs += [f"SUM(bw_d{k}) AS s{k}" for k in range(1, big_m + 1)]
    for i, b in enumerate(nums):
        aggs += [f"SUM(bw_d{k} * {q(b)}) AS c{i}_{k}" for k in range(1, big_k + 1)]
    key_list = ", ".join(q(k) for k in keys)
    return f"SELECT {key_list}, {', '.join(aggs)} FROM ({query}) AS bw_q GROUP BY {key_list} ORDER BY {key_list}"


@dataclass(frozen=True)
class CentreCurve:
    """A cubic (or lower) in u = (x − centre)/scale: each replicate group's centre of ln y.

    The scan computes it per row as SQL (:meth:`sql`); :meth:`at` computes it for each group's x
    with the same operations in the same order (IEEE arithmetic: the same bits), so the scan need
    not carry the centre back as an aggregate."""

    centre: float
    scale: float
    coef: tuple[float, ...]

    def sql(self) -> str:
        u_sql = f"((x - {self.centre!r}) / {self.scale!r})"
        expr = repr(self.coef[-1])
        for c in self.coef[-2::-1]:
            expr = f"({c!r} + {u_sql} * {expr})"
        return expr

    def at(self, x: np.ndarray) -> np.ndarray:
        u = (np.asarray(x, dtype=float) - self.centre) / self.scale
        out = np.full(u.shape, self.coef[-1])
        for c in self.coef[-2::-1]:
            out = c + u * out
        return out


def centre_polynomial(px: np.ndarray, lm: np.ndarray, w: np.ndarray, ls: np.ndarray) -> CentreCurve | None:
    """A cubic (or lower) in x through the first rows' group means of ln y, when it passes within
    a quarter of the smallest group spread of every one of them (a join on the group keys costs
    more than the polynomial); None otherwise."""
    spreads = ls[np.isfinite(ls) & (ls > 0)]
    if px.size < 1 or spreads.size == 0 or not np.isfinite(lm).all():
        return None
    centre, scale = float(np.average(px, weights=w)), float(np.ptp(px)) or 1.0
    u = (px - centre) / scale
    deg = min(3, px.size - 1)
    v = np.vander(u, deg + 1, increasing=True)
    sw = np.sqrt(w)
    coef = np.linalg.lstsq(v * sw[:, None], lm * sw, rcond=None)[0]
    if float(np.max(np.abs(v @ coef - lm))) > 0.25 * float(spreads.min()):
        return None
    return CentreCurve(centre, scale, tuple(float(c) for c in coef))



def weighted_aggregate_sql(source: str, keys: Sequence[str], nums: Sequence[str], zs: Sequence[str],
                           shifts: Sequence[float], weight: str, d: Dialect = DUCKDB) -> str:
    """The weighted GROUP BY query: per finest group, weighted sums about the group's own
    (unweighted) means, so no large offset meets a square.

    ``source`` has columns ``y``, the key and numeric columns and the weight column ``weight``
    (> 0); ``zs`` are SQL expressions of the transformed response (in ``y``) less ``shifts``. A sub-query gives
    each group's means of every z and numeric column (``bw_cz{k}``, ``bw_cb{i}``) and each z's
    population variance (``bw_vz{k}``); joined back on the keys, the outer query sums Σw, Σw·dz,
    Σw·dz², Σw·db, Σw·db·db′, Σw·dz·db with d the deviation from those means, the extremes of z,
    and the mean and population variance of √w·z (the spread test of a weighted fit). Standard
    SQL only; ``source`` is read twice.
    """
    q = d.quote
    key_list = ", ".join(q(k) for k in keys)
    inner = [*(f"AVG({z}) AS bw_cz{k}" for k, z in enumerate(zs)),
             *(f"VAR_POP({z}) AS bw_vz{k}" for k, z in enumerate(zs)),
             *(f"AVG({q(b)}) AS bw_cb{i}" for i, b in enumerate(nums))]
    centres = f"SELECT {key_list}, {', '.join(inner)} FROM {source} GROUP BY {key_list}"
    on = " AND ".join(f"r.{q(k)} = c.{q(k)}" for k in keys)
    carried = [*(f"r.{q(k)} AS {q(k)}" for k in keys), "r.y AS y", *(f"r.{q(b)} AS {q(b)}" for b in nums),
               f"r.{q(weight)} AS bw_w", *(f"c.bw_cz{k}, c.bw_vz{k}" for k in range(len(zs))),
               *(f"c.bw_cb{i}" for i in range(len(nums)))]
    joined = f"SELECT {', '.join(carried)} FROM {source} AS r JOIN ({centres}) AS c ON {on}"
    dz = [f"(({z}) - bw_cz{k})" for k, z in enumerate(zs)]
    db = [f"({q(b)} - bw_cb{i})" for i, b in enumerate(nums)]
    parts = ["COUNT(*) AS n", "SUM(bw_w) AS sw"]
    for i, b in enumerate(db):
        parts += [f"MAX(bw_cb{i}) AS cb{i}", f"SUM(bw_w * {b}) AS wb{i}"]
        parts += [f"SUM(bw_w * {b} * {db[j]}) AS wbb{i}_{j}" for j in range(i, len(db))]
    for k, z in enumerate(dz):
        parts += [f"MAX(bw_cz{k}) AS cz{k}", f"MAX(bw_vz{k}) AS vz{k}", f"SUM(bw_w * {z}) AS wz{k}",
                  f"SUM(bw_w * {z} * {z}) AS wzz{k}",
                  *(f"SUM(bw_w * {z} * {b}) AS wzb{k}_{i}" for i, b in enumerate(db)),
                  f"MIN({zs[k]}) AS z{k}_lo", f"MAX({zs[k]}) AS z{k}_hi",
                  f"AVG(SQRT(bw_w) * ({zs[k]} + {shifts[k]!r})) AS rz{k}_m",
                  f"VAR_POP(SQRT(bw_w) * ({zs[k]} + {shifts[k]!r})) AS rz{k}_v"]
    return (f"SELECT {key_list}, {', '.join(parts)} FROM ({joined}) AS bw_wj "
            f"GROUP BY {key_list} ORDER BY {key_list}")


def weighted_series_sql(source: str, keys: Sequence[str], nums: Sequence[str], t_ref: Sequence[float], big_m: int,
                        big_k: int, shift_table: str | None, fallback_centre: float, curve: CentreCurve | None,
                        weight: str, d: Dialect = DUCKDB) -> str:
    """The one-scan query of :func:`series_sql` for a table with a weights column ``weight``: per
    finest group the same count, extremes, centre and unweighted Σd^k (k ≤ M), and besides them
    Σw, Σ√w, Σ log w, the extremes of w, Σw·d^k and Σ√w·d^k (k ≤ M), the unweighted covariate sums
    and the weighted covariate sums, cross-products and Σw·d^k·t (k ≤ K). A weight that is missing
    or not finite makes ``bw_chk`` NULL or NaN, as a bad cell does; one ≤ 0 shows in the smallest w.
    """
    q = d.quote
    on = " AND ".join(f"r.{q(k)} = s.{q(k)}" for k in keys)
    sel = ", ".join([*(f"r.{q(k)}" for k in keys), "r.y", *(f"r.{q(b)}" for b in nums), f"r.{q(weight)} AS bw_w"])
    joined = _with_centre(sel, source, on, shift_table, fallback_centre, curve)
    chk = " + ".join(["y * 0", "x * 0", "bw_w * 0", *(f"{q(b)} * 0" for b in nums)])
    cols = [*(q(k) for k in keys), "y", "bw_c", "bw_w",
            *(f"({q(b)} - {ref!r}) AS {q(b)}" for b, ref in zip(nums, t_ref, strict=True)),
            "CASE WHEN bw_w > 0 THEN SQRT(bw_w) END AS bw_r", "CASE WHEN bw_w > 0 THEN LN(bw_w) END AS bw_lw",
            "CASE WHEN y > 0 THEN LN(y) - bw_c END AS bw_d1", f"({chk}) AS bw_chk"]
    query = f"SELECT {', '.join(cols)} FROM ({joined}) AS bw_j"
    have = 1
    while have < big_m:  # powers by repeated squaring, as in series_sql
        new = [f"bw_d{have} * bw_d{k - have} AS bw_d{k}" for k in range(have + 1, min(2 * have, big_m) + 1)]
        query = f"SELECT *, {', '.join(new)} FROM ({query}) AS bw_p{have}"
        have = min(2 * have, big_m)
    aggs = ["COUNT(*) AS n", "COUNT(bw_chk) AS nchk", "MIN(y) AS ylo", "MAX(y) AS yhi",
            *(["MIN(bw_c) AS centre"] if curve is None else []), "MIN(bw_w) AS wlo", "MAX(bw_w) AS whi",
            "SUM(bw_w) AS sw", "SUM(bw_r) AS sr", "SUM(bw_lw) AS slw"]
    aggs += ["SUM(bw_d1 + bw_chk) AS s1", *(f"SUM(bw_d{k}) AS s{k}" for k in range(2, big_m + 1))]
    aggs += [f"SUM(bw_w * bw_d{k}) AS ws{k}" for k in range(1, big_m + 1)]
    aggs += [f"SUM(bw_r * bw_d{k}) AS rs{k}" for k in range(1, big_m + 1)]
    for i, b in enumerate(nums):
        aggs += [f"SUM({q(b)}) AS t{i}", f"SUM(bw_w * {q(b)}) AS wt{i}"]
        aggs += [f"SUM(bw_w * {q(b)} * {q(nums[j])}) AS wtt{i}_{j}" for j in range(i, len(nums))]
        aggs += [f"SUM(bw_w * bw_d{k} * {q(b)}) AS wc{i}_{k}" for k in range(1, big_k + 1)]
    key_list = ", ".join(q(k) for k in keys)
    return f"SELECT {key_list}, {', '.join(aggs)} FROM ({query}) AS bw_q GROUP BY {key_list} ORDER BY {key_list}"
