"""bench/bench_sql.py's GROUP BY floors hold what they say: the same-columns floor the count and
the sums and sums of squares of y, t1 and t2, and the fixed-transform scan the exact statistics
of y, √y, 1/y and log y with both covariates (reference: pandas groupby and numpy on the same
rows). The README's claim that no exact tree can beat that scan rests on it."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

duckdb = pytest.importorskip("duckdb")
ROOT = Path(__file__).resolve().parents[2]


def _bench():
    spec = importlib.util.spec_from_file_location("bench_sql", ROOT / "bench" / "bench_sql.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)  # type: ignore[union-attr]
    return mod


def test_floor_queries_compute_the_statistics_they_name(tmp_path):
    bench = _bench()
    path = tmp_path / "b.parquet"
    bench.generate(path, 20_000, seed=3)
    frame = pd.read_parquet(path)
    con = duckdb.connect()
    queries = bench.floor_queries(str(path), con)
    assert set(queries) == {"floor", "same", "fixed4", "series"}
    by = frame.groupby("x")
    same = sorted(con.execute(queries["same"]).fetchall())
    assert len(same) == by.ngroups == bench.LEVELS
    for row, (x, g) in zip(same, by, strict=True):
        want = [x, len(g)]
        for c in ("y", "t1", "t2"):
            want += [g[c].sum(), (g[c] ** 2).sum()]
        assert np.allclose(row, want, rtol=1e-12)
    fixed = sorted(con.execute(queries["fixed4"]).fetchall())
    for row, (x, g) in zip(fixed, by, strict=True):
        y = g["y"].to_numpy()
        a, b = g["t1"].to_numpy(), g["t2"].to_numpy()
        assert row[0] == x and row[1] == len(g) and row[2] == y.min() and row[3] == y.max()
        # constants cancel in the centred moments: compare per-group variances and covariances
        n = len(g)
        zs = [y, np.log(y), np.sqrt(y), 1.0 / y]
        sa, sb = row[4], row[5]
        assert np.isclose(row[6] - sa * sa / n, ((a - a.mean()) ** 2).sum(), rtol=1e-9)
        assert np.isclose(row[7] - sa * sb / n, ((a - a.mean()) * (b - b.mean())).sum(), rtol=1e-9, atol=1e-9)
        assert np.isclose(row[8] - sb * sb / n, ((b - b.mean()) ** 2).sum(), rtol=1e-9)
        for k, z in enumerate(zs):
            s1, s2, sza, szb = row[9 + 4 * k: 13 + 4 * k]
            assert np.isclose(s2 - s1 * s1 / n, ((z - z.mean()) ** 2).sum(), rtol=1e-7)
            assert np.isclose(sza - s1 * sa / n, ((z - z.mean()) * (a - a.mean())).sum(), rtol=1e-7, atol=1e-9)
            assert np.isclose(szb - s1 * sb / n, ((z - z.mean()) * (b - b.mean())).sum(), rtol=1e-7, atol=1e-9)
    assert len(con.execute(queries["floor"]).fetchall()) == bench.LEVELS
    series = sorted(con.execute(queries["series"]).fetchall())
    for row, (x, g) in zip(series, by, strict=True):
        assert len(row) == 1 + 8 + 10 + 2 * 8  # key, count/extremes/covariates, Σd^k, Σd^k·t
        n, ly, a = len(g), np.log(g["y"].to_numpy()), g["t1"].to_numpy()
        s1, s2 = row[9], row[10]
        assert row[0] == x and row[1] == n
        assert np.isclose(s2 - s1 * s1 / n, ((ly - ly.mean()) ** 2).sum(), rtol=1e-9)
        assert np.isclose(row[19] - s1 * row[4] / n, ((ly - ly.mean()) * (a - a.mean())).sum(), rtol=1e-7, atol=1e-9)
