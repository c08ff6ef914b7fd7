"""Time the depth-2 remedy tree with a weights column (``--weights``) through DuckDB, against the
same tree unweighted, the weighted tree forced onto the exact path, and the in-memory engine.

Usage:
    python bench/bench_sql_weights.py                  # 10⁷ rows (memory race at 10⁶)
    python bench/bench_sql_weights.py --rows 1e6       # a smaller run
    python bench/bench_sql_weights.py --memory-rows 0  # no in-memory race

Data (simulated, seeded, written with pyarrow one million rows at a time): x at 50 levels, two
numeric covariates t1, t2 varying within levels, y > 0 curved in x with a spread growing with the
mean, and weights w ∝ 1/mean² times a uniform factor in [0.5, 2] (they vary within every level).
Each run is its own Python subprocess (peak RSS from getrusage ru_maxrss); files go to a temp folder
and are deleted at the end.
"""

from __future__ import annotations

import argparse
import json
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

COVARIATES = ("t1", "t2")


def write_table(path: Path, rows: int, seed: int = 1) -> None:
    """The simulated table (see the module notes), one chunk at a time."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.parquet as pq

    rng = np.random.default_rng(seed)
    schema = pa.schema([(c, pa.float64()) for c in ("x", "t1", "t2", "y", "w")])
    with pq.ParquetWriter(path, schema) as writer:
        for start in range(0, rows, 1_000_000):
            m = min(1_000_000, rows - start)
            x = rng.integers(1, 51, m).astype(float)
            t1, t2 = rng.normal(20.0, 2.0, m), rng.normal(0.0, 1.0, m)
            mu = 5 + 0.4 * x + 0.01 * x**2 + 0.1 * t1 + 0.2 * t2
            y = mu * np.exp(rng.normal(0.0, 0.05, m))
            w = rng.uniform(0.5, 2.0, m) / mu**2
            writer.write_table(pa.table({"x": x, "t1": t1, "t2": t2, "y": y, "w": w}))


def child(kind: str, path: str) -> dict:
    """One timed run: 'duckdb', 'duckdb-weighted', 'duckdb-weighted-exact' or 'memory-weighted'."""
    from bendwise.engine.tree.tree import RemedyTree

    weights = "w" if "weighted" in kind else None
    t0 = time.perf_counter()
    if kind.startswith("duckdb"):
        from bendwise.engine.backends.duckdb import make_sql_study

        study = make_sql_study(path, y="y", x="x", covariates=list(COVARIATES), weights=weights,
                               exact=kind.endswith("exact"))
    else:
        import pandas as pd
        from bendwise.engine import make_study

        study = make_study(pd.read_parquet(path), y="y", x="x", covariates=list(COVARIATES), weights=weights)
    t1 = time.perf_counter()
    tree = RemedyTree(study)
    tree.grow(2)
    t2 = time.perf_counter()
    return {"kind": kind, "study": t1 - t0, "grow": t2 - t1, "seconds": t2 - t0, "nodes": len(tree.nodes),
            "suggested": tree.suggest().node, "exact_scans": getattr(study, "exact_scans", None),
            "one_scan": getattr(study, "_info", {}).get("series") is not None,
            "peak_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}


def run(kind: str, path: Path) -> dict:
    """``child`` in a fresh interpreter; its JSON line."""
    out = subprocess.run([sys.executable, __file__, "--child", kind, str(path)], capture_output=True, text=True,
                         check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def main() -> None:
    """Generate, time, print a table."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=float, default=1e7)
    ap.add_argument("--memory-rows", type=float, default=1e6)
    ap.add_argument("--child", nargs=2, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        print(json.dumps(child(*args.child)))
        return
    folder = Path(tempfile.mkdtemp(prefix="bendwise-bench-weights-"))
    try:
        results = []
        main_file = folder / "main.parquet"
        write_table(main_file, int(args.rows))
        for kind in ("duckdb", "duckdb-weighted", "duckdb-weighted-exact"):
            results.append((int(args.rows), run(kind, main_file)))
        if args.memory_rows:
            small = folder / "small.parquet"
            write_table(small, int(args.memory_rows))
            for kind in ("duckdb-weighted", "memory-weighted"):
                results.append((int(args.memory_rows), run(kind, small)))
        print("| rows | run | study s | grow s | total s | peak RSS MB | exact scans | one scan | suggested |")
        print("|---|---|---|---|---|---|---|---|---|")
        for rows, r in results:
            print(f"| {rows:.0e} | {r['kind']} | {r['study']:.1f} | {r['grow']:.1f} | {r['seconds']:.1f} | "
                  f"{r['peak_mb']:.0f} | {r['exact_scans']} | {r['one_scan']} | {r['suggested']} |")
    finally:
        shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    main()
