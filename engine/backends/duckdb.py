"""Group statistics from an embedded SQL engine (DuckDB), for tables larger than memory.

The engine only needs per-group totals, so the O(n) work is a GROUP BY that DuckDB runs over
Parquet or CSV files without loading the rows into Python. On clean data with y > 0 one scan
does it all (``series_sql``): per finest group (exact x value × categorical covariates) the
count, extremes of y, covariate sums and cross-products, and power sums of ln y about the
group's centre, from which :class:`engine.series.GroupSeries` gives every response transform.
Other data take the exact path: a cleaning scan, then per batch of response transforms the
count, mean, within-group co-moments (count × covar_pop) and extremes (``aggregate_sql``).
Coarser groups (x levels merged by a tolerance, fewer categorical covariates) are pooled from
these in Python with the parallel-axis rule. Both queries are standard SQL (COUNT, SUM, AVG,
VAR_POP, COVAR_POP, MIN, MAX, LN, EXP, SQRT, CASE, COALESCE, LEFT JOIN), so they also run on
cluster SQL engines.

A study built here keeps its rows in the files: ``rows()`` answers ``NoRows`` and ``row_sample(k)`` a
seeded DuckDB sample; row-level diagnostics are replaced by
group-level ones, drawn from a seeded sample of rows, or reported as unavailable with the reason.
"""

from __future__ import annotations

import math
import os
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from types import SimpleNamespace
from typing import Any

import numpy as np

from ..errors import DataError, UsageError
from ..read.cleaning import CleaningReport, DropCount
from ..read.columns import NA_TEXT
from ..read.files import data_files
from ..read.usable import (
    ChosenColumns,
    choose_columns,
    require_categories,
    require_covariate_varies,
    require_rows,
    require_spread,
)
from ..stats.groups import GroupStats, drop_rounding, normalised_boxcox_stats
from ..stats.power_sums import GRID_TOL, SERIES_TOL, GroupSeries, choose_orders, series_helps
from ..stats.results import SideTest
from ..stats.rows import SAMPLE_SEED, NoRows, Rows
from ..stats.spread import bartlett_from_groups
from ..stats.study import (
    Covariate,
    Study,
    cluster_sorted,
    level_labels,
    parse_tolerance,
)
from ..stats.transforms import Transform

__all__ = ["SqlStudy", "make_sql_study", "aggregate_sql", "series_sql", "transform_sql", "choose_engine",
]

_NA_TEXT = NA_TEXT  # the same missing-value texts as the in-memory reader
ProgressFn = Callable[[str], None]


def q(name: str) -> str:
    """Quote an SQL identifier."""
    return '"' + name.replace('"', '""') + '"'


def lit(text: str) -> str:
    """Quote an SQL string literal."""
    return "'" + text.replace("'", "''") + "'"


def transform_sql(t: Transform, col: str = "y") -> str:
    """Standard-SQL expression of g(col)."""
    try:
        return t.sql(col)
    except ValueError as exc:
        raise UsageError(str(exc)) from None


def aggregate_sql(source: str, keys: Sequence[str], nums: Sequence[str], zs: Sequence[str]) -> str:
    """The GROUP BY query: per finest group, count, means, co-moments and extremes.

    ``source`` is a table or sub-query with a column ``y`` and the key and numeric columns;
    ``zs`` are SQL expressions of the transformed response. Standard aggregates only.
    """
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


def choose_engine(path: str, engine: str, memory_cap: int) -> str:
    """'memory' or 'duckdb' for ``--engine auto|memory|duckdb``."""
    if engine not in {"auto", "memory", "duckdb"}:
        raise UsageError(f"engine {engine!r} is unknown; use auto, memory or duckdb")
    if engine != "auto":
        return engine
    if path == "-":
        return "memory"
    if os.path.isdir(path) or any(ch in path for ch in "*?["):
        return "duckdb"
    try:
        size = os.path.getsize(path)
    except OSError:
        return "memory"
    return "duckdb" if size > memory_cap else "memory"


def _source_sql(path: str, decimal: str, delimiter: str | None, encoding: str | None = None) -> tuple[str, bool]:
    """FROM clause for the files and whether columns arrive as text."""
    files = data_files(path)  # one-line errors for an empty folder, an unmatched glob, a missing file
    p = Path(path)
    is_parquet = files[0].suffix.lower() in (".parquet", ".pq")
    pattern = str(p / "**" / ("*.parquet" if is_parquet else "*.csv")) if p.is_dir() else path
    if is_parquet:
        return f"read_parquet({lit(pattern)}, union_by_name = true)", False
    opts = ["header = true", "all_varchar = true"]
    if delimiter:
        opts.append(f"delim = {lit(delimiter)}")
    elif decimal == ",":
        opts.append("delim = ';'")
    if encoding:
        opts.append(f"encoding = {lit(encoding)}")
    return f"read_csv({lit(pattern)}, {', '.join(opts)})", True


def _csv_preflight(path: str, decimal: str, delimiter: str | None) -> tuple[str | None, str | None]:
    """What the in-memory reader checks before parsing, for CSV files read by DuckDB: an empty
    file, bytes that are not a text table, a header naming a column twice; and the delimiter
    and encoding it would use (from the first file's first 64 KiB). Returns (delimiter, encoding)."""
    from ..read.tables import (
        _decode,
        _refuse_duplicate_names,
        _refuse_kind,
        _sniff_bytes,
        _sniff_delimiter,
        _text_header,
    )

    files = data_files(path)
    if files[0].suffix.lower() in (".parquet", ".pq"):
        return delimiter, None
    name = path if len(files) == 1 else str(files[0])
    for f in files:
        if f.stat().st_size == 0:
            raise DataError(f"{path if len(files) == 1 else f} is empty; check the file")
    with open(files[0], "rb") as fh:
        head = fh.read(65536)
    if not head.strip():
        raise DataError(f"{name} is empty; check the file")
    kind = _sniff_bytes(head)
    if kind != "text":
        _refuse_kind(kind, name, "")
    try:
        head.decode("utf-8")
        encoding = None
    except UnicodeDecodeError as exc:
        # a multi-byte character cut by the sample's end is still UTF-8
        encoding = None if exc.start >= len(head) - 3 and exc.reason == "unexpected end of data" else "latin-1"
    sample = _decode(head)
    sep = delimiter or (None if decimal == "," else _sniff_delimiter(sample, decimal))
    header = _text_header(sample, sep or ";")
    if header is not None:
        _refuse_duplicate_names(name, header)
    return sep, encoding


def _ragged_line(files: list[Path], encoding: str | None, sep: str) -> tuple[Path, int, int, int] | None:
    """The first record whose field count differs from its file's header: (file, line, header
    fields, fields). Read only after DuckDB refused a file, to name the line as pandas does."""
    import csv

    for f in files:
        with open(f, encoding=encoding or "utf-8", errors="replace", newline="") as fh:
            reader = csv.reader(fh, delimiter=sep, skipinitialspace=True)
            header = next(reader, None)
            if header is None:
                continue
            for row in reader:
                if row and len(row) != len(header):
                    return f, reader.line_num, len(header), len(row)
    return None


class SqlStudy(Study):
    """A Study whose rows stay in the files; group statistics come from SQL scans.

    Units are the finest groups (exact x value × every admitted categorical covariate);
    ``x_codes`` and categorical ``Covariate.values`` are per unit, so the grouping helpers of
    :class:`Study` work unchanged. Numeric covariates enter through within-unit co-moments.
    """


    def __init__(self, con: Any, *, progress: ProgressFn | None = None, **kw: Any) -> None:
        self.con = con
        self.progress = progress
        info = kw.pop("_info")
        self._info = info
        super().__init__(**kw)
        self._moments: dict[tuple, dict] = {}
        self.exact_scans = 0
        """Scans run for response transforms the one-scan series could not give exactly enough."""

    # --- facts from the first scan ---------------------------------------------------------
    @property
    def n(self) -> int:
        return int(self._info["n"])

    @property
    def x_min(self) -> float:
        return float(self._info["x_min"])

    @property
    def x_max(self) -> float:
        return float(self._info["x_max"])

    def sum_log_y(self) -> float:
        """Σ log y (only meaningful when every y > 0)."""
        return float(self._info["slog"])

    def _x_groups(self) -> tuple[np.ndarray, np.ndarray, tuple[str, ...]]:
        uniq = self._info["x_values"]
        unit_x = self._info["unit_x"]
        exact = np.searchsorted(uniq, unit_x)
        if self.tolerance is not None and self.tolerance > 0 and uniq.size > 1:
            cluster = cluster_sorted(uniq, self.tolerance)
            if int(cluster[-1]) + 1 < uniq.size:
                self._cache["merged"] = True
                codes = cluster[exact]
                cnt = np.bincount(codes, weights=self._info["unit_n"])
                values = np.bincount(codes, weights=self._info["unit_n"] * unit_x) / cnt
                return codes, values, level_labels(uniq, cluster)
        return exact.astype(np.intp), uniq, tuple(f"{v:.6g}" for v in uniq)

    def x_codes_for_values(self, values: np.ndarray) -> np.ndarray:
        """Level code of each distinct x value (after any tolerance merge)."""
        uniq = self._info["x_values"]
        exact = np.searchsorted(uniq, values)
        if self.approximate_groups:
            return cluster_sorted(uniq, float(self.tolerance))[exact]  # type: ignore[arg-type]
        return exact

    def level_counts(self) -> np.ndarray:
        return np.bincount(self.x_codes, weights=self._info["unit_n"], minlength=self.c).astype(np.int64)

    def domain_problem(self, t: Transform, role: str) -> str | None:
        info = self._info
        col = self.y_name if role == "y" else self.x_name
        return t.count_problem(role, col, self.n, info[f"{role}_le0"], info[f"{role}_eq0"], info[f"{role}_lt0"])

    def transformed(self, t: Transform) -> tuple[None, float]:
        problem = self.domain_problem(t, "y")
        if problem:
            raise UsageError(problem)
        info, n = self._info, self.n
        k = t.kind
        if k == "identity":
            jac = 0.0
        elif k == "log":
            jac = -info["slog"]
        elif k == "sqrt":
            jac = -(n * math.log(2.0) + 0.5 * info["slog"])
        elif k == "reciprocal":
            jac = -2.0 * info["slogabs"]
        elif k == "boxcox":
            jac = (float(t.param) - 1.0) * info["slog"]  # type: ignore[arg-type]
        else:
            raise UsageError(f"response transform {k} is not available with the SQL engine")
        return None, jac

    def level_weight_rows(self, w_level: np.ndarray) -> None:
        return None

    def base_rows(self, key: Any, build: Any) -> Any:
        q_nums = len(key[1]) if key and key[0] == "nums" else 0
        extra = 0
        if key and key[0] == "nums" and len(key) > 2:
            extra = int(key[3])
        elif key and key[0] == "u":
            extra = int(key[3])
        width = q_nums + extra
        return None if width == 0 else np.empty((0, width))  # shape only: the SQL study has no rows

    def exact_replicates(self) -> bool:
        return int(self._info["x_values"].size) < self.n

    def y_range(self) -> tuple[float, float]:
        """Smallest and largest response used."""
        return float(self._info["y_min"]), float(self._info["y_max"])

    def rows(self) -> NoRows:
        """The rows stay in the files (ask ``row_sample`` for a seeded sample)."""
        return NoRows("the table is read through the SQL engine: its rows stay in the files "
                      "(use --engine memory for every row)")

    def row_sample(self, k: int, seed: int = SAMPLE_SEED) -> Rows:
        """A seeded random sample of ``k`` used rows (all of them when there are at most ``k``),
        in one more scan."""
        got = self.sample_rows(k, seed)
        return Rows(got["y"], got["x"], {c.name: got[c.name] for c in self.covariates}, self.n, self.n > k)

    def sample_rows(self, k: int, seed: int = SAMPLE_SEED) -> dict[str, np.ndarray]:
        """A seeded random sample of ``k`` used rows (all of them when there are at most ``k``):
        y, x and each covariate (categories as text), in one more scan."""
        hit = self._cache.get(("sample", k, seed))
        if hit is not None:
            return hit
        cols = ["y", "x", *(q(self._info["sql_name"][c.name]) for c in self.covariates)]
        sample = "" if self.n <= k else f" USING SAMPLE reservoir({int(k)} ROWS) REPEATABLE ({int(seed)})"
        self._say(f"scanning {self.n:,} rows for a sample of {min(k, self.n):,}")
        res = self.con.execute(f"SELECT {', '.join(cols)} FROM bw_clean{sample}").fetchnumpy()
        self._say("")
        out = {"y": _floats(res["y"]), "x": _floats(res["x"])}
        for c in self.covariates:
            col = res[self._info["sql_name"][c.name]]
            out[c.name] = np.asarray(col).astype(str) if c.kind == "categorical" else _floats(col)
        self._cache[("sample", k, seed)] = out
        return out

    def covariate_mean(self, name: str) -> float:
        return float(self._info["num_mean"][name])

    def distinct(self, name: str) -> int:
        cov = self.covariate(name)
        if cov.kind == "categorical":
            return len(cov.levels)
        raise UsageError(f"grouping by the numeric covariate {name!r} needs the rows; use --engine memory")

    def group_codes(self, by: tuple[str, ...] = ()) -> tuple[np.ndarray, int]:
        for name in by:
            if self.covariate(name).kind == "numeric":
                self.distinct(name)
        return super().group_codes(by)

    # --- scans ---------------------------------------------------------------------------------
    def _say(self, text: str) -> None:
        if self.progress is not None:
            self.progress(text)

    def _scan(self, transforms: Sequence[Transform]) -> None:
        """One GROUP BY scan for several response transforms; results cached per transform."""
        todo = [t for t in transforms if t.key() not in self._moments]
        series = self._info.get("series")
        if series is not None:
            rest = []
            for t in todo:
                mom = series.moments(t, SERIES_TOL)
                if mom is None:
                    rest.append(t)
                else:
                    self._moments[t.key()] = mom
            todo = rest
        if not todo:
            return
        info = self._info
        keys = ["x", *info["cat_sql"]]
        nums = info["num_sql"]
        # Shift each response transform by its value at the mean of y (and covariates by their
        # means, in bw_shifted) so the aggregates never carry a large offset; added back below.
        y_ref = np.array([float(info["y_mean"])])
        shifts = [float(np.asarray(t.forward(y_ref), dtype=float)[0]) for t in todo]
        shifts = [v if math.isfinite(v) else 0.0 for v in shifts]
        zs = [f"({transform_sql(t, 'y')} - {v!r})" for t, v in zip(todo, shifts, strict=True)]
        sql = aggregate_sql("bw_shifted", keys, nums, zs)
        self.exact_scans += 1
        self._say(f"scanning {self.n:,} rows for {len(todo)} response transform(s)")
        res = self.con.execute(sql).fetchnumpy()
        self._say("")
        nb = len(nums)
        unit_n = np.asarray(res["n"], dtype=float)
        if unit_n.shape[0] != info["unit_n"].shape[0]:
            raise DataError("the data changed between scans (group count differs); run again")
        bmean = np.column_stack([np.asarray(res[f"b{i}_m"], dtype=float) + info["num_mean"][info["num_cols"][i]]
                                 for i in range(nb)]) if nb else np.zeros((unit_n.size, 0))
        bb = np.zeros((unit_n.size, nb, nb))
        for i in range(nb):
            for j in range(i, nb):
                v = np.nan_to_num(np.asarray(res[f"bb{i}_{j}"], dtype=float)) * unit_n
                bb[:, i, j] = bb[:, j, i] = v
        for k, t in enumerate(todo):
            zb = np.zeros((unit_n.size, nb))
            for i in range(nb):
                zb[:, i] = np.nan_to_num(np.asarray(res[f"z{k}_b{i}"], dtype=float)) * unit_n
            self._moments[t.key()] = {
                "mean": np.asarray(res[f"z{k}_m"], dtype=float) + shifts[k],
                "ss": np.nan_to_num(np.asarray(res[f"z{k}_v"], dtype=float)) * unit_n,
                "zb": zb,
                "lo": np.asarray(res[f"z{k}_lo"], dtype=float) + shifts[k],
                "hi": np.asarray(res[f"z{k}_hi"], dtype=float) + shifts[k],
                "bmean": bmean,
                "bb": bb,
            }

    def prefetch(self) -> None:
        """Scan once for every response transform the tree's first level can use."""
        from ..stats.transforms import IDENTITY, LOG, RECIPROCAL, SQRT

        ts = [IDENTITY] + [t for t in (LOG, SQRT, RECIPROCAL) if self.domain_problem(t, "y") is None]
        self._scan(ts)

    # --- group statistics pooled from units ---------------------------------------------------
    def group_stats(self, z: Any, z_key: Any, *, by: tuple[str, ...] = (), weights: Any = None,
                    weights_key: Any = None, bases: Any = None, bases_key: Any = None, extremes: bool = False,
                    level_weights: np.ndarray | None = None) -> GroupStats:
        key = ("stats", z_key, by, weights_key, bases_key, extremes)
        hit = self._cache.get(key)
        if hit is not None:
            return hit
        if not (isinstance(z_key, tuple) and z_key and z_key[0] == "z"):
            raise UsageError("the SQL engine computes group statistics by response transform only")
        t = Transform(*z_key[1])
        self._scan([t])
        hit = self._pool(self._moments[t.key()], by, bases_key, level_weights, extremes)
        self._cache[key] = hit
        return hit

    def _base_values(self, bases_key: Any) -> tuple[list[int], list[np.ndarray]]:
        """Numeric-covariate indices and per-unit values of x-power bases for ``bases_key``."""
        if not bases_key:
            return [], []
        nums = self._info["num_cols"]
        if bases_key[0] == "nums":
            idx = [nums.index(nm) for nm in bases_key[1]]
            powers: list[np.ndarray] = []
            if len(bases_key) > 2:
                pred = Transform(*bases_key[2])
                degree, centre, scale = int(bases_key[3]), float(bases_key[4]), float(bases_key[5])
                u = (np.asarray(pred.forward(self._info["unit_x"]), dtype=float) - centre) / scale
                powers = [u**k for k in range(1, degree + 1)]
            return idx, powers
        if bases_key[0] == "u":
            centre, scale, degree = float(bases_key[1]), float(bases_key[2]), int(bases_key[3])
            u = (self._info["unit_x"] - centre) / scale
            return [], [u**k for k in range(1, degree + 1)]
        raise UsageError(f"unknown bases {bases_key!r} for the SQL engine")

    def _pool(self, mom: dict, by: tuple[str, ...], bases_key: Any, level_weights: np.ndarray | None,
              extremes: bool) -> GroupStats:
        codes, c = self.group_codes(by)
        un = self._info["unit_n"]
        idx, powers = self._base_values(bases_key)
        q_ = len(idx) + len(powers)
        # per-unit means and co-moments of V = [bases..., z]
        means = np.zeros((un.size, q_ + 1))
        com = np.zeros((un.size, q_ + 1, q_ + 1))
        for a, i in enumerate(idx):
            means[:, a] = mom["bmean"][:, i]
            for b, j in enumerate(idx):
                com[:, a, b] = mom["bb"][:, i, j]
            com[:, a, q_] = com[:, q_, a] = mom["zb"][:, i]
        for p_, v in enumerate(powers):
            means[:, len(idx) + p_] = v
        means[:, q_] = mom["mean"]
        com[:, q_, q_] = mom["ss"]
        count = np.bincount(codes, weights=un, minlength=c)
        gmeans = np.column_stack([np.bincount(codes, weights=un * means[:, k], minlength=c) / count
                                  for k in range(q_ + 1)])
        dev = means - gmeans[codes]
        within = np.zeros((c, q_ + 1, q_ + 1))
        for a in range(q_ + 1):
            for b in range(a, q_ + 1):
                v = np.bincount(codes, weights=com[:, a, b] + un * dev[:, a] * dev[:, b], minlength=c)
                within[:, a, b] = within[:, b, a] = v
        w_g = np.ones(c)
        slw = 0.0
        if level_weights is not None:
            w_g = level_weights[self.group_parent(by)]
            slw = float((count * np.log(w_g)).sum())
        ss = drop_rounding(within[:, q_, q_] * w_g, count * w_g, gmeans[:, q_])
        cross = within * w_g[:, None, None] if q_ else None
        zmin = zmax = None
        if extremes:
            zmin = np.full(c, np.inf)
            zmax = np.full(c, -np.inf)
            np.minimum.at(zmin, codes, mom["lo"])
            np.maximum.at(zmax, codes, mom["hi"])
        return GroupStats(self.n, count.astype(np.int64), count * w_g, gmeans[:, q_], ss, slw,
                          gmeans[:, :q_], cross, zmin, zmax)

    def boxcox_stats(self, lams: np.ndarray, by: tuple[str, ...], bases: Any, bases_key: Any) -> list[GroupStats]:
        key = ("bcgrid", by, bases_key, tuple(lams))
        hit = self._cache.get(key)
        if hit is None:
            ts = [Transform("boxcox", float(v)) if v != 0 else Transform("log") for v in lams]
            series = self._info.get("series")
            # grid points only locate λ̂ and draw the profile: a looser series tolerance
            moms = [None if series is None else series.moments(t, GRID_TOL) for t in ts]
            self._scan([t for t, m in zip(ts, moms, strict=True) if m is None])
            raw = [self._pool(m if m is not None else self._moments[t.key()], by, bases_key, None, False)
                   for t, m in zip(ts, moms, strict=True)]
            # the profile works on the normalised transform ((y/ġ)^λ − 1)/λ, ġ the geometric mean
            log_g = float(self._info["slog"]) / self.n
            hit = [normalised_boxcox_stats(st, float(v), log_g) for st, v in zip(raw, lams, strict=True)]
            self._cache[key] = hit
        return hit

    def spread_by_level(self, z: Any, key: Any, w: Any) -> SideTest:
        """Bartlett's test across x levels, from the level variances of the response scale.

        Brown–Forsythe needs each level's median, i.e. two more passes over the rows; Bartlett's
        statistic needs only the level counts and variances the one scan already gives
        (scipy.stats.bartlett computes the same). It assumes normal errors within levels.
        """
        name = "equal spread (Bartlett)"
        hit = self._cache.get(("spread", key))
        if hit is not None:
            return hit
        tkey, wkey = key
        if wkey is not None:
            hit = SideTest(name, False, reason="not computed for weighted nodes with the SQL engine")
        else:
            st = self.group_stats(None, ("z", tkey), by=())
            hit = bartlett_from_groups(np.asarray(st.count, dtype=float), np.asarray(st.ss, dtype=float), name)
        self._cache[("spread", key)] = hit
        return hit


def make_sql_study(
    path: str,
    *,
    y: str,
    x: str,
    covariates: Sequence[str] = (),
    weights: str | None = None,
    tolerance: str | float | None = None,
    decimal: str | None = None,
    delimiter: str | None = None,
    source: str = "",
    progress: ProgressFn | None = None,
    memory_limit: str | None = None,
    exact: bool = False,
) -> SqlStudy:
    """Build a :class:`SqlStudy` over a file, folder or glob of Parquet/CSV files.

    Clean data with a positive response take the one-scan path (:func:`_series_setup`); other
    data, or ``exact=True``, take the exact path: a cleaning scan, then one scan per batch of
    response transforms.
    """
    try:
        import duckdb
    except ImportError:
        raise DataError("the SQL engine needs duckdb; install it with: pip install 'bendwise[scale]'") from None
    if weights:
        raise UsageError("--weights is not available with the SQL engine yet; use --engine memory")
    dec = decimal or "."
    sep, encoding = _csv_preflight(path, dec, delimiter)
    args = dict(y=y, x=x, covariates=covariates, tolerance=tolerance, decimal=dec, source=source, progress=progress,
                memory_limit=memory_limit, exact=exact)
    try:
        return _make_sql_study(path, delimiter=sep, encoding=encoding, **args)  # type: ignore[arg-type]
    except duckdb.Error as exc:
        text = str(exc)
        if encoding is None and "unicode" in text.lower():
            try:  # UTF-8 at the start, Latin-1 further on: read as the in-memory engine does
                return _make_sql_study(path, delimiter=sep, encoding="latin-1", **args)  # type: ignore[arg-type]
            except duckdb.Error as again:
                exc, encoding, text = again, "latin-1", str(again)
        files = data_files(path)
        if "csv" in text.lower() and files[0].suffix.lower() not in (".parquet", ".pq"):
            from ..read.tables import ragged_message

            hit = _ragged_line(files, encoding, sep or ";")
            if hit is not None:
                f, line, want, saw = hit
                raise DataError(ragged_message(path if len(files) == 1 else str(f),
                                               f"Expected {want} fields in line {line}, saw {saw}")) from None
        first = text.strip().splitlines()[0] if text.strip() else type(exc).__name__
        raise DataError(f"cannot read {path} ({first}); check the file format") from None


def _make_sql_study(path: str, *, y: str, x: str, covariates: Sequence[str], tolerance: str | float | None,
                    decimal: str, delimiter: str | None, encoding: str | None, source: str,
                    progress: ProgressFn | None, memory_limit: str | None, exact: bool) -> SqlStudy:
    """The study over ``path`` (see :func:`make_sql_study`).

    Long because it wires the set-up steps in order (each its own function) and assembles the
    facts the study keeps; splitting the dictionary would only scatter it."""
    tol, rel = parse_tolerance(tolerance)
    src, as_text = _source_sql(path, decimal, delimiter, encoding)
    con = _connect(memory_limit)
    table = _SqlTable.describe(con, src, path, as_text, decimal)
    cols = choose_columns(SimpleNamespace(columns=table.names), y=y, x=x, covariates=covariates)
    cov_cols = list(cols.covariates)
    kinds = {c: table.kind(c) for c in cov_cols}
    cat_cols = [c for c in cov_cols if kinds[c] == "categorical"]
    num_cols = [c for c in cov_cols if kinds[c] == "numeric"]
    # inside the SQL every covariate has a name of ours: a column called "y", "n" or "bw_c" can
    # then never meet the query's own names
    sql_name = {c: f"bw_k{i}" for i, c in enumerate(cov_cols)}
    checks = table.row_checks(cols, kinds)
    case = "CASE " + " ".join(f"WHEN {cond} THEN {i}" for i, (_, _, cond) in enumerate(checks)) + " ELSE -1 END"
    select = table.select_list(cols, cat_cols, num_cols, sql_name)
    con.execute(f"CREATE TEMP VIEW bw_clean AS SELECT {select} FROM {src} WHERE {case} = -1")
    con.execute(f"CREATE TEMP VIEW bw_all AS SELECT {select} FROM {src}")
    cat_sql = [sql_name[c] for c in cat_cols]
    num_sql = [sql_name[c] for c in num_cols]
    cat_missing = set(_NA_TEXT) if as_text else {""}
    facts = None if exact else _series_setup(con, cat_sql, num_sql, cat_missing, progress)
    if facts is None:
        facts = _exact_setup(con, src, case, checks, cat_sql, num_sql, progress)
    user = {v: k for k, v in sql_name.items()}
    for key in ("num_constant", "num_mean"):  # (units stay keyed by the SQL names: "n" is theirs)
        if key in facts:
            facts[key] = {user.get(k, k): v for k, v in facts[key].items()}
    n, n_read, drops = facts["n"], facts["n_read"], facts["drops"]
    if n_read == 0:
        raise DataError(f"{path} has no data rows; check the file")
    require_rows(n, drops)
    unit_x = np.asarray(facts["units"]["x"], dtype=float)
    unit_n = np.asarray(facts["units"]["n"], dtype=float)
    x_values = np.unique(unit_x)
    xmin, xmax = float(x_values[0]), float(x_values[-1])
    require_spread(cols, (xmin, xmax), (facts["y_min"], facts["y_max"]))
    for c in num_cols:
        require_covariate_varies(c, facts["num_constant"][c])
    covs = _sql_covariates(facts, cov_cols, cat_cols, num_cols, sql_name)
    if tol is not None and rel:
        tol = tol * (xmax - xmin)
    info = {
        "n": n, "x_min": xmin, "x_max": xmax,
        "y_le0": facts["y_le0"], "y_eq0": facts["y_eq0"], "y_lt0": facts["y_lt0"],
        "x_le0": int(unit_n[unit_x <= 0].sum()), "x_eq0": int(unit_n[unit_x == 0].sum()),
        "x_lt0": int(unit_n[unit_x < 0].sum()),
        "slog": facts["slog"], "slogabs": facts["slogabs"],
        "num_mean": facts["num_mean"],
        "y_mean": facts["y_mean"],
        "x_values": x_values, "unit_x": unit_x, "unit_n": unit_n,
        "cat_cols": cat_cols, "num_cols": num_cols, "cat_sql": cat_sql, "num_sql": num_sql, "sql_name": sql_name,
        "series": facts.get("series"),
        "y_min": facts["y_min"], "y_max": facts["y_max"],
    }
    study = SqlStudy(
        con,
        progress=progress,
        _info=info,
        source=source or Path(path).name,
        report=CleaningReport(source or Path(path).name, n_read, n, drops),
        y_name=cols.y,
        x_name=cols.x,
        y=np.empty(0),
        x=np.empty(0),
        covariates=covs,
        weights=None,
        weights_name=None,
        tolerance=tol,
        tolerance_text=None if tolerance is None else str(tolerance),
    )
    _level_views(con, study, info)
    study.prefetch()
    return study


def _connect(memory_limit: str | None) -> Any:
    """A DuckDB connection that never assumes Parquet columns free of NaN, with the memory cap."""
    import duckdb

    con = duckdb.connect()
    try:  # Parquet min/max omit NaN; without this DuckDB may fold isnan() to false (duckdb#25521)
        con.execute("SET parquet_can_have_nan = true")
    except duckdb.Error:
        pass  # versions without the setting never assume a NaN-free column
    if memory_limit:
        con.execute(f"SET memory_limit = {lit(memory_limit)}")
    return con


_NUMERIC_TYPES = ("DOUBLE", "FLOAT", "INTEGER", "BIGINT", "SMALLINT", "TINYINT", "DECIMAL", "HUGEINT",
                  "UBIGINT", "UINTEGER", "USMALLINT", "UTINYINT", "REAL")


@dataclass
class _SqlTable:
    """The source's columns and types, and the SQL that reads each column as the memory engine does."""

    con: Any
    src: str
    names: list[str]
    types: dict[str, str]
    as_text: bool
    decimal: str

    @classmethod
    def describe(cls, con: Any, src: str, path: str, as_text: bool, decimal: str) -> _SqlTable:
        """Column names and types of ``src``; typed files with repeated names are refused."""
        desc = con.execute(f"DESCRIBE SELECT * FROM {src}").fetchall()
        names = [str(r[0]) for r in desc]
        if not as_text:
            from ..read.tables import _refuse_duplicate_names

            _refuse_duplicate_names(path, [n.strip() for n in names])
        return cls(con, src, names, {str(r[0]): str(r[1]).upper() for r in desc}, as_text, decimal)

    def typed_numeric(self, col: str) -> bool:
        """True for a column the file itself types as a number."""
        return self.types[col].startswith(_NUMERIC_TYPES)

    def num_expr(self, col: str) -> tuple[str, str, str, str]:
        """(value, missing, non-numeric, non-finite) SQL for a numeric column."""
        c = q(col)
        if self.typed_numeric(col):
            v = f"CAST({c} AS DOUBLE)"
            return v, f"({c} IS NULL OR isnan({v}))", "FALSE", f"isinf({v})"
        text = f"trim(CAST({c} AS VARCHAR))"
        body = f"replace({text}, ',', '.')" if self.decimal == "," else text
        v = f"TRY_CAST({body} AS DOUBLE)"
        missing = f"({c} IS NULL OR {text} IN ({_na_list()}))"
        return v, missing, f"(NOT {missing} AND {v} IS NULL)", f"(NOT {missing} AND (isinf({v}) OR isnan({v})))"

    def kind(self, col: str) -> str:
        """'numeric' when every present value of the covariate parses as a number, else 'categorical'."""
        if self.typed_numeric(col):
            return "numeric"
        _, missing, non_num, _ = self.num_expr(col)
        bad, present = _one(self.con.execute(
            f"SELECT COUNT(*) FILTER (WHERE {non_num}), COUNT(*) FILTER (WHERE NOT {missing}) FROM {self.src}"
        ))
        return "numeric" if (bad == 0 and present > 0) else "categorical"

    def row_checks(self, cols: ChosenColumns, kinds: dict[str, str]) -> list[tuple[str, str, str]]:
        """(column, reason, condition) in the order of the in-memory cleaning: a row's first problem."""
        checks: list[tuple[str, str, str]] = []
        for col in (cols.y, cols.x, *cols.covariates):
            if col in kinds and kinds[col] == "categorical":
                c = q(col)
                missing_text = _na_list() if self.as_text else lit("")
                checks.append((col, "missing", f"({c} IS NULL OR trim(CAST({c} AS VARCHAR)) IN ({missing_text}))"))
            else:
                _, miss, non_num, non_fin = self.num_expr(col)
                checks += [(col, "missing", miss), (col, "non-numeric", non_num), (col, "non-finite", non_fin)]
        return checks

    def select_list(self, cols: ChosenColumns, cat_cols: list[str], num_cols: list[str],
                    sql_name: dict[str, str]) -> str:
        """y, x, then the covariates under the query's own names: categories trimmed, numbers parsed."""
        parts = [f"{self.num_expr(cols.y)[0]} AS y", f"{self.num_expr(cols.x)[0]} AS x"]
        parts += [f"trim(CAST({q(c)} AS VARCHAR)) AS {q(sql_name[c])}" for c in cat_cols]
        parts += [f"{self.num_expr(c)[0]} AS {q(sql_name[c])}" for c in num_cols]
        return ", ".join(parts)


def _na_list() -> str:
    """The missing-value texts as an SQL list of literals."""
    return ", ".join(lit(s) for s in _NA_TEXT)


def _sql_covariates(facts: dict, cov_cols: list[str], cat_cols: list[str], num_cols: list[str],
                    sql_name: dict[str, str]) -> tuple[Covariate, ...]:
    """Covariates in the user's order: categories coded from each unit's label, numbers by name only
    (their sums are in the scans)."""
    covs: list[Covariate] = []
    for c in cat_cols:
        vals = np.asarray(facts["units"][sql_name[c]]).astype(str)
        lv = tuple(str(v) for v in np.unique(vals))
        require_categories(c, lv)
        codes = np.searchsorted(np.asarray(lv), vals)
        covs.append(Covariate(c, "categorical", codes.astype(np.intp), lv))
    for c in num_cols:
        covs.append(Covariate(c, "numeric", np.empty(0)))
    return tuple(sorted(covs, key=lambda cv: cov_cols.index(cv.name)))


def _level_views(con: Any, study: SqlStudy, info: dict) -> None:
    """x value → level code (for scans that group by level), and the rows with centred covariates."""
    x_values = info["x_values"]
    con.register("bw_xmap_src", {"x": x_values, "code": study.x_codes_for_values(x_values).astype(np.int64)})
    con.execute("CREATE TEMP TABLE bw_xmap AS SELECT * FROM bw_xmap_src")
    con.unregister("bw_xmap_src")
    sql_name = info["sql_name"]
    shifted = ["x", "y", *[q(sql_name[c]) for c in info["cat_cols"]]]
    shifted += [f"({q(sql_name[c])} - {info['num_mean'][c]!r}) AS {q(sql_name[c])}" for c in info["num_cols"]]
    con.execute(f"CREATE TEMP VIEW bw_shifted AS SELECT {', '.join(shifted)} FROM bw_clean")


# ----------------------------------------------------------------------------- set-up scans

PREFIX_ROWS = 1 << 16
"""Rows read from the start of the data to place each replicate group's series centre."""
def series_sql(source: str, keys: Sequence[str], nums: Sequence[str], t_ref: Sequence[float], big_m: int,
               big_k: int, shift_table: str | None, fallback_centre: float, centre_expr: str | None = None) -> str:
    """The one-scan GROUP BY query: per finest group, count, extremes of y, covariate sums and
    cross-products, and power sums Σd^k (k ≤ M), Σd^k·t (k ≤ K) of d = ln y − centre.

    ``source`` has columns y, the keys and the numeric covariates; ``shift_table`` has the keys
    and a column ``bw_c`` (the group's centre; groups missing from it use ``fallback_centre``).
    Instead of the table, ``centre_expr`` may give the centre as an expression in x.
    A column ``bw_chk`` is 0 on rows whose y, x and covariates are all finite, NULL or NaN
    otherwise; it is counted and added into Σd, so dirty data are recognised. Standard SQL only.
    """
    on = " AND ".join(f"r.{q(k)} = s.{q(k)}" for k in keys)
    sel = ", ".join([*(f"r.{q(k)}" for k in keys), "r.y", *(f"r.{q(b)}" for b in nums)])
    if centre_expr is not None:
        joined = f"SELECT {sel}, {centre_expr} AS bw_c FROM {source} AS r"
    else:
        joined = (f"SELECT {sel}, COALESCE(s.bw_c, {fallback_centre!r}) AS bw_c "
                  f"FROM {source} AS r LEFT JOIN {shift_table} AS s ON {on}")
    chk = " + ".join(["y * 0", "x * 0", *(f"{q(b)} * 0" for b in nums)])
    cols = [*(q(k) for k in keys), "y", "bw_c", *(f"({q(b)} - {ref!r}) AS {q(b)}" for b, ref in zip(nums, t_ref, strict=True)),
            "CASE WHEN y > 0 THEN LN(y) - bw_c END AS bw_d1", f"({chk}) AS bw_chk"]
    query = f"SELECT {', '.join(cols)} FROM ({joined}) AS bw_j"
    have = 1
    while have < big_m:  # powers by repeated squaring: each level adds d^(h+1) … d^(2h)
        new = [f"bw_d{have} * bw_d{k - have} AS bw_d{k}" for k in range(have + 1, min(2 * have, big_m) + 1)]
        query = f"SELECT *, {', '.join(new)} FROM ({query}) AS bw_p{have}"
        have = min(2 * have, big_m)
    aggs = ["COUNT(*) AS n", "COUNT(bw_chk) AS nchk", "MIN(y) AS ylo", "MAX(y) AS yhi", "MIN(bw_c) AS centre"]
    for i, b in enumerate(nums):
        aggs.append(f"SUM({q(b)}) AS t{i}")
        aggs += [f"SUM({q(b)} * {q(nums[j])}) AS tt{i}_{j}" for j in range(i, len(nums))]
    aggs += ["SUM(bw_d1 + bw_chk) AS s1", *(f"SUM(bw_d{k}) AS s{k}" for k in range(2, big_m + 1))]
    for i, b in enumerate(nums):
        aggs += [f"SUM(bw_d{k} * {q(b)}) AS c{i}_{k}" for k in range(1, big_k + 1)]
    key_list = ", ".join(q(k) for k in keys)
    return f"SELECT {key_list}, {', '.join(aggs)} FROM ({query}) AS bw_q GROUP BY {key_list} ORDER BY {key_list}"


def _centre_polynomial(px: np.ndarray, lm: np.ndarray, w: np.ndarray, ls: np.ndarray) -> str | None:
    """A cubic (or lower) in x through the first rows' group means of ln y, as SQL, when it
    passes within a quarter of the smallest group spread of every one of them (a join on the
    group keys costs more than the polynomial); None otherwise."""
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
    u_sql = f"((x - {centre!r}) / {scale!r})"
    expr = repr(float(coef[-1]))
    for c in coef[-2::-1]:
        expr = f"({float(c)!r} + {u_sql} * {expr})"
    return expr


def _series_setup(con: Any, cat_cols: list[str], num_cols: list[str], cat_missing: set[str],
                  progress: ProgressFn | None) -> dict | None:
    """Everything the study needs from one scan, or None when the data need the exact path
    (missing or non-finite cells, a response ≤ 0, nothing in the first rows)."""
    keys = ["x", *cat_cols]
    plan = _series_plan(con, keys, cat_cols, num_cols, progress)
    if plan is None:
        return None
    fallback, y_ref, t_ref, big_m, big_k, centre_expr = plan
    if progress:
        progress("scanning rows: group sums (one pass)")
    res = con.execute(series_sql("bw_all", keys, num_cols, [float(v) for v in t_ref], big_m, big_k, "bw_shift",
                                 fallback, centre_expr)).fetchnumpy()
    if progress:
        progress("")
    cat_vals = _clean_categories(res, cat_cols, cat_missing)
    if cat_vals is None:
        con.execute("DROP TABLE IF EXISTS bw_shift")
        return None
    series = _group_series(res, len(num_cols), big_m, big_k, t_ref)
    n_unit = _floats(res["n"])
    n = int(n_unit.sum())
    slog = float((_floats(res["s1"]) + n_unit * _floats(res["centre"])).sum())
    num_mean = {b: float(_floats(res[f"t{i}"]).sum() / n + t_ref[i]) for i, b in enumerate(num_cols)}
    units = {"x": _floats(res["x"]), "n": n_unit, **cat_vals}
    return {"n": n, "n_read": n, "drops": (), "y_min": float(series.ylo.min()), "y_max": float(series.yhi.max()),
            "y_le0": 0, "y_eq0": 0, "y_lt0": 0, "slog": slog, "slogabs": slog,
            "num_constant": _constant_covariates(series, num_cols, t_ref, n),
            "num_mean": num_mean, "y_mean": y_ref, "units": units, "series": series}


def _series_plan(con: Any, keys: list[str], cat_cols: list[str], num_cols: list[str],
                 progress: ProgressFn | None) -> tuple[float, float, np.ndarray, int, int, str | None] | None:
    """From the first rows: each group's centre of log y (a polynomial in x, or the table
    ``bw_shift``), the reference values and the series orders; None when the series cannot serve."""
    key_list = ", ".join(q(k) for k in keys)
    ln = "CASE WHEN y > 0 THEN LN(y) END"
    parts = ["COUNT(*) AS n", "MIN(y) AS ylo", "AVG(y) AS ym", f"AVG({ln}) AS lm", f"STDDEV_POP({ln}) AS ls",
             f"MIN({ln}) AS llo", f"MAX({ln}) AS lhi"]
    parts += [f"AVG({q(b)}) AS m{i}" for i, b in enumerate(num_cols)]
    if progress:
        progress("reading the first rows: group centres")
    pre = con.execute(f"SELECT {key_list}, {', '.join(parts)} FROM (SELECT * FROM bw_clean LIMIT {PREFIX_ROWS}) "
                      f"AS bw_pre GROUP BY {key_list}").fetchnumpy()
    ylo_pre = _floats(pre["ylo"])
    if ylo_pre.size == 0 or not (ylo_pre > 0).all():
        return None
    w = _floats(pre["n"])
    lm = _floats(pre["lm"])
    fallback = float((w * lm).sum() / w.sum())
    y_ref = float((w * _floats(pre["ym"])).sum() / w.sum())
    t_ref = np.array([float((w * _floats(pre[f"m{i}"])).sum() / w.sum()) for i in range(len(num_cols))])
    ls = _floats(pre["ls"])
    sd = float(np.nanmax(ls)) if np.isfinite(ls).any() else 0.0
    spread = float(np.nanmax(np.maximum(_floats(pre["lhi"]) - lm, lm - _floats(pre["llo"]))))
    # the whole file reaches further into the tails than its first rows: twice their extremes
    if not series_helps(sd, 2.0 * spread, len(num_cols)):
        return None  # too wide a response for the series: scan each transform exactly
    big_m, big_k = choose_orders(sd, 2.0 * spread, len(num_cols))
    big_k = big_k if num_cols else 0
    centre_expr = None if cat_cols else _centre_polynomial(_floats(pre["x"]), lm, w, _floats(pre["ls"]))
    if centre_expr is None:  # a table of centres, joined on the group keys
        shift = {k: (_floats(pre[k]) if k == "x" else np.asarray(pre[k], dtype=object)) for k in keys}
        con.register("bw_shift_src", shift | {"bw_c": lm})
        con.execute("CREATE OR REPLACE TEMP TABLE bw_shift AS SELECT * FROM bw_shift_src")
        con.unregister("bw_shift_src")
    return fallback, y_ref, t_ref, big_m, big_k, centre_expr


def _clean_categories(res: dict, cat_cols: list[str], cat_missing: set[str]) -> dict[str, np.ndarray] | None:
    """Each category column's labels per group, or None when the scan met a cell the one-scan path
    cannot take (missing, non-finite, a response ≤ 0)."""
    n_unit = _floats(res["n"])
    s1 = _floats(res["s1"])  # Σ(d + chk): NaN when any cell of the group is NaN or ±inf
    ylo, yhi = _floats(res["ylo"]), _floats(res["yhi"])
    clean = bool((_floats(res["nchk"]) == n_unit).all() and np.isfinite(_floats(res["x"])).all()
                 and np.isfinite(s1).all() and (ylo > 0).all() and np.isfinite(yhi).all())
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
    n_unit = _floats(res["n"])
    tsum = np.column_stack([_floats(res[f"t{i}"]) for i in range(nb)]) if nb else np.zeros((n_unit.size, 0))
    tt = np.zeros((n_unit.size, nb, nb))
    for i in range(nb):
        for j in range(i, nb):
            tt[:, i, j] = tt[:, j, i] = _floats(res[f"tt{i}_{j}"])
    s = np.column_stack([_floats(res[f"s{k}"]) for k in range(1, big_m + 1)])
    cross = np.zeros((n_unit.size, nb, big_k))
    for i in range(nb):
        for k in range(1, big_k + 1):
            cross[:, i, k - 1] = _floats(res[f"c{i}_{k}"])
    return GroupSeries(n_unit, _floats(res["centre"]), s, cross, tsum, tt, _floats(res["ylo"]),
                       _floats(res["yhi"]), t_ref)


def _constant_covariates(series: GroupSeries, num_cols: list[str], t_ref: np.ndarray, n: int) -> dict[str, float | None]:
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


def _exact_setup(con: Any, src: str, case: str, checks: list[tuple[str, str, str]], cat_cols: list[str],
                 num_cols: list[str], progress: ProgressFn | None) -> dict:
    """Cleaning counts per column and reason, ranges and domains, and the groups: three scans."""
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
    row = _one(con.execute(f"SELECT {', '.join(parts)} FROM bw_clean"))
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


def _floats(col: Any) -> np.ndarray:
    """A fetched numeric column as float64, NULL as NaN."""
    return np.ma.filled(np.ma.asarray(col, dtype=float), np.nan) if np.ma.is_masked(col) else np.asarray(col, dtype=float)


def _one(cursor: Any) -> tuple:
    row = cursor.fetchone()
    if row is None:
        raise DataError("the SQL engine returned no result; check the input files")
    return tuple(row)
