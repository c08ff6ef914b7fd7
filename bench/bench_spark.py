"""The depth-2 remedy tree on one Parquet file through Spark (local[2]), DuckDB and memory.

Usage:
    python bench/bench_spark.py                 # 10⁷ rows
    python bench/bench_spark.py --rows 1e6      # a smaller run
    python bench/bench_spark.py --keep          # keep (and reuse) the generated file

The data are bench_sql.py's (seeded: x at 50 levels, two numeric covariates, y > 0 curved in x).
Each engine runs in its own Python process. Reported per engine: wall time (study + grow), peak
RSS of the Python driver (getrusage), for Spark also the JVM's peak (VmHWM of the local Spark
process), the number of queries that read the rows (scans), and for Spark the bytes of group
results that came back (what would cross the network from a cluster).
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "bench"))

from bench_sql import COVARIATES, data_file  # noqa: E402


def _child_spark(path: str) -> dict:
    from bendwise.engine.backends.spark import make_spark_study
    from bendwise.engine.tree.tree import RemedyTree

    t0 = time.perf_counter()
    study = make_spark_study(path, y="y", x="x", covariates=list(COVARIATES), master="local[2]")
    t1 = time.perf_counter()
    tree = RemedyTree(study)
    tree.grow(2)
    t2 = time.perf_counter()
    con = study.con  # the SparkConnection: its scan and byte counters
    jvm_pid = int(con.spark.sparkContext._jvm.java.lang.ProcessHandle.current().pid())
    jvm_peak = 0.0
    for line in Path(f"/proc/{jvm_pid}/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            jvm_peak = int(line.split()[1]) / 1024
    return {"study": t1 - t0, "grow": t2 - t1, "seconds": t2 - t0, "nodes": len(tree.nodes),
            "suggested": tree.suggest().node, "levels": study.c, "n": study.n, "scans": con.scans,
            "bytes_returned": con.bytes_returned, "units": int(study._info["unit_n"].size),
            "one_scan": study._info.get("series") is not None, "jvm_peak_mb": jvm_peak}


def _child_duckdb(path: str) -> dict:
    import duckdb

    count = {"scans": 0}
    real = duckdb.connect

    class Counting:
        def __init__(self, con) -> None:
            self._con = con

        def execute(self, sql: str, *args):
            if sql.lstrip().upper().startswith("SELECT"):
                count["scans"] += 1
            return self._con.execute(sql, *args)

        def __getattr__(self, name):
            return getattr(self._con, name)

    duckdb.connect = lambda *a, **k: Counting(real(*a, **k))  # type: ignore[assignment]
    from bendwise.engine.backends.duckdb import make_sql_study
    from bendwise.engine.tree.tree import RemedyTree

    t0 = time.perf_counter()
    study = make_sql_study(path, y="y", x="x", covariates=list(COVARIATES))
    t1 = time.perf_counter()
    tree = RemedyTree(study)
    tree.grow(2)
    t2 = time.perf_counter()
    return {"study": t1 - t0, "grow": t2 - t1, "seconds": t2 - t0, "nodes": len(tree.nodes),
            "suggested": tree.suggest().node, "scans": count["scans"], "n": study.n}


def _child_memory(path: str) -> dict:
    import bendwise.engine as engine
    import pandas as pd
    from bendwise.engine.tree.tree import RemedyTree

    t0 = time.perf_counter()
    frame = pd.read_parquet(path)
    study = engine.make_study(frame, y="y", x="x", covariates=list(COVARIATES))
    t1 = time.perf_counter()
    tree = RemedyTree(study)
    tree.grow(2)
    t2 = time.perf_counter()
    return {"study": t1 - t0, "grow": t2 - t1, "seconds": t2 - t0, "nodes": len(tree.nodes),
            "suggested": tree.suggest().node, "scans": 1, "n": study.n}


CHILDREN = {"spark": _child_spark, "duckdb": _child_duckdb, "memory": _child_memory}


def run_child(kind: str, path: Path) -> dict:
    t0 = time.perf_counter()
    env = {"OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"} | dict(os.environ)
    proc = subprocess.run([sys.executable, __file__, "--child", kind, str(path)], capture_output=True, text=True,
                          cwd=ROOT, env=env)
    if proc.returncode != 0:
        raise SystemExit(f"{kind} child failed:\n{proc.stderr[-3000:]}")
    out = json.loads([ln for ln in proc.stdout.splitlines() if ln.startswith("BENCH ")][-1][6:])
    out["wall"] = time.perf_counter() - t0
    return out


def main() -> None:
    if len(sys.argv) > 1 and sys.argv[1] == "--child":
        out = CHILDREN[sys.argv[2]](sys.argv[3])
        out["driver_rss_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        sys.stdout.write("BENCH " + json.dumps(out) + "\n")
        return
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--rows", type=float, default=1e7)
    p.add_argument("--keep", action="store_true")
    p.add_argument("--engines", default="spark,duckdb,memory")
    args = p.parse_args()
    rows = int(args.rows)
    folder = Path(tempfile.gettempdir()) / "bendwise-bench-sql"
    folder.mkdir(exist_ok=True)
    path, gen = data_file(folder, rows)
    print(f"{rows:,} rows in {path.name} ({path.stat().st_size / 2**20:.0f} MB; generated in {gen:.0f} s)")
    results = {}
    try:
        for kind in args.engines.split(","):
            results[kind] = r = run_child(kind, path)
            extra = ""
            if kind == "spark":
                extra = (f", JVM peak {r['jvm_peak_mb']:.0f} MB, {r['bytes_returned']:,} bytes returned "
                         f"over {r['units']} groups ({r['bytes_returned'] / max(r['scans'], 1) / r['units']:.0f} "
                         f"bytes per group per scan)")
            print(f"{kind:7s} {r['wall']:7.1f} s wall (study {r['study']:.1f} s, grow {r['grow']:.1f} s), "
                  f"driver peak RSS {r['driver_rss_mb']:.0f} MB, {r['scans']} scans{extra}; "
                  f"suggested node {r['suggested']}", flush=True)
    finally:
        if not args.keep:
            path.unlink(missing_ok=True)
    same = {r["suggested"] for r in results.values()}
    print("same suggestion on every engine" if len(same) == 1 else f"suggestions differ: {results}")


if __name__ == "__main__":
    main()
