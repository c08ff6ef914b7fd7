"""A Study: the cleaned columns of one analysis, its replicate groups and its caches."""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from ..errors import DataError, UsageError
from ..read.cleaning import CleaningReport, DropCount
from ..read.columns import first_rows, numeric_column
from ..read.usable import (
    MAGNITUDE_LIMIT,
    MAX_CATEGORIES,
    check_magnitude,
    choose_columns,
    require_categories,
    require_covariate_varies,
    require_rows,
    require_spread,
)
from .groups import (
    GroupStats,
    compute_base_parts,
    compute_group_stats,
    narrow_group_stats,
    pool_group_stats,
)
from .rows import SAMPLE_SEED, LazyColumns, NoRows, Rows

if TYPE_CHECKING:
    import pandas as pd

__all__ = ["Study", "Covariate", "make_study", "parse_tolerance", "check_magnitude", "MAX_CATEGORIES",
           "MAGNITUDE_LIMIT"]

@dataclass(frozen=True, slots=True, eq=False)
class Covariate:
    """An admitted extra variable."""

    name: str
    """Column name as in the file."""
    kind: str
    """'numeric' or 'categorical'."""
    values: np.ndarray
    """Float values (numeric) or integer codes 0..k-1 (categorical)."""
    levels: tuple[str, ...] = ()
    """Category names in code order; the first is the reference level (treatment coding)."""


def parse_tolerance(text: str | float | None) -> tuple[float | None, bool]:
    """'0.5' → (0.5, False) absolute; '2%' → (0.02, True) relative to the x range."""
    if text is None:
        return None, False
    s = str(text).strip()
    rel = s.endswith("%")
    try:
        val = float(s[:-1] if rel else s)
    except ValueError:
        raise UsageError(f"tolerance {text!r} is not a number; give e.g. 0.5 or 2%") from None
    if not math.isfinite(val) or val < 0:
        raise UsageError(f"tolerance {text!r} must be a finite number ≥ 0; give e.g. 0.5 or 2%")
    return (val / 100.0 if rel else val), rel


class Study:
    """Response, predictor, covariates and weights after cleaning, with replicate groups.

    Owns the caches of group codes and group statistics, keyed by hashable descriptions, so
    every model scored on this study reuses one pass over the rows per distinct key.
    """

    def __init__(
        self,
        *,
        source: str,
        report: CleaningReport,
        y_name: str,
        x_name: str,
        y: np.ndarray,
        x: np.ndarray,
        covariates: tuple[Covariate, ...] = (),
        weights: np.ndarray | None = None,
        weights_name: str | None = None,
        tolerance: float | None = None,
        tolerance_text: str | None = None,
    ) -> None:
        self.source = source
        self.report = report
        self.y_name = y_name
        self.x_name = x_name
        self.y = y
        self.x = x
        self.covariates = covariates
        self.weights = weights
        self.weights_name = weights_name
        self.tolerance = tolerance
        self.tolerance_text = tolerance_text
        self._cache: dict[Any, Any] = {}
        self._stats_made: dict[Any, list] = {}  # (response, weights) → statistics computed from rows
        self.x_codes, self.x_level_values, self.x_level_labels = self._x_groups()

    # ----- the row source (a SQL-backed study answers these from its files) ----------------
    def rows(self) -> Rows | NoRows:
        """Every used row: they are in memory here (``engine.stats.rows``).

        Built once and cached; the categorical covariates' labels per row cost a pass over the
        rows each, so each is made the first time something reads it (the tree asks for the rows
        at every node, mostly to learn that they are here).
        """
        hit = self._cache.get("rows")
        if hit is None:
            def column(cov: Covariate) -> Callable[[], np.ndarray]:
                if cov.kind == "categorical":
                    return lambda: np.asarray(cov.levels, dtype=object)[cov.values].astype(str)
                return lambda: cov.values

            covs = LazyColumns({c.name: column(c) for c in self.covariates})
            hit = self._cache["rows"] = Rows(self.y, self.x, covs, self.n, False)
        return hit

    def row_sample(self, k: int, seed: int = SAMPLE_SEED) -> Rows:
        """A seeded random sample of ``k`` used rows, in row order (every row when n ≤ k)."""
        every = self.rows()
        assert isinstance(every, Rows)
        if self.n <= k:
            return every
        idx = np.sort(np.random.default_rng(seed).choice(self.n, size=int(k), replace=False))
        return Rows(self.y[idx], self.x[idx], {n: v[idx] for n, v in every.covariates.items()}, self.n, True)

    @property
    def x_min(self) -> float:
        """Smallest x used (cached: asked for by every node)."""
        hit = self._cache.get("x_min")
        if hit is None:
            hit = self._cache["x_min"] = float(self.x.min())
        return hit

    @property
    def x_max(self) -> float:
        """Largest x used (cached)."""
        hit = self._cache.get("x_max")
        if hit is None:
            hit = self._cache["x_max"] = float(self.x.max())
        return hit

    def domain_problem(self, t: Any, role: str) -> str | None:
        """Why transform ``t`` cannot apply to y (role 'y') or x (role 'x'); None if it can (cached)."""
        key = ("domain", role, t.key())
        if key not in self._cache:
            if role == "y":
                self._cache[key] = t.domain_problem(self.y, self.y_name, "y")
            else:
                self._cache[key] = t.domain_problem(self.x, self.x_name, "x")
        return self._cache[key]

    def transformed(self, t: Any) -> tuple[np.ndarray | None, float]:
        """(g(y) per row, Σ log|g′(y)|), cached; raises UsageError outside the domain."""
        key = ("z", t.key())
        hit = self._cache.get(key)
        if hit is None:
            problem = self.domain_problem(t, "y")
            if problem:
                raise UsageError(problem)
            with np.errstate(all="ignore"):
                # log and Box–Cox: the same operations on log y, taken once per study
                via_log = t.from_log(self._log_y()) if t.of_log else None
                if via_log is not None:
                    z, jac = via_log
                else:
                    z = np.asarray(t.forward(self.y), dtype=float)
                    jac = float(np.sum(t.log_abs_derivative(self.y)))
            hit = self._cache[key] = (z, jac)
        return hit

    def _log_y(self) -> np.ndarray:
        """log y per row (every y > 0 here: the transforms' domain check comes first), cached and
        read-only (the log transform's rows are this array)."""
        hit = self._cache.get("log_y")
        if hit is None:
            hit = self._cache["log_y"] = np.log(self.y)
            hit.setflags(write=False)
        return hit

    def level_weight_rows(self, w_level: np.ndarray) -> np.ndarray | None:
        """Per-row weights from per-x-level weights (times the user's weights)."""
        w = w_level[self.x_codes]
        return w if self.weights is None else w * self.weights

    def base_rows(self, key: Any, build: Any) -> np.ndarray | None:
        """Within-varying bases (numeric covariates, x powers under a tolerance), cached."""
        hit = self._cache.get(("bases", key))
        if hit is None:
            hit = build()
            self._cache[("bases", key)] = False if hit is None else hit
        return None if hit is False else hit

    def centred_log_y(self) -> tuple[np.ndarray, float]:
        """(log y − its mean per row, Σ log y), cached; raises UsageError unless every y > 0."""
        hit = self._cache.get("centred_log_y")
        if hit is None:
            if (self.y <= 0).any():
                raise UsageError("Box–Cox needs y > 0")
            logy = self._log_y()
            slog = float(logy.sum())
            hit = self._cache["centred_log_y"] = (logy - slog / self.n, slog)
        return hit

    def sum_log_y(self) -> float:
        """Σ log y (only meaningful when every y > 0)."""
        return float(np.sum(np.log(self.y)))

    def covariate_mean(self, name: str) -> float:
        """Mean of a numeric covariate over the rows used (reference value for curves)."""
        return float(np.mean(self.covariate(name).values))

    def y_range(self) -> tuple[float, float]:
        """Smallest and largest response used."""
        return float(self.y.min()), float(self.y.max())

    def exact_replicates(self) -> bool:
        """True when some exact x value occurs more than once."""
        return int(self._cache["n_exact_x"]) < self.n

    def spread_by_level(self, z: np.ndarray | None, key: Any, w: np.ndarray | None, *,
                        transform: Any = None, level_weights: np.ndarray | None = None) -> Any:
        """Brown–Forsythe across x levels of √w·z (cached by ``key``).

        When z = g(y) for a ``transform`` g monotone over the observed y, and the weights are
        constant within levels (``level_weights``, no per-row weights of the user's), each level's
        median of g(y) is the mean of g at the two middle y values of that level (one partial sort
        of y serves every response), and the weighted test's per-level sums are those of the
        unweighted one times √w or w (no pass of its own).
        """
        from .spread import brown_forsythe_from_sums, spread_test

        hit = self._cache.get(("spread", key))
        if hit is None:
            assert z is not None, "the spread test needs the rows"
            sums = self._deviation_sums(z, transform, w, level_weights)
            if sums is not None:
                hit = brown_forsythe_from_sums(self.level_counts(), *sums)
            else:
                zz = z if w is None else np.sqrt(w) * z
                hit = spread_test(zz, self.x_codes, self.c, self.group_order(()))
            self._cache[("spread", key)] = hit
        return hit

    def _deviation_sums(self, z: np.ndarray, transform: Any, w: np.ndarray | None,
                        level_weights: np.ndarray | None) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
        """Per level: Σd, Σ(d − d̄)², Σd² of d = |√w·z − median|, through the median shortcut of
        :meth:`spread_by_level`; None when the shortcut does not hold."""
        from .spread import deviation_sums

        if transform is None or (w is not None and (self.weights is not None or level_weights is None)):
            return None
        key = ("devsums", transform.key())
        sums = self._cache.get(key)
        if sums is None:
            lo_y, hi_y = self._y_middle()
            if lo_y is None or not transform.monotone_over(*self.y_range()):
                return None
            with np.errstate(all="ignore"):
                pair = np.asarray(transform.forward(np.concatenate([lo_y, hi_y])), dtype=float)
            medians = (pair[: self.c] + pair[self.c:]) / 2
            sums = self._cache[key] = deviation_sums(z, self.x_codes, self.c, self.level_counts(), medians)
        if w is None or level_weights is None:
            return sums
        root = np.sqrt(level_weights)
        return sums[0] * root, sums[1] * level_weights, sums[2] * level_weights

    def _y_middle(self) -> tuple[np.ndarray | None, np.ndarray | None]:
        """The two middle y values of each x level (equal for an odd count); (None, None) with
        more levels than a loop over them should take."""
        hit = self._cache.get("y_middle")
        if hit is None:
            counts = self.level_counts()
            if self.c > 5000:
                hit = (None, None)
            else:
                ys = self.y[self.group_order(())]
                ends = np.cumsum(counts)
                lo = np.empty(self.c)
                hi = np.empty(self.c)
                for g, (start, k) in enumerate(zip(ends - counts, counts, strict=True)):
                    seg = ys[start:start + k]
                    a, b = (k - 1) // 2, k // 2
                    part = np.partition(seg, (a, b)) if k > 1 else seg
                    lo[g], hi[g] = part[a], part[b]
                hit = (lo, hi)
            self._cache["y_middle"] = hit
        return hit

    def boxcox_stats(self, lams: np.ndarray, by: tuple[str, ...], bases: np.ndarray | None,
                     bases_key: Any) -> list[GroupStats]:
        """Group statistics of the normalised Box–Cox transform ((y/ġ)^λ − 1)/λ, ġ the geometric
        mean of y, for a grid of λ (one batched pass, cached). Dividing by ġ first keeps every
        power of a large or small y finite and accurate; the profile is the same up to a constant."""
        key = ("bcgrid", by, bases_key, self.weights_name, tuple(lams))
        hit = self._cache.get(key)
        if hit is None:
            from .boxcox_grid import EXACT_PROFILE_LIMIT, grid_group_stats, grid_group_stats_series

            codes, c = self.group_codes(by)
            ly = self.centred_log_y()[0]
            found: list = [None] * len(lams)
            if self.weights is None and self.n > EXACT_PROFILE_LIMIT:  # power sums: one pass for every λ
                parts = None if bases is None or not bases.shape[1] else self._base_parts(by, None, bases, bases_key)
                found = grid_group_stats_series(ly, codes, c, lams, bases, self.group_order(by), parts)
            todo = [i for i, st in enumerate(found) if st is None]
            if todo:
                rest = grid_group_stats(ly, codes, c, lams[todo], self.weights, bases)
                for i, st in zip(todo, rest, strict=True):
                    found[i] = st
            hit = self._cache[key] = found
        return hit

    # ----- grouping -------------------------------------------------------------------
    @property
    def n(self) -> int:
        """Rows used."""
        return int(self.y.shape[0])

    @property
    def c(self) -> int:
        """Number of x levels (replicate groups in x)."""
        return int(self.x_level_values.shape[0])

    @property
    def approximate_groups(self) -> bool:
        """True when a tolerance merged distinct x values into one level."""
        return self.tolerance is not None and bool(self._cache.get("merged", False))

    def covariate(self, name: str) -> Covariate:
        """The admitted covariate called ``name``."""
        for cov in self.covariates:
            if cov.name == name:
                return cov
        raise UsageError(f"covariate {name!r} was not admitted; admit it with --covariates")

    def _x_groups(self) -> tuple[np.ndarray, np.ndarray, tuple[str, ...]]:
        import pandas as pd

        raw_codes, raw_uniques = pd.factorize(self.x, sort=False)
        raw_u = np.asarray(raw_uniques, dtype=float)
        rank = np.argsort(raw_u, kind="stable")
        remap = np.empty(rank.size, dtype=np.intp)
        remap[rank] = np.arange(rank.size)
        codes = remap[raw_codes]
        uniq = raw_u[rank]
        self._cache["n_exact_x"] = int(uniq.size)
        if self.tolerance is not None and self.tolerance > 0 and uniq.size > 1:
            cluster = cluster_sorted(uniq, self.tolerance)
            k = int(cluster[-1])
            if k + 1 < uniq.size:
                self._cache["merged"] = True
                codes = cluster[codes]
                cnt = np.bincount(codes)
                values = np.bincount(codes, weights=self.x) / cnt
                return codes, values, level_labels(uniq, cluster)
        return codes, uniq, tuple(_fmt(v) for v in uniq)

    def group_codes(self, by: tuple[str, ...] = ()) -> tuple[np.ndarray, int]:
        """Codes of groups formed by the x level and the named covariates (cached)."""
        key = ("codes", by)
        hit = self._cache.get(key)
        if hit is not None:
            return hit
        if not by:
            out = (self.x_codes, self.c)
        elif any(self.distinct(name) == self.n for name in by):
            # a covariate with a new value on every row: each row is its own group
            out = (np.arange(self.n, dtype=np.intp), self.n)
        else:
            import pandas as pd

            combined = self.x_codes.astype(np.int64)
            size = self.c
            for name in by:
                cov = self.covariate(name)
                if cov.kind == "categorical":
                    sub, k = cov.values.astype(np.int64), len(cov.levels)
                else:
                    sub_codes, uniq = pd.factorize(cov.values, sort=True)
                    sub, k = sub_codes.astype(np.int64), len(uniq)
                combined = combined * k + sub
                size *= k
                if size > 2**53:  # re-densify to keep the product small
                    combined, u = pd.factorize(combined, sort=True)
                    combined = combined.astype(np.int64)
                    size = len(u)
            codes, uniq = pd.factorize(combined, sort=True)
            out = (codes.astype(np.intp), int(len(uniq)))
        self._cache[key] = out
        return out

    def group_stats(
        self,
        z: np.ndarray | None,
        z_key: Any,
        *,
        by: tuple[str, ...] = (),
        weights: np.ndarray | None = None,
        weights_key: Any = None,
        bases: np.ndarray | None = None,
        bases_key: Any = None,
        extremes: bool = False,
        level_weights: np.ndarray | None = None,
        transform: Any = None,
    ) -> GroupStats:
        """Group statistics of response ``z`` (identified by ``z_key``), cached per key.

        ``level_weights`` repeats rule weights per x level (rows already carry them in
        ``weights``); a SQL-backed study uses it because it has no rows. ``transform``, when z is
        that transform of y, lets the per-group extremes come from those of y.
        """
        key = ("stats", z_key, by, weights_key, bases_key, extremes)
        hit = self._cache.get(key)
        if hit is None and level_weights is not None and self.weights is None:
            # weights constant within x levels: scale the unweighted totals, no new pass
            base = self.group_stats(z, z_key, by=by, bases=bases, bases_key=bases_key, extremes=extremes,
                                    transform=transform)
            w_g = level_weights[self.group_parent(by)]
            hit = GroupStats(base.n, base.count, base.wsum * w_g, base.mean, base.ss * w_g,
                             float((base.count * np.log(w_g)).sum()), base.base_mean,
                             None if base.cross is None else base.cross * w_g[:, None, None],
                             base.zmin, base.zmax, base.mean_lo)
            self._cache[key] = hit
        if hit is None:
            hit = self._derived_stats(z_key, by, weights_key, bases_key, extremes)
            if hit is not None:
                self._cache[key] = hit
        if hit is None:
            codes, c = self.group_codes(by)
            ends = self._transformed_extremes(transform, by) if extremes else None
            order = self.group_order(by) if extremes and ends is None else None
            parts = None
            if bases is not None and bases.shape[1]:
                parts = self._base_parts(by, (weights_key, weights), bases, bases_key)
            if z is None:
                raise ValueError("in-memory group statistics need the response values")
            hit = compute_group_stats(codes, c, z, weights, bases, extremes and ends is None, order, parts,
                                      self._group_counts(by))
            if ends is not None:
                hit = dataclasses.replace(hit, zmin=ends[0], zmax=ends[1])
            self._cache[key] = hit
            self._stats_made.setdefault((z_key, weights_key), []).append((by, bases_key, extremes, hit))
        return hit

    def _group_counts(self, by: tuple[str, ...]) -> np.ndarray:
        """Rows per group formed ``by`` (int64, cached, read-only)."""
        hit = self._cache.get(("counts", by))
        if hit is None:
            codes, c = self.group_codes(by)
            hit = self._cache[("counts", by)] = np.bincount(codes, minlength=c).astype(np.int64)
            hit.setflags(write=False)
        return hit

    def _transformed_extremes(self, transform: Any, by: tuple[str, ...]) -> tuple[np.ndarray, np.ndarray] | None:
        """Per-group smallest and largest g(y) from those of y, for a ``transform`` g monotone over
        the observed y (None otherwise)."""
        if transform is None or not transform.monotone_over(*self.y_range()):
            return None
        key = ("y_extremes", by)
        hit = self._cache.get(key)
        if hit is None:
            ys = self.y[self.group_order(by)]
            counts = self._group_counts(by)
            starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
            hit = self._cache[key] = (np.minimum.reduceat(ys, starts), np.maximum.reduceat(ys, starts))
        with np.errstate(all="ignore"):
            a = np.asarray(transform.forward(hit[0]), dtype=float)
            b = np.asarray(transform.forward(hit[1]), dtype=float)
        return np.minimum(a, b), np.maximum(a, b)

    def _base_parts(self, by: tuple[str, ...], weighting: tuple[Any, np.ndarray | None] | None, bases: np.ndarray,
                    bases_key: Any) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """The bases' group means, their rows centred within groups and their cross-products
        (cached per grouping, weights and bases); ``weighting`` = (weights key, row weights)."""
        weights_key, weights = weighting if weighting is not None else (None, None)
        pkey = ("baseparts", by, weights_key, bases_key)
        parts = self._cache.get(pkey)
        if parts is None:
            codes, c = self.group_codes(by)
            wsum = np.bincount(codes, weights=weights, minlength=c) if weights is not None else \
                np.bincount(codes, minlength=c).astype(float)
            parts = self._cache[pkey] = compute_base_parts(codes, c, wsum, weights, bases)
        return parts

    def _derived_stats(self, z_key: Any, by: tuple[str, ...], weights_key: Any, bases_key: Any,
                       extremes: bool) -> GroupStats | None:
        """Statistics asked for, derived without a pass over the rows from statistics of the same
        response and weights already computed on finer groups (``by`` a subset of theirs), with the
        same bases or bases to drop, and extremes if asked for; None when there are none."""
        best = None
        for f_by, f_bases, f_ext, st in self._stats_made.get((z_key, weights_key), ()):
            if not set(by) <= set(f_by) or (extremes and not f_ext):
                continue
            if bases_key is not None and f_bases != bases_key:
                continue
            if best is None or st.c < best[3].c:
                best = (f_by, f_bases, f_ext, st)
        if best is None:
            return None
        f_by, _, _, st = best
        keep_bases = bases_key is not None
        if set(f_by) == set(by) and tuple(f_by) == tuple(by):
            return narrow_group_stats(st, bases=keep_bases, extremes=extremes)
        _, c = self.group_codes(by)
        return pool_group_stats(st, self._group_map(f_by, by), c, bases=keep_bases, extremes=extremes)

    def _group_map(self, fine: tuple[str, ...], coarse: tuple[str, ...]) -> np.ndarray:
        """For each group formed ``fine``, the group formed ``coarse`` (a subset) that holds it."""
        key = ("gmap", fine, coarse)
        hit = self._cache.get(key)
        if hit is None:
            f_codes, f_c = self.group_codes(fine)
            c_codes, _ = self.group_codes(coarse)
            hit = np.empty(f_c, dtype=np.intp)
            hit[f_codes] = c_codes
            self._cache[key] = hit
        return hit

    def distinct(self, name: str) -> int:
        """Number of distinct values of an admitted covariate (cached)."""
        key = ("distinct", name)
        hit = self._cache.get(key)
        if hit is None:
            cov = self.covariate(name)
            if cov.kind == "categorical":
                hit = len(cov.levels)
            else:  # one sort: several times faster than hashing 10⁷ distinct doubles
                ordered = np.sort(np.asarray(cov.values, dtype=float))
                hit = int(np.count_nonzero(ordered[1:] != ordered[:-1])) + 1 if ordered.size else 0
            self._cache[key] = hit
        return hit

    def group_order(self, by: tuple[str, ...] = ()) -> np.ndarray:
        """Row order sorted by group (one sort per grouping, reused for every response)."""
        key = ("order", by)
        hit = self._cache.get(key)
        if hit is None:
            codes, c = self.group_codes(by)
            # 16-bit keys sort by radix in O(n); wider keys fall back to a merge sort
            small = codes.astype(np.uint16) if c <= 65535 else codes.astype(np.int64)
            hit = self._cache[key] = np.argsort(small, kind="stable")
        return hit

    def group_parent(self, by: tuple[str, ...]) -> np.ndarray:
        """For groups formed ``by`` covariates, the x level of each group."""
        key = ("xparent", by)
        hit = self._cache.get(key)
        if hit is None:
            codes, c = self.group_codes(by)
            hit = np.empty(c, dtype=np.intp)
            hit[codes] = self.x_codes
            self._cache[key] = hit
        return hit

    def group_category(self, by: tuple[str, ...], name: str) -> np.ndarray:
        """For groups formed ``by`` covariates (including categorical ``name``), its code per group."""
        key = ("gcat", by, name)
        hit = self._cache.get(key)
        if hit is None:
            codes, c = self.group_codes(by)
            hit = np.empty(c, dtype=np.intp)
            hit[codes] = self.covariate(name).values
            self._cache[key] = hit
        return hit

    def cache_get(self, key: Any) -> Any:
        """Look up a derived value cached on this study."""
        return self._cache.get(key)

    def cache_put(self, key: Any, value: Any) -> Any:
        """Store a derived value on this study; returns it."""
        self._cache[key] = value
        return value

    def level_counts(self) -> np.ndarray:
        """Rows per x level (cached, read-only)."""
        return self._group_counts(())

    def describe_design(self) -> str:
        """'24 rows at 8 levels (3 replicates each)' or a range of replicate counts."""
        counts = self.level_counts()
        lo, hi = int(counts.min()), int(counts.max())
        reps = f"{lo} replicate(s) each" if lo == hi else f"{lo}–{hi} replicates"
        return f"{self.n} rows at {self.c} levels of {self.x_name} ({reps})"


def cluster_sorted(uniq: np.ndarray, tolerance: float) -> np.ndarray:
    """Cluster index of each sorted distinct value: a new cluster starts where a value lies
    more than ``tolerance`` above the first value of the current cluster (deterministic)."""
    cluster = np.zeros(uniq.size, dtype=np.intp)
    start = uniq[0]
    k = 0
    for i in range(1, uniq.size):
        if uniq[i] - start > tolerance:
            k += 1
            start = uniq[i]
        cluster[i] = k
    return cluster


def level_labels(uniq: np.ndarray, cluster: np.ndarray) -> tuple[str, ...]:
    """'5' for a single value, '4.98…5.02' for a merged cluster."""
    k = int(cluster[-1]) + 1
    lo = np.array([uniq[cluster == j].min() for j in range(k)])
    hi = np.array([uniq[cluster == j].max() for j in range(k)])
    return tuple(f"{_fmt(a)}" if a == b else f"{_fmt(a)}…{_fmt(b)}" for a, b in zip(lo, hi, strict=True))


def _fmt(v: float) -> str:
    return f"{v:.6g}"


def _is_numeric_like(series: pd.Series) -> bool:
    import pandas as pd

    if pd.api.types.is_numeric_dtype(series.dtype) or pd.api.types.is_bool_dtype(series.dtype):
        return True
    text = pd.Series(pd.unique(series.dropna())).astype("string").str.strip()  # distinct values only
    text = text[text != ""]
    if text.empty:
        return False
    coerced = pd.to_numeric(text, errors="coerce")
    return bool(coerced.notna().all())


def make_study(
    frame: pd.DataFrame,
    *,
    y: str,
    x: str,
    covariates: Sequence[str] = (),
    weights: str | None = None,
    tolerance: str | float | None = None,
    source: str = "",
) -> Study:
    """Pick and clean the columns of one analysis; every dropped row is counted with a reason.

    Raises :class:`DataError`/:class:`UsageError` with one line naming the column, row or
    value and what to do (the rules are shared with the SQL engines: ``read/usable.py``).
    """
    tol, rel = parse_tolerance(tolerance)
    cols = choose_columns(frame, y=y, x=x, covariates=covariates, weights=weights)
    clean = _Cleaning(frame)
    y_arr = clean.numeric(cols.y, "response")
    x_arr = clean.numeric(cols.x, "predictor")
    cov_raw = [clean.covariate(col) for col in cols.covariates]
    w_arr = None if cols.weights is None else clean.weights(cols.weights)
    keep = clean.keep
    require_rows(int(keep.sum()), clean.drops)
    all_kept = bool(keep.all())
    yv = y_arr if all_kept else y_arr[keep]
    xv = x_arr if all_kept else x_arr[keep]
    require_spread(cols, (float(xv.min()), float(xv.max())), (float(yv.min()), float(yv.max())))
    if w_arr is not None:
        wk = w_arr[keep]
        check_magnitude(wk.min(), wk.max(), cols.weights, "weights")  # type: ignore[arg-type]
    covs = [_admit_covariate(col, kind, raw, keep) for col, kind, raw in cov_raw]
    if tol is not None and rel:
        tol = tol * float(np.ptp(xv))
    report = CleaningReport(source or "<table>", clean.n_read, int(keep.sum()), tuple(clean.drops))
    return Study(
        source=source or "<table>",
        report=report,
        y_name=cols.y,
        x_name=cols.x,
        y=yv,
        x=xv,
        covariates=tuple(covs),
        weights=None if w_arr is None else w_arr[keep],
        weights_name=cols.weights,
        tolerance=tol,
        tolerance_text=None if tolerance is None else str(tolerance),
    )


class _Cleaning:
    """Rows kept so far and the counted reasons for the others, column by column in order."""

    def __init__(self, frame: pd.DataFrame) -> None:
        self.frame = frame
        self.n_read = int(frame.shape[0])
        self.keep = np.ones(self.n_read, dtype=bool)
        self.drops: list[DropCount] = []

    def account(self, column: str, reason: str, mask: np.ndarray) -> None:
        """Drop the rows of ``mask`` still kept, counted under ``reason``."""
        new = mask & self.keep
        if new.any():
            self.drops.append(DropCount(column, reason, int(new.sum()), first_rows(new)))
            self.keep[new] = False

    def numeric(self, col: str, role: str) -> np.ndarray:
        """The column as floats; missing, non-numeric and non-finite cells drop their rows."""
        arr, missing, non_num, non_fin = numeric_column(self.frame[col], col)
        usable = ~(missing | non_num | non_fin)
        if not usable.any():
            if non_num.any():
                bad_row = int(np.flatnonzero(non_num)[0])
                raise DataError(
                    f"{role} column {col!r} is not numeric (e.g. {str(self.frame[col].iloc[bad_row])!r} in row "
                    f"{bad_row + 1}); choose a numeric column"
                )
            raise DataError(f"{role} column {col!r} has no usable values (all {self.n_read} rows missing); "
                            "check the column")
        self.account(col, "missing", missing)
        self.account(col, "non-numeric", non_num)
        self.account(col, "non-finite", non_fin)
        return arr

    def covariate(self, col: str) -> tuple[str, str, Any]:
        """(column, kind, values): numeric values, or raw codes and cleaned labels of a category."""
        import pandas as pd

        series = self.frame[col]
        if _is_numeric_like(series):
            return col, "numeric", self.numeric(col, "covariate")
        # factorise first, then clean only the distinct labels (cheap on long tables)
        raw_codes, raw_uniques = pd.factorize(series, use_na_sentinel=True)
        labels = np.array([str(u).strip() for u in raw_uniques] + [""], dtype=object)
        raw_codes = np.where(raw_codes < 0, len(labels) - 1, raw_codes)
        self.account(col, "missing", (labels == "")[raw_codes])
        return col, "categorical", (raw_codes, labels)

    def weights(self, w_col: str) -> np.ndarray:
        """Positive finite weights on every kept row, else one line naming the rows."""
        from ..read.columns import bad_values_text

        w_all, w_missing, w_non_num, w_non_fin = numeric_column(self.frame[w_col], w_col)
        keep = self.keep
        bad = (w_missing | w_non_num | w_non_fin) & keep
        if bad.any():
            rows = ", ".join(str(r) for r in first_rows(bad))
            raise DataError(
                f"weights column {w_col!r} has {bad_values_text(w_missing & keep, w_non_num & keep, w_non_fin & keep)} "
                f"(rows {rows}); fill them or remove those rows"
            )
        nonpos = (w_all <= 0) & keep
        if nonpos.any():
            rows = ", ".join(str(r) for r in first_rows(nonpos))
            raise DataError(
                f"weights must be > 0; column {w_col!r} has {int(nonpos.sum())} value(s) ≤ 0 (rows {rows}); "
                "fix or remove those rows"
            )
        return w_all


def _admit_covariate(col: str, kind: str, raw: Any, keep: np.ndarray) -> Covariate:
    """The covariate on the kept rows: numeric values, or categories coded 0..k−1 in sorted order."""
    if kind == "numeric":
        vals = np.asarray(raw)[keep]
        check_magnitude(vals.min(), vals.max(), col, "covariate")
        require_covariate_varies(col, float(vals[0]) if np.ptp(vals) == 0 else None)
        return Covariate(col, "numeric", vals)
    raw_codes, labels = raw
    kept = raw_codes if bool(keep.all()) else raw_codes[keep]
    used = np.unique(kept)
    uniq = np.array(sorted(set(labels[used])), dtype=object)
    remap = np.zeros(len(labels), dtype=np.intp)
    remap[used] = np.searchsorted(uniq, labels[used])
    require_categories(col, tuple(str(u) for u in uniq))
    return Covariate(col, "categorical", remap[kept].astype(np.intp), tuple(str(u) for u in uniq))
