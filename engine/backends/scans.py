"""The DuckDB study's set-up scans: the one-scan power sums on clean data, the exact path otherwise.

On clean data with y > 0 a prefix of the rows places each group's centre of log y and one scan
(``series_sql``) gives every group's power sums; otherwise three scans give the cleaning counts,
the ranges and domains, and the groups. Both return the same dictionary of facts.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np

from ..errors import DataError
from ..read.cleaning import DropCount
from ..stats.power_sums import (
    GRID_END,
    GRID_TOL,
    SERIES_K_MAX,
    SERIES_ORDERS,
    SERIES_TOL,
    GroupSeries,
    choose_orders,
    series_helps,
)
from ..stats.transforms import IDENTITY, RECIPROCAL, SQRT, Transform
from .dialect import DUCKDB, Dialect
from .sql_text import CentreCurve, centre_polynomial, series_sql

__all__ = ["series_setup", "exact_setup", "floats", "one_row", "one_scan", "scan_facts", "PREFIX_ROWS"]

ProgressFn = Callable[[str], None]


PREFIX_ROWS = 1 << 16
"""Rows read from the start of the data to place each replicate group's series centre."""


def series_setup(con: Any, cat_cols: list[str], num_cols: list[str], cat_missing: set[str],
                 progress: ProgressFn | None, d: Dialect = DUCKDB) -> dict | None:
    """Everything the study needs from one scan, or None when the data need the exact path
    (missing or non-finite cells, a response ≤ 0, nothing in the first rows)."""
    scan = one_scan(con, cat_cols, num_cols, progress, d, "group sums",
                    lambda keys, t_ref, big_m, big_k, fallback, curve: series_sql(
                        "bw_all", keys, num_cols, t_ref, big_m, big_k, "bw_shift", fallback, curve, d))
    if scan is None:
        return None
    res, y_ref, t_ref, big_m, big_k = scan
    cat_vals = _clean_categories(res, cat_cols, cat_missing, len(num_cols))
    if cat_vals is None:
        con.execute(f"{d.drop} bw_shift")
        return None
    series = _group_series(res, len(num_cols), big_m, big_k, t_ref)
    return scan_facts(res, y_ref, t_ref, num_cols, cat_vals, series, series, float(floats(res["n"]).sum()))


def scan_facts(res: dict, y_ref: float, t_ref: np.ndarray, num_cols: list[str], cat_vals: dict[str, np.ndarray],
               series: Any, covariate_series: GroupSeries, covariate_n: float) -> dict:
    """The study's facts from a clean one-scan result (plain or weighted): counts, Σ ln y, ranges,
    the covariates' means and constancy (from ``covariate_series`` over total weight ``covariate_n``)."""
    n_unit = floats(res["n"])
    n = int(n_unit.sum())
    slog = float((floats(res["s1"]) + n_unit * floats(res["centre"])).sum())
    num_mean = {b: float(floats(res[f"t{i}"]).sum() / n + t_ref[i]) for i, b in enumerate(num_cols)}
    return {"n": n, "n_read": n, "drops": (), "y_min": float(floats(res["ylo"]).min()),
            "y_max": float(floats(res["yhi"]).max()), "y_le0": 0, "y_eq0": 0, "y_lt0": 0, "slog": slog,
            "slogabs": slog, "num_constant": _constant_covariates(covariate_series, num_cols, t_ref, covariate_n),
            "num_mean": num_mean, "y_mean": y_ref, "units": {"x": floats(res["x"]), "n": n_unit, **cat_vals},
            "series": series}


def one_scan(con: Any, cat_cols: list[str], num_cols: list[str], progress: ProgressFn | None, d: Dialect,
             what: str, sql_for: Callable[..., str]) -> tuple[dict, float, np.ndarray, int, int] | None:
    """Plan the one scan from the first rows and run it: the result (with each group's centre of
    ln y as ``centre``), the reference y and covariate values and the orders (M, K); None when the
    series cannot serve. ``sql_for(keys, t_ref, M, K, fallback_centre, curve)`` writes the query
    (plain or weighted)."""
    keys = ["x", *cat_cols]
    plan = _series_plan(con, keys, cat_cols, num_cols, progress, d)
    if plan is None:
        return None
    fallback, y_ref, t_ref, big_m, big_k, curve = plan
    if progress:
        progress(f"scanning rows: {what} (one pass)")
    res = con.execute(sql_for(keys, [float(v) for v in t_ref], big_m, big_k, fallback, curve)).fetchnumpy()
    # the curve at each group's x: the scan computed the same numbers per row; else the joined centre
    res["centre"] = floats(res["centre"]) if curve is None else curve.at(floats(res["x"]))
    if progress:
        progress("")
    return res, y_ref, t_ref, big_m, big_k


def _series_plan(con: Any, keys: list[str], cat_cols: list[str], num_cols: list[str], progress: ProgressFn | None,
                 d: Dialect) -> tuple[float, float, np.ndarray, int, int, CentreCurve | None] | None:
    """From the first rows: each group's centre of log y (a polynomial in x, or the table
    ``bw_shift``), the reference values and the series orders; None when the series cannot serve."""
    q = d.quote
    key_list = ", ".join(q(k) for k in keys)
    ln = "CASE WHEN y > 0 THEN LN(y) END"
    parts = ["COUNT(*) AS n", "MIN(y) AS ylo", "AVG(y) AS ym", f"AVG({ln}) AS lm", f"STDDEV_POP({ln}) AS ls",
             f"MIN({ln}) AS llo", f"MAX({ln}) AS lhi"]
    parts += [f"AVG({q(b)}) AS m{i}" for i, b in enumerate(num_cols)]
    if progress:
        progress("reading the first rows: group centres")
    pre = con.execute(f"SELECT {key_list}, {', '.join(parts)} FROM (SELECT * FROM bw_clean LIMIT {PREFIX_ROWS}) "
                      f"AS bw_pre GROUP BY {key_list}").fetchnumpy()
    ylo_pre = floats(pre["ylo"])
    if ylo_pre.size == 0 or not (ylo_pre > 0).all():
        return None
    w = floats(pre["n"])
    lm = floats(pre["lm"])
    fallback = float((w * lm).sum() / w.sum())
    y_ref = float((w * floats(pre["ym"])).sum() / w.sum())
    t_ref = np.array([float((w * floats(pre[f"m{i}"])).sum() / w.sum()) for i in range(len(num_cols))])
    ls = floats(pre["ls"])
    sd = float(np.nanmax(ls)) if np.isfinite(ls).any() else 0.0
    spread = float(np.nanmax(np.maximum(floats(pre["lhi"]) - lm, lm - floats(pre["llo"]))))
    # the whole file reaches further into the tails than its first rows: twice their extremes
    if not series_helps(sd, 2.0 * spread, len(num_cols)):
        return None  # too wide a response for the series: scan each transform exactly
    ls_g, lm_g = floats(pre["ls"]), floats(pre["lm"])
    reach = np.maximum(floats(pre["lhi"]) - lm_g, lm_g - floats(pre["llo"]))
    big_m, big_k = fitted_orders(ls_g, 2.0 * reach, len(num_cols)) or choose_orders(sd, 2.0 * spread, len(num_cols))
    big_k = big_k if num_cols else 0
    curve = None if cat_cols else centre_polynomial(floats(pre["x"]), lm, w, floats(pre["ls"]))
    if curve is None:  # a table of centres, joined on the group keys
        shift = {k: (floats(pre[k]) if k == "x" else np.asarray(pre[k], dtype=object)) for k in keys}
        d.put(con, "bw_shift", shift | {"bw_c": lm})
    return fallback, y_ref, t_ref, big_m, big_k, curve


def fitted_orders(sd: np.ndarray, reach: np.ndarray, nb: int) -> tuple[int, int] | None:
    """The cheapest series orders (M, K) (fewest sums: M + nb·K) that the check made after the
    scan would accept, for groups with these standard deviations of ln y and these largest
    deviations from their centre; None when no candidate passes or the first rows say too little.

    The check is :meth:`GroupSeries.moments` itself, run on a model of each group (normal moments
    of its standard deviation, its extremes at ``reach``) with half the tolerances: y, √y and 1/y
    to SERIES_TOL, the Box–Cox grid's ends to GRID_TOL. It only sizes the query; the same check on
    the scanned sums decides, and a transform it refuses is scanned exactly."""
    keep = np.isfinite(sd) & (sd > 0) & np.isfinite(reach) & (reach > 0)
    if not keep.any():
        return None
    sd, reach = _frontier(sd[keep], reach[keep])
    tests = [(IDENTITY, SERIES_TOL), (SQRT, SERIES_TOL), (RECIPROCAL, SERIES_TOL),
             (Transform("boxcox", GRID_END), GRID_TOL), (Transform("boxcox", -GRID_END), GRID_TOL)]
    pairs = sorted((m + nb * k, m, k) for m in SERIES_ORDERS
                   for k in (range(3, min(m, SERIES_K_MAX) + 1) if nb else (0,)))
    for _, big_m, big_k in pairs:
        model = _model_series(sd, reach, big_m, big_k, nb)
        if all(model.moments(t, 0.5 * tol) is not None for t, tol in tests):
            return big_m, big_k
    return None


def _frontier(sd: np.ndarray, reach: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The groups no other group exceeds in both spread and reach (the model's bounds grow with
    both, and its rounding term never binds: reach ≤ sd·√65536 in the first rows), so sizing on
    them alone gives the same orders for any number of groups."""
    order = np.lexsort((-reach, -sd))  # widest spread first, largest reach first among ties
    best = -np.inf
    kept = []
    for i in order:
        if reach[i] > best:
            kept.append(i)
            best = reach[i]
    return sd[kept], reach[kept]


def _model_series(sd: np.ndarray, reach: np.ndarray, big_m: int, big_k: int, nb: int) -> GroupSeries:
    """Power sums of a normal group per (sd, reach): one row, mean 0, central moments
    (k−1)!!·sd^k, extremes e^{±reach}; covariate cross-products 0 (the check needs their order only)."""
    u = sd.size
    dfact = np.array([0.0 if k % 2 else float(math.prod(range(k - 1, 0, -2))) for k in range(1, big_m + 1)])
    s = dfact[None, :] * sd[:, None] ** np.arange(1, big_m + 1)[None, :]
    return GroupSeries(np.ones(u), np.zeros(u), s, np.zeros((u, nb, big_k)), np.zeros((u, nb)),
                       np.ones((u, nb, nb)), np.exp(-reach), np.exp(reach), np.zeros(nb))


def _clean_categories(res: dict, cat_cols: list[str], cat_missing: set[str], nb: int) -> dict[str, np.ndarray] | None:
    """Each category column's labels per group, or None when the scan met a cell the one-scan path
    cannot take (missing, non-finite, a response ≤ 0)."""
    n_unit = floats(res["n"])
    s1 = floats(res["s1"])  # Σd: non-finite when a y of the group is NaN or +inf
    ylo, yhi = floats(res["ylo"]), floats(res["yhi"])
    # every y present and > 0 (d not NULL), every covariate cell present and finite, x finite
    present = [floats(res["nchk"]), *(floats(res[f"nt{i}"]) for i in range(nb))]
    finite = [floats(res["x"]), s1, yhi, *(floats(res[f"t{i}"]) for i in range(nb))]
    clean = bool(all((v == n_unit).all() for v in present) and all(np.isfinite(v).all() for v in finite)
                 and (ylo > 0).all())
    cat_vals: dict[str, np.ndarray] = {}
    for c in cat_cols:
        col = res[c]
        if np.ma.is_masked(col):
            return None
        cat_vals[c] = np.asarray(col).astype(str)
        clean = clean and not bool(np.isin(cat_vals[c], list(cat_missing)).any())
    return cat_vals if clean else None


def _group_series(res: dict, nb: int, big_m: int, big_k: int, t_ref: np.ndarray) -> GroupSeries:
    """The per-group power sums and covariate sums of the scan as a :class:`GroupSeries`."""
    n_unit = floats(res["n"])
    tsum = np.column_stack([floats(res[f"t{i}"]) for i in range(nb)]) if nb else np.zeros((n_unit.size, 0))
    tt = np.zeros((n_unit.size, nb, nb))
    for i in range(nb):
        for j in range(i, nb):
            tt[:, i, j] = tt[:, j, i] = floats(res[f"tt{i}_{j}"])
    s = np.column_stack([floats(res[f"s{k}"]) for k in range(1, big_m + 1)])
    cross = np.zeros((n_unit.size, nb, big_k))
    for i in range(nb):
        for k in range(1, big_k + 1):
            cross[:, i, k - 1] = floats(res[f"c{i}_{k}"])
    return GroupSeries(n_unit, floats(res["centre"]), s, cross, tsum, tt, floats(res["ylo"]),
                       floats(res["yhi"]), t_ref)


def _constant_covariates(series: GroupSeries, num_cols: list[str], t_ref: np.ndarray, n: float) -> dict[str, float | None]:
    """A covariate is constant when its group means agree and it has no spread within groups
    (to 1e-12 of its size: t′ = t − t_ref is then rounding noise around 0): its value, else None."""
    num_constant: dict[str, float | None] = {}
    for i, b in enumerate(num_cols):
        size = 1e-12 * max(abs(float(t_ref[i])), 1e-300)
        means = series.bmean[:, i] - t_ref[i]
        within = float(series.bb[:, i, i].sum()) / n
        flat = float(np.ptp(means)) <= size and within <= size * size
        num_constant[b] = float(t_ref[i] + means.mean()) if flat else None
    return num_constant


def exact_setup(con: Any, src: str, case: str, checks: list[tuple[str, str, str]], cat_cols: list[str],
                num_cols: list[str], progress: ProgressFn | None, d: Dialect = DUCKDB) -> dict:
    """Cleaning counts per column and reason, ranges and domains, and the groups: three scans."""
    q = d.quote
    if progress:
        progress("scanning rows: cleaning counts")
    counts = dict(con.execute(f"SELECT {case} AS r, COUNT(*) FROM {src} GROUP BY r").fetchall())
    n_read = int(sum(counts.values()))
    drops = tuple(DropCount(checks[i][0], checks[i][1], int(cnt), ())
                  for i, cnt in sorted(counts.items()) if i >= 0 and cnt)
    if progress:
        progress("scanning rows: ranges and domains")
    parts = ["COUNT(*)", "MIN(y)", "MAX(y)",
             "COUNT(*) FILTER (WHERE y <= 0)", "COUNT(*) FILTER (WHERE y = 0)", "COUNT(*) FILTER (WHERE y < 0)",
             "SUM(CASE WHEN y > 0 THEN LN(y) ELSE 0 END)", "SUM(CASE WHEN y <> 0 THEN LN(ABS(y)) ELSE 0 END)",
             "AVG(y)"]
    for b in num_cols:
        parts += [f"MIN({q(b)})", f"MAX({q(b)})", f"AVG({q(b)})"]
    row = one_row(con.execute(f"SELECT {', '.join(parts)} FROM bw_clean"))
    n = int(row[0])
    facts: dict[str, Any] = {"n": n, "n_read": n_read, "drops": drops}
    if n < 3:
        return facts
    keys = ["x", *cat_cols]
    key_list = ", ".join(q(k) for k in keys)
    units = con.execute(f"SELECT {key_list}, COUNT(*) AS n FROM bw_clean GROUP BY {key_list} "
                        f"ORDER BY {key_list}").fetchnumpy()
    facts.update({
        "y_min": float(row[1]), "y_max": float(row[2]),
        "y_le0": int(row[3]), "y_eq0": int(row[4]), "y_lt0": int(row[5]),
        "slog": float(row[6]), "slogabs": float(row[7]), "y_mean": float(row[8]),
        "num_constant": {b: (float(row[9 + 3 * i]) if row[9 + 3 * i] == row[10 + 3 * i] else None)
                         for i, b in enumerate(num_cols)},
        "num_mean": {b: float(row[11 + 3 * i]) for i, b in enumerate(num_cols)},
        "units": {k: units[k] for k in keys} | {"n": units["n"]},
    })
    return facts


def floats(col: Any) -> np.ndarray:
    """A fetched numeric column as float64, NULL as NaN."""
    return np.ma.filled(np.ma.asarray(col, dtype=float), np.nan) if np.ma.is_masked(col) else np.asarray(col, dtype=float)


def one_row(cursor: Any) -> tuple:
    """The single row of a query, or one line saying the engine returned none."""
    row = cursor.fetchone()
    if row is None:
        raise DataError("the SQL engine returned no result; check the input files")
    return tuple(row)
