"""Time the depth-2 remedy tree through DuckDB on a Parquet file larger than memory would like,
against one GROUP BY query on the same file (the floor), and against the in-memory engine.

Usage:
    python bench/bench_sql.py                       # 10⁸ rows (several minutes), in-memory race at 10⁷
    python bench/bench_sql.py --rows 3e7            # a smaller main run
    python bench/bench_sql.py --quick               # 10⁶ rows, in-memory race at 10⁶: a smoke run
    python bench/bench_sql.py --keep                # keep (and reuse) the generated files
    python bench/bench_sql.py --profile             # also time every SQL scan of the tree
    python bench/bench_sql.py --md /tmp/sql_bench_section.md
    python bench/bench_sql.py --accumulators 10,20,38   # what k plain SUMs cost on the same file
    python bench/bench_sql.py --repeat 5            # rounds of floor + tree (default 3)
    python bench/bench_sql.py --before /path/to/python  # also the tree of another checkout, same rounds

Data (simulated, seeded, written with pyarrow one row group at a time so generation never holds
more than one chunk): x at 50 levels; two numeric covariates varying within every level (t1, t2);
y > 0, curved in x, spread growing with the mean, so every kind of move is offered (Box–Cox,
Box–Tidwell, degree 2, covariates, x×covariate, power-of-mean weights).
Files live in a temp folder (``$TMPDIR/bendwise-bench-sql``) and are deleted unless --keep.

What is timed, each in its own Python subprocess (peak RSS from getrusage ru_maxrss):
  floor     one DuckDB query: SELECT x, COUNT(*), SUM(y), SUM(y*y) … GROUP BY x on the file
            (median of three runs in one process); beside it, interleaved, the same-columns GROUP BY
            (count, Σ, Σ² of y, t1, t2) and the scan of the fewest exact statistics a tree of y, √y,
            1/y and log y with both covariates needs (``floor_queries`` says what each holds)
  sql tree  engine.sql.make_sql_study(file, covariates t1,t2) + RemedyTree(study).grow(2)
            (duckdb and the scipy modules the tree imports lazily are imported before the clock)
            (clean data with y > 0: one scan of power sums, see engine.sql._Series; the notes
            column says whether that path was taken and how many exact scans it still needed)
  mem tree  pandas.read_parquet + engine.make_study + RemedyTree(study).grow(2)  (--memory-rows)
Each round runs the floor, then the tree (then the --before tree), each in a fresh process; the
ratio tree / floor is taken within each round (in-process wall time, and CPU time of all threads)
and reported as the median over rounds with its range, so a load that drifts between rounds
(other jobs on the machine) moves both sides of a ratio alike. The load average is printed.
Targets (issue 18): sql tree ≤ 6 × floor; peak RSS of the sql tree < 1 GB.
With --profile the sql tree child times every query DuckDB runs and lists the slowest (last round).
``--before PYTHON`` runs the same tree child under another interpreter whose ``bendwise`` is an
older checkout: the before/after comparison of the README, measured in the same rounds.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

LEVELS = 50
CHUNK = 1 << 20
COVARIATES = ("t1", "t2")


# ----------------------------------------------------------------------------- data


def generate(path: Path, rows: int, seed: int = 0) -> None:
    """Write ``rows`` rows to Parquet chunk by chunk (one row group per chunk)."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.parquet as pq

    rng = np.random.default_rng(seed)
    settings = 1.0 + 0.5 * np.arange(LEVELS)
    schema = pa.schema([("x", pa.float64()), ("y", pa.float64()), ("t1", pa.float64()), ("t2", pa.float64())])
    tmp = path.with_suffix(".part")
    with pq.ParquetWriter(tmp, schema, compression="snappy") as writer:
        done = 0
        while done < rows:
            m = min(CHUNK, rows - done)
            x = settings[rng.integers(0, LEVELS, size=m)]
            t1 = rng.normal(20.0, 2.0, m)
            t2 = rng.uniform(0.0, 1.0, m)
            mu = 20 + 2 * x + 0.03 * x**2 + 0.5 * t1 - 3 * t2
            y = mu + rng.normal(0.0, 0.03, m) * mu
            writer.write_table(pa.table({"x": x, "y": y, "t1": t1, "t2": t2}, schema=schema), row_group_size=m)
            done += m
    tmp.rename(path)


def data_file(folder: Path, rows: int) -> tuple[Path, float]:
    path = folder / f"bench_{rows}.parquet"
    if path.exists():
        return path, 0.0
    t0 = time.perf_counter()
    generate(path, rows)
    return path, time.perf_counter() - t0


# ----------------------------------------------------------------------------- child processes


def floor_queries(path: str, con) -> dict[str, str]:
    """The three GROUP BY queries the tree is measured against (each by x, on the same file):

    floor   count, Σy, Σy² (two columns read; the issue's "one GROUP BY")
    same    count, Σ, Σ² of y, t1 and t2 (the four columns the tree reads: the floor the in-memory
            benchmark uses, "on the same columns")
    fixed4  the fewest exact statistics of a tree that offered only y, √y, 1/y and log y with both
            covariates: per transform z (about a constant from the first rows) Σz, Σz², Σz·t1, Σz·t2,
            with the count, the extremes of y and the covariates' sums and cross-products (24
            accumulators; a tree that also profiles Box–Cox λ needs more), so no exact tree here can
            take less than this scan plus its own work
    series  the one scan cut to what the post-scan bound needs on these data (M = 10 power sums of
            ln y − centre, K = 8 covariate-times sums each: λ = ±1 to 1e-10 needs K = 7, the Box–Cox
            grid's ends K = 8) without the checks for missing cells: what a tree that offers
            Box–Cox cannot go below with the series
    """
    src = f"read_parquet('{path}')"
    ym, am, bm = con.execute(f"SELECT AVG(y), AVG(t1), AVG(t2) FROM (SELECT * FROM {src} LIMIT 65536)").fetchone()
    shifts = {"z1": f"y - {ym!r}", "z2": f"LN(y) - {math.log(ym)!r}", "z3": f"SQRT(y) - {math.sqrt(ym)!r}",
              "z4": f"1.0 / y - {1.0 / ym!r}"}
    base = (f"SELECT x, y, t1 - {am!r} AS a, t2 - {bm!r} AS b, "
            + ", ".join(f"{expr} AS {z}" for z, expr in shifts.items()) + f" FROM {src}")
    aggs = ["COUNT(*)", "MIN(y)", "MAX(y)", "SUM(a)", "SUM(b)", "SUM(a * a)", "SUM(a * b)", "SUM(b * b)"]
    for z in shifts:
        aggs += [f"SUM({z})", f"SUM({z} * {z})", f"SUM({z} * a)", f"SUM({z} * b)"]
    return {
        "series": _series_minimum(src, con, am, bm),
        "floor": f"SELECT x, COUNT(*) AS n, SUM(y) AS s1, SUM(y * y) AS s2 FROM {src} GROUP BY x",
        "same": f"SELECT x, COUNT(*), SUM(y), SUM(y * y), SUM(t1), SUM(t1 * t1), SUM(t2), SUM(t2 * t2) "
                f"FROM {src} GROUP BY x",
        "fixed4": f"SELECT x, {', '.join(aggs)} FROM ({base}) AS bw_f GROUP BY x",
    }


def _series_minimum(src: str, con, am: float, bm: float, big_m: int = 10, big_k: int = 8) -> str:
    """The one-scan power sums alone (see ``floor_queries``), centred as the engine centres them."""
    import numpy as np
    from bendwise.engine.backends.sql_text import centre_polynomial

    pre = con.execute(f"SELECT x, COUNT(*) AS n, AVG(LN(y)) AS lm, STDDEV_POP(LN(y)) AS ls "
                      f"FROM (SELECT * FROM {src} LIMIT 65536) GROUP BY x").fetchnumpy()
    px, w = np.asarray(pre["x"], dtype=float), np.asarray(pre["n"], dtype=float)
    lm, ls = np.asarray(pre["lm"], dtype=float), np.asarray(pre["ls"], dtype=float)
    curve = centre_polynomial(px, lm, w, ls)
    centre = curve.sql() if curve is not None else repr(float(np.average(lm, weights=w)))
    query = f"SELECT x, y, t1 - {am!r} AS a, t2 - {bm!r} AS b, LN(y) - {centre} AS d1 FROM {src}"
    have = 1
    while have < big_m:  # powers by repeated squaring, as the engine's scan
        new = [f"d{have} * d{k - have} AS d{k}" for k in range(have + 1, min(2 * have, big_m) + 1)]
        query = f"SELECT *, {', '.join(new)} FROM ({query})"
        have = min(2 * have, big_m)
    aggs = ["COUNT(*)", "MIN(y)", "MAX(y)", "SUM(a)", "SUM(b)", "SUM(a * a)", "SUM(a * b)", "SUM(b * b)"]
    aggs += [f"SUM(d{k})" for k in range(1, big_m + 1)]
    aggs += [f"SUM(d{k} * {c})" for c in "ab" for k in range(1, big_k + 1)]
    return f"SELECT x, {', '.join(aggs)} FROM ({query}) AS bw_s GROUP BY x"


def _child_floor(path: str) -> dict:
    import duckdb

    con = duckdb.connect()
    queries = floor_queries(path, con)
    times: dict[str, list[float]] = {k: [] for k in queries}
    cpus: dict[str, list[float]] = {k: [] for k in queries}
    groups = 0
    for _ in range(3):  # the median of three runs of each, interleaved (the first also reads the metadata)
        for name, sql in queries.items():
            t0, c0 = time.perf_counter(), time.process_time()
            res = con.execute(sql).fetchall()
            times[name].append(time.perf_counter() - t0)
            cpus[name].append(time.process_time() - c0)
            groups = len(res)
    out = {"seconds": sorted(times["floor"])[1], "cpu": sorted(cpus["floor"])[1], "runs": times["floor"],
           "groups": groups}
    for name in ("same", "fixed4", "series"):
        out[name] = sorted(times[name])[1]
    return out


def _child_accumulators(path: str, counts: str) -> dict:
    """The cost of k plain SUM accumulators (no other work), median of three runs each."""
    import duckdb

    con = duckdb.connect()
    cols = ("y", "t1", "t2")
    floor = f"SELECT x, COUNT(*), SUM(y), SUM(y * y) FROM read_parquet('{path}') GROUP BY x"
    out = {}
    for k in [int(v) for v in counts.split(",")]:
        aggs = ", ".join(f"SUM({cols[i % 3]} + {i}.0)" for i in range(k))
        ratios = []
        for _ in range(3):  # each time against a floor run just before it
            t0 = time.perf_counter()
            con.execute(floor).fetchall()
            t1 = time.perf_counter()
            con.execute(f"SELECT x, COUNT(*), {aggs} FROM read_parquet('{path}') GROUP BY x").fetchall()
            ratios.append((time.perf_counter() - t1) / (t1 - t0))
        out[str(k)] = sorted(ratios)[1]
    return {"accumulators": out}


class _TimedConnection:
    """Wraps a DuckDB connection and times every query (for --profile)."""

    def __init__(self, con, log: list) -> None:
        self._con = con
        self._log = log

    def execute(self, sql: str, *args):
        t0 = time.perf_counter()
        out = self._con.execute(sql, *args)
        self._log.append((time.perf_counter() - t0, " ".join(sql.split())[:150], sql.count("AVG(")))
        return out

    def __getattr__(self, name):
        return getattr(self._con, name)


def _child_sql_tree(path: str, profile: bool) -> dict:
    import duckdb

    log: list = []
    if profile:
        real = duckdb.connect
        duckdb.connect = lambda *a, **k: _TimedConnection(real(*a, **k), log)  # type: ignore[assignment]
    # the tree imports these lazily; import start-up is not part of either job (the floor, too,
    # imports duckdb before its clock)
    import scipy.linalg  # noqa: F401
    import scipy.special  # noqa: F401
    import scipy.stats  # noqa: F401
    from bendwise.engine.backends.duckdb import make_sql_study
    from bendwise.engine.tree.tree import RemedyTree

    t0, c0 = time.perf_counter(), time.process_time()
    study = make_sql_study(path, y="y", x="x", covariates=list(COVARIATES))
    t1 = time.perf_counter()
    tree = RemedyTree(study)
    tree.grow(2)
    t2 = time.perf_counter()
    out = {"study": t1 - t0, "grow": t2 - t1, "seconds": t2 - t0, "cpu": time.process_time() - c0,
           "nodes": len(tree.nodes),
           "suggested": tree.suggest().node, "levels": study.c, "n": study.n,
           "exact_scans": study.exact_scans, "one_scan": study._info.get("series") is not None,
           "orders": None if study._info.get("series") is None else [study._info["series"].M, study._info["series"].K]}
    if profile:
        out["queries"] = sorted(log, reverse=True)
        out["query_total"] = sum(s for s, _, _ in log)
    return out


def _child_mem_tree(path: str) -> dict:
    import bendwise.engine as engine
    import pandas as pd
    from bendwise.engine.tree.tree import RemedyTree

    t0 = time.perf_counter()
    frame = pd.read_parquet(path)
    t1 = time.perf_counter()
    study = engine.make_study(frame, y="y", x="x", covariates=list(COVARIATES))
    tree = RemedyTree(study)
    tree.grow(2)
    t2 = time.perf_counter()
    return {"read": t1 - t0, "grow": t2 - t1, "seconds": t2 - t0, "nodes": len(tree.nodes),
            "suggested": tree.suggest().node, "n": study.n}


def child_main(argv: list[str]) -> None:
    kind, path = argv[0], argv[1]
    if kind == "floor":
        out = _child_floor(path)
    elif kind == "accumulators":
        out = _child_accumulators(path, argv[2])
    elif kind == "sql":
        out = _child_sql_tree(path, profile="--profile" in argv)
    else:
        out = _child_mem_tree(path)
    out["self_maxrss_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    sys.stdout.write("BENCH " + json.dumps(out) + "\n")


def run_child(kind: str, path: Path, *extra: str, python: str = sys.executable) -> dict:
    """Run one measurement in a fresh interpreter (``python``); wall time and its peak RSS."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    t0 = time.perf_counter()
    # single-threaded BLAS for the small group-level solves, as the bendwise command sets it
    env = {"OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"} | dict(os.environ)
    proc = subprocess.run([python, __file__, "--child", kind, str(path), *extra],
                          capture_output=True, text=True, cwd=ROOT, env=env)
    wall = time.perf_counter() - t0
    if proc.returncode != 0:
        raise SystemExit(f"{kind} child failed:\n{proc.stderr[-3000:]}")
    line = [ln for ln in proc.stdout.splitlines() if ln.startswith("BENCH ")][-1]
    out = json.loads(line[6:])
    out["wall"] = wall
    after = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    # RUSAGE_CHILDREN is the largest child so far: exact for this child when it grew the max
    out["children_maxrss_mb"] = after / 1024
    out["rss_mb"] = out["self_maxrss_mb"] if after == before else after / 1024
    return out


# ----------------------------------------------------------------------------- report


def _kind(sql: str, avgs: int) -> str:
    if "nchk" in sql:
        return "one-scan group sums (series)"
    if "bw_pre" in sql:
        return "first rows (group centres)"
    if "MEDIAN(" in sql:
        return "spread (median + deviations)"
    if avgs > 20:
        return "exact Box–Cox grid"
    if sql.startswith('SELECT "x", COUNT(*) AS n, AVG('):
        return "exact response moments"
    return "study set-up (cleaning, ranges, levels)"


def _gb(mb: float) -> str:
    return f"{mb / 1024:.2f} GB" if mb >= 1024 else f"{mb:.0f} MB"


def _rows(n: int) -> str:
    exp = len(str(n)) - 1
    return f"10^{exp}" if n == 10**exp else f"{n:.2e}".replace("e+0", "e")


def _rounds(path: Path, args: argparse.Namespace) -> tuple[list[dict], list[dict], list[dict]]:
    """``args.repeat`` rounds of floor, tree (and the --before tree), each child a fresh process."""
    floors: list[dict] = []
    sqls: list[dict] = []
    befores: list[dict] = []
    for r in range(args.repeat):
        floors.append(run_child("floor", path))
        sqls.append(run_child("sql", path, *(["--profile"] if args.profile else [])))
        if args.before:
            befores.append(run_child("sql", path, python=args.before))
        # in-process times: interpreter and import start-up are not part of either job
        print(f"round {r + 1}: floor {floors[-1]['seconds']:.2f} s, tree {sqls[-1]['seconds']:.2f} s"
              + (f", before {befores[-1]['seconds']:.2f} s" if befores else "")
              + f" (load {os.getloadavg()[0]:.1f})", flush=True)
    return floors, sqls, befores


def _tree_note(sql: dict) -> str:
    return (f"{sql['nodes']} nodes; study {sql['study']:.1f} s, grow {sql['grow']:.1f} s; "
            + (f"one-scan series (M = {sql['orders'][0]}, K = {sql['orders'][1]})" if sql["one_scan"] else "exact path")
            + f", {sql['exact_scans']} extra scan(s)")


def _median(values: list[float]) -> float:
    v = sorted(values)
    return v[len(v) // 2] if len(v) % 2 else 0.5 * (v[len(v) // 2 - 1] + v[len(v) // 2])


def _spread(values: list[float], unit: str = "×") -> str:
    """Median and range of a list, e.g. ``5.8× (5.5–6.1×)``."""
    v, mid = sorted(values), _median(values)
    return f"{mid:.1f}{unit} ({v[0]:.1f}–{v[-1]:.1f}{unit})" if len(v) > 1 else f"{mid:.1f}{unit}"


def _ratio_lines(floors: list[dict], sqls: list[dict], befores: list[dict]) -> list[str]:
    """Per-round ratios to the floor (wall and CPU), their median and range, and the targets."""
    out = [f"{len(floors)} round(s); load average now {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores",
           f"floor in-process: {_spread([f['seconds'] for f in floors], ' s')}, "
           f"CPU {_spread([f['cpu'] for f in floors], ' s')}"]
    for name, runs in (("sql tree", sqls), ("before", befores)):
        if not runs:
            continue
        wall = [r["seconds"] / f["seconds"] for r, f in zip(runs, floors, strict=True)]
        cpu = [r["cpu"] / f["cpu"] for r, f in zip(runs, floors, strict=True)]
        rss = max(r["rss_mb"] for r in runs)
        mid = _median(wall)
        out.append(f"{name}: in-process {_spread([r['seconds'] for r in runs], ' s')}; ratio to the floor "
                   f"{_spread(wall)} wall, {_spread(cpu)} CPU (target ≤ 6×: {'met' if mid <= 6 else 'missed'}); "
                   f"peak RSS {_gb(rss)} (target < 1 GB: {'met' if rss < 1024 else 'missed'})")
        if all("same" in f for f in floors):
            same = [r["seconds"] / f["same"] for r, f in zip(runs, floors, strict=True)]
            out.append(f"{name}: ratio to the same-columns GROUP BY (y, t1, t2) {_spread(same)} wall")
    if floors and all("fixed4" in f for f in floors):
        out.append("exact statistics of y, √y, 1/y and log y with both covariates alone (24 accumulators, one "
                   f"scan, no tree): {_spread([f['fixed4'] / f['seconds'] for f in floors])} the floor; "
                   "the series sums alone (M = 10, K = 8, no checks): "
                   f"{_spread([f['series'] / f['seconds'] for f in floors])} the floor; "
                   f"same-columns GROUP BY: {_spread([f['same'] / f['seconds'] for f in floors])} the floor")
    return out


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--rows", type=float, default=1e8, help="rows of the main file (default 1e8)")
    p.add_argument("--memory-rows", type=float, default=1e7, help="rows of the in-memory race (default 1e7)")
    p.add_argument("--quick", action="store_true", help="10⁶ rows everywhere: a smoke run")
    p.add_argument("--keep", action="store_true", help="keep the generated files and reuse them next time")
    p.add_argument("--profile", action="store_true", help="time every SQL query of the tree")
    p.add_argument("--skip-memory", action="store_true", help="leave out the in-memory race")
    p.add_argument("--md", metavar="FILE", help="also write the table as Markdown")
    p.add_argument("--repeat", type=int, default=3, help="rounds of floor + tree (default 3)")
    p.add_argument("--before", metavar="PYTHON",
                   help="also time the tree under this interpreter (an older checkout's bendwise), same rounds")
    p.add_argument("--accumulators", metavar="K,K,…",
                   help="also time queries of K plain SUMs (the cost of accumulators alone), e.g. 10,20,38")
    args = p.parse_args()
    rows = int(1e6 if args.quick else args.rows)
    mem_rows = int(1e6 if args.quick else args.memory_rows)
    folder = Path(tempfile.gettempdir()) / "bendwise-bench-sql"
    folder.mkdir(exist_ok=True)
    made: list[Path] = []
    lines: list[str] = []
    try:
        path, gen = data_file(folder, rows)
        if gen:
            made.append(path)
        size = path.stat().st_size
        print(f"data: {path} ({_rows(rows)} rows, {size / 2**30:.2f} GiB"
              + (f", generated in {gen:.0f} s)" if gen else ", reused)"), flush=True)
        floors, sqls, befores = _rounds(path, args)
        floor, sql = floors[-1], sqls[-1]
        table = [
            ("DuckDB GROUP BY count/sum/sum² (floor)", rows, floor["wall"], floor["seconds"], floor["rss_mb"],
             "runs " + ", ".join(f"{v:.2f}" for v in floor["runs"]) + " s"),
            ("DuckDB: make_sql_study + grow(2)", rows, sql["wall"], sql["seconds"], sql["rss_mb"], _tree_note(sql)),
        ]
        if befores:
            b = befores[-1]
            table.append(("before: make_sql_study + grow(2)", rows, b["wall"], b["seconds"], b["rss_mb"], _tree_note(b)))
        if not args.skip_memory:
            if mem_rows == rows:
                mpath, msql = path, sql
            else:
                mpath, gen_m = data_file(folder, mem_rows)
                if gen_m:
                    made.append(mpath)
                msql = run_child("sql", mpath)
                table.append(("DuckDB: make_sql_study + grow(2)", mem_rows, msql["wall"], msql["seconds"],
                              msql["rss_mb"], f"{msql['nodes']} nodes"))
            mem = run_child("memory", mpath)
            table.append(("memory: read_parquet + make_study + grow(2)", mem_rows, mem["wall"], mem["seconds"],
                          mem["rss_mb"], f"{mem['nodes']} nodes; read {mem['read']:.1f} s, grow {mem['grow']:.1f} s"))
        lines.append("| run | rows | process wall | in-process | peak RSS | notes |")
        lines.append("|---|---:|---:|---:|---:|---|")
        for name, n, wall, inside, rss, note in table:
            lines.append(f"| {name} | {_rows(n)} | {wall:.1f} s | {inside:.1f} s | {_gb(rss)} | {note} |")
        lines.append("")
        if args.accumulators:
            acc = run_child("accumulators", path, args.accumulators)["accumulators"]
            lines.append("plain SUM accumulators, each run over a floor run just before it (median of 3): "
                         + "; ".join(f"{k}: {v:.1f}× floor" for k, v in acc.items()))
            lines.append("")
        lines += _ratio_lines(floors, sqls, befores)
        if args.profile:
            lines.append("")
            kinds: dict[str, list[float]] = {}
            for secs, text, avgs in sql["queries"]:
                kinds.setdefault(_kind(text, avgs), []).append(secs)
            lines.append("time by kind of scan: " + "; ".join(
                f"{k} {sum(v):.0f} s in {len(v)}" for k, v in sorted(kinds.items(), key=lambda kv: -sum(kv[1]))))
            lines.append("")
            lines.append(f"slowest SQL queries of the tree ({sql['query_total']:.1f} s in {len(sql['queries'])} queries):")
            lines.append("")
            lines.append("| seconds | AVG() count | query (start) |")
            lines.append("|---:|---:|---|")
            for secs, text, avgs in sql["queries"][:10]:
                lines.append(f"| {secs:.1f} | {avgs} | `{text[:110]}` |")
        print()
        print("\n".join(lines))
        if args.md:
            cmd = "python bench/bench_sql.py " + " ".join(sys.argv[1:])
            head = [f"Command: `{cmd.strip()}` (machine: {os.cpu_count()} cores)", ""]
            Path(args.md).write_text("\n".join(head + lines) + "\n")
    finally:
        if not args.keep:
            for f in made:
                f.unlink(missing_ok=True)
            if not any(folder.iterdir()):
                shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    if len(sys.argv) > 1 and sys.argv[1] == "--child":
        child_main(sys.argv[2:])
    else:
        main()
