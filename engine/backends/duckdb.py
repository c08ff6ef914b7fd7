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
from ..read.cleaning import CleaningReport
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
from ..stats.power_sums import GRID_TOL, SERIES_TOL
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
from .dialect import DUCKDB, Dialect
from .scans import exact_setup, floats, one_row, series_setup
from .sql_text import aggregate_sql, lit, series_sql, shifted_transforms, transform_sql
from .weighted import (
    WEIGHT,
    check_weights,
    unweighted_request,
    weighted_moments,
    weighted_series_setup,
    weighted_spread,
    weights_in_range,
)

__all__ = ["SqlStudy", "make_sql_study", "build_sql_study", "aggregate_sql", "series_sql", "transform_sql",
           "choose_engine"]

_NA_TEXT = NA_TEXT  # the same missing-value texts as the in-memory reader
ProgressFn = Callable[[str], None]


def choose_engine(path: str, engine: str, memory_cap: int) -> str:
    """'memory', 'duckdb' or 'spark' for ``--engine auto|memory|duckdb|spark`` (auto never picks Spark)."""
    if engine not in {"auto", "memory", "duckdb", "spark"}:
        raise UsageError(f"engine {engine!r} is unknown; use auto, memory, duckdb or spark")
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


    def __init__(self, con: Any, *, progress: ProgressFn | None = None, dialect: Dialect = DUCKDB,
                 **kw: Any) -> None:
        self.con = con
        self.dialect = dialect
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
        return Rows(got["y"], got["x"], {c.name: got[c.name] for c in self.covariates}, self.n, self.n > k,
                    got.get(WEIGHT))

    def sample_rows(self, k: int, seed: int = SAMPLE_SEED) -> dict[str, np.ndarray]:
        """A seeded random sample of ``k`` used rows (all of them when there are at most ``k``):
        y, x and each covariate (categories as text), in one more scan."""
        hit = self._cache.get(("sample", k, seed))
        if hit is not None:
            return hit
        cols = ["y", "x", *(self.dialect.quote(self._info["sql_name"][c.name]) for c in self.covariates)]
        if self.weights_name is not None:
            cols.append(WEIGHT)
        select = f"SELECT {', '.join(cols)} FROM bw_clean"
        self._say(f"scanning {self.n:,} rows for a sample of {min(k, self.n):,}")
        res = self.con.execute(select if self.n <= k else self.dialect.sample(select, k, seed)).fetchnumpy()
        self._say("")
        out = {"y": floats(res["y"]), "x": floats(res["x"])}
        for c in self.covariates:
            col = res[self._info["sql_name"][c.name]]
            out[c.name] = np.asarray(col).astype(str) if c.kind == "categorical" else floats(col)
        if self.weights_name is not None:
            out[WEIGHT] = floats(res[WEIGHT])
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
        if self.weights_name is not None:  # the user's weights: sums about each unit's own means
            self._moments.update(weighted_moments(self, todo))
            return
        info = self._info
        keys = ["x", *info["cat_sql"]]
        nums = info["num_sql"]
        # covariates are shifted by their means in bw_shifted; responses here; added back below
        shifts, zs = shifted_transforms(todo, info["y_mean"])
        sql = aggregate_sql("bw_shifted", keys, nums, zs, self.dialect)
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
                    level_weights: np.ndarray | None = None, transform: Any = None) -> GroupStats:
        key = ("stats", z_key, by, weights_key, bases_key, extremes)
        hit = self._cache.get(key)
        if hit is not None:
            return hit
        if not (isinstance(z_key, tuple) and z_key and z_key[0] == "z"):
            raise UsageError("the SQL engine computes group statistics by response transform only")
        t = Transform(*z_key[1])
        self._scan([t])
        mom = self._moments[t.key()]
        if self.weights_name is not None and weights_key is None:  # unweighted, as memory asked so
            mom = unweighted_request(mom, bases_key)
        hit = self._pool(mom, by, bases_key, level_weights, extremes)
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
        uw = mom.get("wsum", un)  # with the user's weights each unit weighs Σw, else its row count
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
        wsum = count if uw is un else np.bincount(codes, weights=uw, minlength=c)
        gmeans = np.column_stack([np.bincount(codes, weights=uw * means[:, k], minlength=c) / wsum
                                  for k in range(q_ + 1)])
        dev = means - gmeans[codes]
        within = np.zeros((c, q_ + 1, q_ + 1))
        for a in range(q_ + 1):
            for b in range(a, q_ + 1):
                v = np.bincount(codes, weights=com[:, a, b] + uw * dev[:, a] * dev[:, b], minlength=c)
                within[:, a, b] = within[:, b, a] = v
        w_g = np.ones(c)
        slw = float(self._info.get("slw", 0.0)) if uw is not un else 0.0
        if level_weights is not None:
            w_g = level_weights[self.group_parent(by)]
            slw += float((count * np.log(w_g)).sum())
        ss = drop_rounding(within[:, q_, q_] * w_g, wsum * w_g, gmeans[:, q_])
        cross = within * w_g[:, None, None] if q_ else None
        zmin = zmax = None
        if extremes:
            zmin = np.full(c, np.inf)
            zmax = np.full(c, -np.inf)
            np.minimum.at(zmin, codes, mom["lo"])
            np.maximum.at(zmax, codes, mom["hi"])
        return GroupStats(self.n, count.astype(np.int64), wsum * w_g, gmeans[:, q_], ss, slw,
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

    def spread_by_level(self, z: Any, key: Any, w: Any, *, transform: Any = None, level_weights: Any = None) -> SideTest:
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
        if self.weights_name is not None:
            hit = weighted_spread(self, tkey, wkey, name)
        elif wkey is not None:
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
    dec = decimal or "."
    sep, encoding = _csv_preflight(path, dec, delimiter)
    args = dict(y=y, x=x, covariates=covariates, tolerance=tolerance, decimal=dec, source=source, progress=progress,
                memory_limit=memory_limit, exact=exact, weights=weights)
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
                    progress: ProgressFn | None, memory_limit: str | None, exact: bool,
                    weights: str | None = None) -> SqlStudy:
    """The DuckDB study over ``path`` (see :func:`make_sql_study`)."""
    parse_tolerance(tolerance)  # a bad tolerance is refused before any reading
    src, as_text = _source_sql(path, decimal, delimiter, encoding)
    con = _connect(memory_limit)
    names, types = _describe(con, src, path, as_text)
    return build_sql_study(con, DUCKDB, src, names, types, as_text, path=path, y=y, x=x, covariates=covariates,
                           tolerance=tolerance, decimal=decimal, source=source, progress=progress, exact=exact,
                           weights=weights)


def build_sql_study(con: Any, d: Dialect, src: str, names: list[str], types: dict[str, str], as_text: bool, *,
                    path: str, y: str, x: str, covariates: Sequence[str], tolerance: str | float | None,
                    decimal: str, source: str, progress: ProgressFn | None, exact: bool,
                    weights: str | None = None) -> SqlStudy:
    """The study over the table ``src`` of an open connection, whatever the engine (``d`` says how
    it spells things): the columns resolved and typed, the cleaning and group scans, the study.

    ``names`` and ``types`` are the table's columns and their declared types; ``as_text`` says the
    columns arrive as text (CSV). ``con`` answers ``execute(sql)`` with ``fetchnumpy``,
    ``fetchall`` and ``fetchone``, as DuckDB's connection does.

    Long because it wires the set-up steps in order (each its own function) and assembles the
    facts the study keeps; splitting the dictionary would only scatter it."""
    tol, rel = parse_tolerance(tolerance)
    table = _SqlTable(con, d, src, names, types, as_text, decimal)
    cols = choose_columns(SimpleNamespace(columns=table.names), y=y, x=x, covariates=covariates, weights=weights)
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
    weighted_series = False
    if cols.weights is not None:  # the user's weights, under a name of ours, and their own one-scan series
        select += f", {table.num_expr(cols.weights)[0]} AS {WEIGHT}"
        weighted_series, exact = not exact, True
    con.execute(f"CREATE TEMP VIEW bw_clean AS SELECT {select} FROM {src} WHERE {case} = -1")
    con.execute(f"CREATE TEMP VIEW bw_all AS SELECT {select} FROM {src}")
    cat_sql = [sql_name[c] for c in cat_cols]
    num_sql = [sql_name[c] for c in num_cols]
    cat_missing = set(_NA_TEXT) if as_text else {""}
    facts = None if exact else series_setup(con, cat_sql, num_sql, cat_missing, progress, d)
    if facts is None and weighted_series:
        facts = weighted_series_setup(con, cat_sql, num_sql, cat_missing, progress, d)
    if facts is None:
        facts = exact_setup(con, src, case, checks, cat_sql, num_sql, progress, d)
    user = {v: k for k, v in sql_name.items()}
    for key in ("num_constant", "num_mean"):  # (units stay keyed by the SQL names: "n" is theirs)
        if key in facts:
            facts[key] = {user.get(k, k): v for k, v in facts[key].items()}
    n, n_read, drops = facts["n"], facts["n_read"], facts["drops"]
    if n_read == 0:
        raise DataError(f"{path} has no data rows; check the file")
    w_facts = None if cols.weights is None else (facts.get("weights")  # the one scan saw every weight
                                                 or check_weights(con, table, src, case, cols.weights))
    require_rows(n, drops)
    unit_x = np.asarray(facts["units"]["x"], dtype=float)
    unit_n = np.asarray(facts["units"]["n"], dtype=float)
    x_values = np.unique(unit_x)
    xmin, xmax = float(x_values[0]), float(x_values[-1])
    require_spread(cols, (xmin, xmax), (facts["y_min"], facts["y_max"]))
    if w_facts is not None:
        weights_in_range(w_facts[0], w_facts[1], cols.weights)  # type: ignore[arg-type]
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
    if w_facts is not None:
        info["slw"] = w_facts[2]
    study = SqlStudy(
        con,
        progress=progress,
        dialect=d,
        _info=info,
        source=source or Path(path).name,
        report=CleaningReport(source or Path(path).name, n_read, n, drops),
        y_name=cols.y,
        x_name=cols.x,
        y=np.empty(0),
        x=np.empty(0),
        covariates=covs,
        weights=None if cols.weights is None else np.empty(0),  # shape only, as y and x: rows stay in the files
        weights_name=cols.weights,
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


def _describe(con: Any, src: str, path: str, as_text: bool) -> tuple[list[str], dict[str, str]]:
    """Column names and declared types of ``src`` (DuckDB); typed files with repeated names are refused."""
    desc = con.execute(f"DESCRIBE SELECT * FROM {src}").fetchall()
    names = [str(r[0]) for r in desc]
    if not as_text:
        from ..read.tables import _refuse_duplicate_names

        _refuse_duplicate_names(path, [n.strip() for n in names])
    return names, {str(r[0]): str(r[1]).upper() for r in desc}


@dataclass
class _SqlTable:
    """The source's columns and types, and the SQL that reads each column as the memory engine does
    (spelled by the engine's dialect)."""

    con: Any
    d: Dialect
    src: str
    names: list[str]
    types: dict[str, str]
    as_text: bool
    decimal: str

    def typed_numeric(self, col: str) -> bool:
        """True for a column the file itself types as a number."""
        return self.d.is_number_type(self.types[col])

    def num_expr(self, col: str) -> tuple[str, str, str, str]:
        """(value, missing, non-numeric, non-finite) SQL for a numeric column."""
        d = self.d
        c = d.quote(col)
        if self.typed_numeric(col):
            v = f"CAST({c} AS DOUBLE)"
            return v, f"({c} IS NULL OR isnan({v}))", "FALSE", d.isinf(v)
        text = f"trim(CAST({c} AS {d.text_type}))"
        body = f"replace({text}, ',', '.')" if self.decimal == "," else text
        v = d.to_double(body)
        missing = f"({c} IS NULL OR {text} IN ({_na_list(d)}))"
        return v, missing, f"(NOT {missing} AND {v} IS NULL)", f"(NOT {missing} AND ({d.isinf(v)} OR isnan({v})))"

    def kind(self, col: str) -> str:
        """'numeric' when every present value of the covariate parses as a number, else 'categorical'."""
        if self.typed_numeric(col):
            return "numeric"
        _, missing, non_num, _ = self.num_expr(col)
        bad, present = one_row(self.con.execute(
            f"SELECT COUNT(*) FILTER (WHERE {non_num}), COUNT(*) FILTER (WHERE NOT {missing}) FROM {self.src}"
        ))
        return "numeric" if (bad == 0 and present > 0) else "categorical"

    def row_checks(self, cols: ChosenColumns, kinds: dict[str, str]) -> list[tuple[str, str, str]]:
        """(column, reason, condition) in the order of the in-memory cleaning: a row's first problem."""
        checks: list[tuple[str, str, str]] = []
        for col in (cols.y, cols.x, *cols.covariates):
            if col in kinds and kinds[col] == "categorical":
                c = self.d.quote(col)
                missing_text = _na_list(self.d) if self.as_text else self.d.literal("")
                checks.append((col, "missing", f"({c} IS NULL OR trim(CAST({c} AS {self.d.text_type})) "
                                               f"IN ({missing_text}))"))
            else:
                _, miss, non_num, non_fin = self.num_expr(col)
                checks += [(col, "missing", miss), (col, "non-numeric", non_num), (col, "non-finite", non_fin)]
        return checks

    def select_list(self, cols: ChosenColumns, cat_cols: list[str], num_cols: list[str],
                    sql_name: dict[str, str]) -> str:
        """y, x, then the covariates under the query's own names: categories trimmed, numbers parsed."""
        q = self.d.quote
        parts = [f"{self.num_expr(cols.y)[0]} AS y", f"{self.num_expr(cols.x)[0]} AS x"]
        parts += [f"trim(CAST({q(c)} AS {self.d.text_type})) AS {q(sql_name[c])}" for c in cat_cols]
        parts += [f"{self.num_expr(c)[0]} AS {q(sql_name[c])}" for c in num_cols]
        return ", ".join(parts)


def _na_list(d: Dialect) -> str:
    """The missing-value texts as an SQL list of literals."""
    return ", ".join(d.literal(s) for s in _NA_TEXT)


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
    study.dialect.put(con, "bw_xmap", {"x": x_values, "code": study.x_codes_for_values(x_values).astype(np.int64)})
    q = study.dialect.quote
    sql_name = info["sql_name"]
    shifted = ["x", "y", *[q(sql_name[c]) for c in info["cat_cols"]]]
    shifted += [f"({q(sql_name[c])} - {info['num_mean'][c]!r}) AS {q(sql_name[c])}" for c in info["num_cols"]]
    if study.weights_name is not None:
        shifted.append(WEIGHT)
    con.execute(f"CREATE TEMP VIEW bw_shifted AS SELECT {', '.join(shifted)} FROM bw_clean")


