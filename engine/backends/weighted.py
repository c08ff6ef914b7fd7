"""The user's weights column (``--weights COL``) in the SQL studies (DuckDB and Spark).

The in-memory study is the reference (``engine.stats.study``): rows the response, predictor and
covariates keep must have a positive finite weight, else one line names the column, the kind and
count of bad values and the first rows; the weights must have a size whose sums stay exact. Here
one scan counts the same things (and a second, only when some value is bad, finds the first row
numbers). On clean rows with positive weights one scan (``weighted_series_sql``) collects per finest
group the power sums of d = ln y − centre three ways — weighted by w, unweighted, weighted by √w —
which :class:`WeightedSeries` turns into the weighted moments of every transform, the unweighted
level means (the power-of-mean rule) and the moments of √w·z (the spread test). Otherwise, and for
a transform the series cannot hold to its tolerance, each batch of transforms is one exact query
(``weighted_aggregate_sql``: Σw, Σw·z, Σw·z², Σw·z·base about each finest group's own means). Units
pool into groups with their weight sums in ``SqlStudy._pool``; the spread test of a weighted node is
Bartlett's on √w·z.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from ..errors import DataError, UsageError
from ..read.columns import bad_values_text
from ..read.usable import check_magnitude
from ..stats.power_sums import GroupSeries
from ..stats.results import SideTest
from ..stats.spread import bartlett_from_groups
from ..stats.transforms import Transform
from .scans import floats
from .sql_text import shifted_transforms, weighted_aggregate_sql, weighted_series_sql

__all__ = ["WEIGHT", "check_weights", "weights_in_range", "weighted_moments", "weighted_spread", "unweighted_request",
           "WeightedSeries", "weighted_series_setup"]

WEIGHT = "bw_w"
"""The weights column's name inside the queries (``bw_clean``, ``bw_shifted``)."""

_SHOW_ROWS = 5


def check_weights(con: Any, table: Any, src: str, case: str, column: str) -> tuple[float, float, float]:
    """Refuse the weights of the rows the other columns keep as the in-memory study does; else
    (smallest weight, largest weight, Σ log w) over those rows. ``table`` is the study's
    ``_SqlTable`` (it reads a column as the memory engine does)."""
    value, missing, non_num, non_fin = table.num_expr(column)
    usable = f"NOT ({missing} OR {non_num} OR {non_fin})"
    nonpos = f"({usable} AND {value} <= 0)"
    row = _only_row(con.execute(
        f"SELECT COUNT(*) FILTER (WHERE {missing}), COUNT(*) FILTER (WHERE {non_num}), "
        f"COUNT(*) FILTER (WHERE {non_fin}), COUNT(*) FILTER (WHERE {nonpos}), "
        f"MIN({value}) FILTER (WHERE {usable}), MAX({value}) FILTER (WHERE {usable}), "
        f"SUM(LN({value})) FILTER (WHERE {usable} AND {value} > 0) FROM {src} WHERE {case} = -1"))
    n_miss, n_text, n_inf, n_le0 = (int(v or 0) for v in row[:4])
    if n_miss or n_text or n_inf:
        rows = _first_rows(con, table.d, src, case, f"({missing} OR {non_num} OR {non_fin})")
        kinds = bad_values_text(np.ones(n_miss, bool), np.ones(n_text, bool), np.ones(n_inf, bool))
        raise DataError(f"weights column {column!r} has {kinds} (rows {rows}); fill them or remove those rows")
    if n_le0:
        rows = _first_rows(con, table.d, src, case, nonpos)
        raise DataError(f"weights must be > 0; column {column!r} has {n_le0} value(s) ≤ 0 (rows {rows}); "
                        "fix or remove those rows")
    if row[4] is None:  # no row kept: the caller's row count says why
        return math.nan, math.nan, 0.0
    return float(row[4]), float(row[5]), float(row[6] or 0.0)


def _only_row(cursor: Any) -> tuple:
    """The single row of an aggregate, fetched to the end (DuckDB refuses new work on a
    connection with an unfinished result)."""
    rows = cursor.fetchall()
    if not rows:
        raise DataError("the SQL engine returned no result; check the input files")
    return tuple(rows[0])


def _first_rows(con: Any, d: Any, src: str, case: str, cond: str) -> str:
    """The first data-row numbers (1-based, in reading order) of kept rows where ``cond`` holds."""
    got = con.execute(f"SELECT bw_row FROM (SELECT *, {d.row_number()} AS bw_row FROM {src}) AS bw_numbered "
                      f"WHERE {case} = -1 AND {cond} ORDER BY bw_row LIMIT {_SHOW_ROWS}").fetchall()
    return ", ".join(str(int(r[0])) for r in got)


def weights_in_range(lo: float, hi: float, column: str) -> None:
    """The weights' sizes must keep sums exact (the in-memory rule, after the spread checks)."""
    check_magnitude(lo, hi, column, "weights")


def weighted_moments(study: Any, todo: Sequence[Transform]) -> dict[tuple, dict]:
    """One weighted scan for several response transforms: per unit and transform, Σw, the weighted
    mean, sum of squares and co-moments with the numeric covariates, the extremes, and the
    unweighted mean and sum of squares of z and of √w·z (the spread tests)."""
    info = study._info
    keys = ["x", *info["cat_sql"]]
    nums = info["num_sql"]
    shifts, zs = shifted_transforms(todo, info["y_mean"])
    sql = weighted_aggregate_sql("bw_shifted", keys, nums, zs, shifts, WEIGHT, study.dialect)
    study.exact_scans += 1
    study._say(f"scanning {study.n:,} rows for {len(todo)} weighted response transform(s)")
    res = study.con.execute(sql).fetchnumpy()
    study._say("")
    un, sw = floats(res["n"]), floats(res["sw"])
    if un.shape[0] != info["unit_n"].shape[0]:
        raise DataError("the data changed between scans (group count differs); run again")
    nb = len(nums)
    wb = np.column_stack([floats(res[f"wb{i}"]) for i in range(nb)]) if nb else np.zeros((un.size, 0))
    bmean = np.column_stack([floats(res[f"cb{i}"]) + wb[:, i] / sw + info["num_mean"][info["num_cols"][i]]
                             for i in range(nb)]) if nb else np.zeros((un.size, 0))
    bb = np.zeros((un.size, nb, nb))
    for i in range(nb):
        for j in range(i, nb):
            bb[:, i, j] = bb[:, j, i] = floats(res[f"wbb{i}_{j}"]) - wb[:, i] * wb[:, j] / sw
    out: dict[tuple, dict] = {}
    for k, t in enumerate(todo):
        wz = floats(res[f"wz{k}"])
        zb = np.column_stack([floats(res[f"wzb{k}_{i}"]) - wz * wb[:, i] / sw for i in range(nb)]) if nb \
            else np.zeros((un.size, 0))
        centre = floats(res[f"cz{k}"]) + shifts[k]
        out[t.key()] = {
            "mean": centre + wz / sw, "ss": np.maximum(floats(res[f"wzz{k}"]) - wz * wz / sw, 0.0), "zb": zb,
            "lo": floats(res[f"z{k}_lo"]) + shifts[k], "hi": floats(res[f"z{k}_hi"]) + shifts[k],
            "bmean": bmean, "bb": bb, "wsum": sw,
            "unweighted": {"mean": centre, "ss": np.nan_to_num(floats(res[f"vz{k}"])) * un,
                           "lo": floats(res[f"z{k}_lo"]) + shifts[k], "hi": floats(res[f"z{k}_hi"]) + shifts[k]},
            "root_w": (floats(res[f"rz{k}_m"]), np.nan_to_num(floats(res[f"rz{k}_v"])) * un),
        }
    return out


def unweighted_request(mom: dict, bases_key: Any) -> dict:
    """The unweighted unit moments of a weighted scan (level means for the power-of-mean rule);
    co-moments with numeric covariates are not in it."""
    if bases_key and bases_key[0] == "nums" and bases_key[1]:
        raise UsageError("unweighted statistics with numeric covariates on a weighted table need the rows; "
                         "use --engine memory")
    return mom["unweighted"]


def weighted_spread(study: Any, tkey: Any, wkey: Any, name: str) -> SideTest:
    """Bartlett's test across x levels for a weighted study: of z when ``wkey`` is None (the
    check, as in memory), else of √w·z, w the user's weights times the node's level weights."""
    t = Transform(*tkey)
    study._scan([t])
    mom = study._moments[t.key()]
    if wkey is None:
        mean, ss = mom["unweighted"]["mean"], mom["unweighted"]["ss"]
    else:
        mean, ss = mom["root_w"]
    level_w = np.ones(study.c)
    if wkey is not None and wkey != study.weights_name:
        hit = study.cache_get(wkey)  # the node's (rows, key, level weights), cached by the scoring
        if hit is None:
            return SideTest(name, False, reason="the level weights of this node are not known to the SQL engine")
        level_w = np.asarray(hit[2], dtype=float)
    un = study._info["unit_n"]
    codes = study.x_codes
    count = np.bincount(codes, weights=un, minlength=study.c)
    level_mean = np.bincount(codes, weights=un * mean, minlength=study.c) / count
    dev = mean - level_mean[codes]
    level_ss = np.bincount(codes, weights=ss + un * dev * dev, minlength=study.c)
    return bartlett_from_groups(count, level_ss * level_w, name)


class WeightedSeries:
    """Three sets of per-unit power sums of d = ln y − centre from the one weighted scan: weighted by
    w (the fit), unweighted (level means for the power-of-mean rule, the check's spread test) and by
    √w (the spread test of √w·z). ``moments`` answers like :meth:`GroupSeries.moments`, with the
    extras :func:`weighted_moments` gives, or None when any of the three series is not exact enough."""

    def __init__(self, weighted: GroupSeries, plain: GroupSeries, root: GroupSeries, sw: np.ndarray,
                 sr: np.ndarray) -> None:
        self.weighted, self.plain, self.root = weighted, plain, root
        self.sw, self.sr = sw, sr

    def moments(self, t: Transform, tol: float) -> dict | None:
        """Weighted unit moments of g(y), or None (the caller then scans g exactly)."""
        mw = self.weighted.moments(t, tol)
        mu = None if mw is None else self.plain.moments(t, tol)
        mr = None if mu is None else self.root.moments(t, tol)
        if mw is None or mu is None or mr is None:
            return None
        n = self.plain.n
        root_sum = self.sr * mr["mean"]  # Σ√w·z per unit
        wzz = mw["ss"] + self.sw * mw["mean"] ** 2  # Σw·z²
        root_ss = np.maximum(wzz - root_sum * root_sum / n, 0.0)
        return {**mw, "wsum": self.sw,
                "unweighted": {"mean": mu["mean"], "ss": mu["ss"], "lo": mu["lo"], "hi": mu["hi"]},
                "root_w": (root_sum / n, root_ss)}


def weighted_series_setup(con: Any, cat_cols: list[str], num_cols: list[str], cat_missing: set[str],
                          progress: Any, d: Any) -> dict | None:
    """The facts of :func:`engine.backends.scans.series_setup` from one weighted scan, or None when
    the data need the exact path (a bad cell, y ≤ 0, a weight that is not positive and finite)."""
    from .scans import _clean_categories, one_scan, scan_facts

    scan = one_scan(con, cat_cols, num_cols, progress, d, "weighted group sums",
                    lambda keys, t_ref, big_m, big_k, fallback, curve: weighted_series_sql(
                        "bw_all", keys, num_cols, t_ref, big_m, big_k, "bw_shift", fallback, curve, WEIGHT, d))
    if scan is None:
        return None
    res, y_ref, t_ref, big_m, big_k = scan
    # the weighted scan keeps its per-row check column (bw_chk: NULL or NaN at any bad cell, in
    # nchk and s1), so no per-covariate counts are needed: nb = 0
    cat_vals = _clean_categories(res, cat_cols, cat_missing, 0)
    wlo, whi = floats(res["wlo"]), floats(res["whi"])
    if cat_vals is None or not (np.isfinite(whi).all() and (wlo > 0).all()):
        con.execute(f"{d.drop} bw_shift")
        return None
    series = _three_series(res, len(num_cols), big_m, big_k, t_ref)
    facts = scan_facts(res, y_ref, t_ref, num_cols, cat_vals, series, series.weighted, float(floats(res["sw"]).sum()))
    return facts | {"weights": (float(wlo.min()), float(whi.max()), float(floats(res["slw"]).sum()))}


def _three_series(res: dict, nb: int, big_m: int, big_k: int, t_ref: np.ndarray) -> WeightedSeries:
    """The weighted, unweighted and √w-weighted :class:`GroupSeries` of the weighted scan."""
    n_unit, sw, sr = floats(res["n"]), floats(res["sw"]), floats(res["sr"])
    centre, ylo, yhi = floats(res["centre"]), floats(res["ylo"]), floats(res["yhi"])
    u = n_unit.size
    tsum = np.column_stack([floats(res[f"wt{i}"]) for i in range(nb)]) if nb else np.zeros((u, 0))
    tt = np.zeros((u, nb, nb))
    cross = np.zeros((u, nb, big_k))
    for i in range(nb):
        for j in range(i, nb):
            tt[:, i, j] = tt[:, j, i] = floats(res[f"wtt{i}_{j}"])
        for k in range(1, big_k + 1):
            cross[:, i, k - 1] = floats(res[f"wc{i}_{k}"])

    def sums(prefix: str) -> np.ndarray:
        return np.column_stack([floats(res[f"{prefix}{k}"]) for k in range(1, big_m + 1)])

    none = (np.zeros((u, 0, 0)), np.zeros((u, 0)), np.zeros((u, 0, 0)))
    weighted = GroupSeries(sw, centre, sums("ws"), cross, tsum, tt, ylo, yhi, np.asarray(t_ref, dtype=float))
    plain = GroupSeries(n_unit, centre, sums("s"), *none, ylo, yhi, np.zeros(0))
    root = GroupSeries(sr, centre, sums("rs"), *none, ylo, yhi, np.zeros(0))
    return WeightedSeries(weighted, plain, root, sw, sr)
