"""Time the whole remedy tree (``bendwise grow``, depth 2) against a naive formula loop and the
groupby floor, and check that both give the same statistics.

Usage:
    python bench/bench_grow.py                    # 10⁶ rows, 50 levels, naive loop capped at ~5 min
    python bench/bench_grow.py --rows 200000
    python bench/bench_grow.py --quick            # 10⁵ rows, 4 naive nodes: a smoke run
    python bench/bench_grow.py --md /tmp/grow_bench_section.md --profile

Data (simulated, seeded): x at 50 levels, two numeric covariates varying within every level
(t1, t2) and one categorical covariate with 4 categories (batch); the mean bends a little and
the spread grows with the mean, so every kind of move is offered.

What is timed:
  groupby      df.groupby('x')['y'].agg(['count', 'mean', 'var'])         — the y-only floor
  groupby all  df.groupby(['x', 'batch'])[['y', 't1', 't2']].agg(['count', 'mean', 'var'])
               — one groupby on the same columns the tree reads: the floor the 10× target uses
  study        engine.make_study(df, …)                                  — cleaning and grouping
  grow         RemedyTree + grow(depth=2) on that study                   — every node scored
  naive/node   per node: smf.ols/wls(formula) on all rows, the node's cell-means model (x as a
               factor, covariates and x×covariate terms kept) on all rows, anova_lm of the two
  process      `bendwise grow FILE … --json` in a subprocess (imports, reading, growing, JSON)
  naive proc   reading the same file with pandas + importing statsmodels + the naive loop
The naive loop is generous to itself: it refits the nodes the engine found and does not
search Box–Cox λ or Box–Tidwell powers. When the full loop would take longer than
--naive-budget seconds it runs on an evenly spaced subset of nodes and the total is
extrapolated from the mean time per node (the table says so).

Checks (naive vs engine, every node run): coefficients and lack-of-fit F to 1e-8 relative.
Memory: peak resident set (ru_maxrss) of the `bendwise grow` subprocess.
"""

from __future__ import annotations

import argparse
import cProfile
import io
import math
import os
import pstats
import shutil
import subprocess
import sys
import tempfile
import time
import warnings
from pathlib import Path

# One BLAS thread, as the `bendwise` entry point sets (tui/cli.py): the tree solves many small
# least-squares problems, and a threaded OpenBLAS spins on busy cores (a 202×53 pivoted QR took
# 24 ms with its threads, 0.6 ms without, on this machine under load). Set before numpy loads.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

import bendwise.engine as engine  # noqa: E402
from bendwise.engine.tree.tree import RemedyTree  # noqa: E402

COVARIATES = ("t1", "t2", "batch")
REL = 1e-8


def make_frame(n: int, levels: int = 50, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    settings = 1.0 + 0.5 * np.arange(levels)
    x = settings[rng.integers(0, levels, size=n)]
    t1 = rng.normal(20.0, 2.0, n)
    t2 = rng.uniform(0.0, 1.0, n)
    batch = np.array(["a", "b", "c", "d"])[rng.integers(0, 4, size=n)]
    shift = np.select([batch == "b", batch == "c", batch == "d"], [1.0, -0.5, 0.3], 0.0)
    mu = 20 + 2 * x + 0.03 * x**2 + 0.5 * t1 - 3 * t2 + shift
    y = mu + rng.normal(0, 0.03 * mu)
    return pd.DataFrame({"x": x, "y": y, "t1": t1, "t2": t2, "batch": batch})


def grow_tree(frame: pd.DataFrame, depth: int = 2) -> tuple[RemedyTree, float, float]:
    t0 = time.perf_counter()
    study = engine.make_study(frame, y="y", x="x", covariates=list(COVARIATES))
    t1 = time.perf_counter()
    tree = RemedyTree(study)
    tree.grow(depth)
    t2 = time.perf_counter()
    return tree, t1 - t0, t2 - t1


# ----------------------------------------------------------------------------- naive loop


def _g(kind: str, param, y: np.ndarray) -> np.ndarray:
    if kind == "identity":
        return y
    if kind == "log":
        return np.log(y)
    if kind == "sqrt":
        return np.sqrt(y)
    if kind == "reciprocal":
        return 1 / y
    if kind == "boxcox":
        return (y**param - 1) / param
    raise ValueError(kind)


def naive_weights(frame: pd.DataFrame, spec) -> np.ndarray | None:
    """Power-of-mean weights as engine/scoring.py defines them (level means of g(y))."""
    if spec.weights is None:
        return None
    z = pd.Series(_g(spec.response.kind, spec.response.param, frame["y"].to_numpy(float)))
    w_level = np.abs(z.groupby(frame["x"].to_numpy()).mean()) ** (-2.0 * spec.weights.theta)
    w_level = w_level / np.exp(np.log(w_level).mean())
    return frame["x"].map(w_level).to_numpy(float)


def cell_means_formula(spec, kinds: dict[str, str]) -> str:
    lhs = spec.formula("y", "x", kinds).split(" ~ ")[0]

    def term(c: str) -> str:
        return f"C({c})" if kinds[c] == "categorical" else c

    terms = ["C(x)"] + [term(c) for c in spec.covariates] + [f"C(x):{term(c)}" for c in spec.interactions]
    return f"{lhs} ~ {' + '.join(terms)}"


def _patsy_names(score, formula: str) -> list[str]:
    rhs = formula.split(" ~ ", 1)[1].split(" + ")
    spec = score.spec
    d = spec.degree
    cov = dict(zip(spec.covariates, rhs[d : d + len(spec.covariates)], strict=True))
    inter = dict(zip(spec.interactions, rhs[d + len(spec.covariates) :], strict=True))
    out = []
    for t in score.terms:
        out.append({"const": lambda t: "Intercept",
                    "tpow": lambda t: rhs[t.power - 1],
                    "cat": lambda t: f"{cov[t.covariate]}[T.{t.level}]",
                    "num": lambda t: cov[t.covariate],
                    "tcat": lambda t: f"{inter[t.covariate]}[T.{t.level}]",
                    "tnum": lambda t: inter[t.covariate]}[t.kind](t))
    return out


def naive_node(frame: pd.DataFrame, tree: RemedyTree, node) -> dict:
    """Refit one node the naive way; returns its time and the largest relative differences."""
    import statsmodels.formula.api as smf
    from statsmodels.stats.anova import anova_lm

    kinds = {c.name: c.kind for c in tree.study.covariates}
    formula = node.spec.formula("y", "x", kinds)
    start = time.perf_counter()
    w = naive_weights(frame, node.spec)
    fit = (lambda f: smf.ols(f, frame).fit()) if w is None else (lambda f: smf.wls(f, frame, weights=w).fit())
    res = fit(formula)
    cells = fit(cell_means_formula(node.spec, kinds))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        row = anova_lm(res, cells).iloc[1]
    elapsed = time.perf_counter() - start
    score = node.score
    coef_err = 0.0
    for c, name in zip(score.fit.coefficients, _patsy_names(score, formula), strict=True):
        ref, se = float(res.params[name]), float(res.bse[name])
        coef_err = max(coef_err, abs(c.estimate - ref) / max(abs(ref), 1e-8 * se))
    lof = score.lack_of_fit
    if lof.testable:
        f_err = abs(lof.f - float(row["F"])) / max(abs(float(row["F"])), 1e-300)
    else:
        f_err = 0.0 if not math.isfinite(float(row["F"])) or cells.df_resid == 0 else math.inf
    return {"id": node.id, "seconds": elapsed, "coef_rel": coef_err, "f_rel": f_err}


def naive_loop(frame: pd.DataFrame, tree: RemedyTree, budget: float, minimum: int) -> tuple[list[dict], int, bool]:
    """Run the naive loop on all nodes, or on an evenly spaced subset when over ``budget``."""
    nodes = tree.scored()
    total = len(nodes)
    probe = naive_node(frame, tree, nodes[0])
    if probe["seconds"] * total <= budget:
        chosen = nodes[1:]
    else:
        k = min(total, max(minimum, int(budget / max(probe["seconds"], 1e-9))))
        idx = np.unique(np.linspace(0, total - 1, k).round().astype(int))
        chosen = [nodes[i] for i in idx if i != 0]
    out = [probe]
    spent = probe["seconds"]
    for node in chosen:
        if spent > budget and len(out) >= minimum:
            break
        out.append(naive_node(frame, tree, node))
        spent += out[-1]["seconds"]
        print(f"  naive {out[-1]['id']}: {out[-1]['seconds']:.2f} s", flush=True)
    return out, total, len(out) < total


# ----------------------------------------------------------------------------- processes


def _bendwise_cmd() -> list[str]:
    exe = Path(sys.executable).with_name("bendwise")
    if exe.exists():
        return [str(exe)]
    found = shutil.which("bendwise")
    return [found] if found else [sys.executable, "-c", "from bendwise.tui.cli import entry; entry()"]


# A small launcher measures the child: on Linux a child forked straight from this (large)
# benchmark process would report this process's resident set as its own peak.
_LAUNCHER = """
import json, os, subprocess, sys, time
out = open(sys.argv[1], "wb")
start = time.perf_counter()
proc = subprocess.Popen(sys.argv[2:], stdout=out, stderr=subprocess.PIPE)
_, status, usage = os.wait4(proc.pid, 0)
wall = time.perf_counter() - start
err = proc.stderr.read().decode()
print(json.dumps({"wall": wall, "maxrss_kb": usage.ru_maxrss, "code": os.waitstatus_to_exitcode(status), "err": err}))
"""


def run_process(path: Path) -> tuple[float, float, int]:
    """Wall time, peak RSS (MB) and node count of one `bendwise grow --json` process."""
    import json

    cmd = [*_bendwise_cmd(), "grow", str(path), "-y", "y", "-x", "x", "--covariates", ",".join(COVARIATES),
           "--json", "--quiet"]
    out_path = path.with_suffix(".json")
    res = subprocess.run([sys.executable, "-c", _LAUNCHER, str(out_path), *cmd], capture_output=True, text=True,
                         cwd=str(ROOT), check=True)
    info = json.loads(res.stdout)
    if info["code"] != 0:
        raise SystemExit(f"bendwise grow failed ({info['code']}): {info['err'].strip()}")
    nodes = len(json.loads(out_path.read_text())["nodes"])
    return info["wall"], info["maxrss_kb"] / 1024, nodes


def import_seconds(module: str) -> float:
    code = f"import time; t = time.perf_counter(); import {module}; print(time.perf_counter() - t)"
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    return float(res.stdout.strip())


# ----------------------------------------------------------------------------- report


def fmt_s(v: float) -> str:
    return f"{v * 1000:.0f} ms" if v < 1 else f"{v:.2f} s" if v < 100 else f"{v:.0f} s"


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n", 1)[0])
    ap.add_argument("--rows", type=float, default=1e6, help="rows (default 1e6)")
    ap.add_argument("--levels", type=int, default=50)
    ap.add_argument("--quick", action="store_true", help="1e5 rows and 4 naive nodes")
    ap.add_argument("--naive-budget", type=float, default=300.0, help="seconds for the naive loop (default 300)")
    ap.add_argument("--repeat", type=int, default=1, help="best of N for the in-process tree (default 1)")
    ap.add_argument("--format", choices=["csv", "parquet"], default="parquet")
    ap.add_argument("--profile", action="store_true", help="cProfile the in-process tree (top 15)")
    ap.add_argument("--md", metavar="PATH", help="also write the table as Markdown to PATH")
    ap.add_argument("--before", metavar="CHECKOUT",
                    help="only compare: time the tree of an older checkout (a git worktree) and of this one in "
                         "alternating processes, 3 rounds, each against both groupby floors")
    ap.add_argument("--tree-only", action="store_true", help=argparse.SUPPRESS)  # one round, JSON (for --before)
    args = ap.parse_args(argv)
    if args.tree_only:
        return _tree_round(int(args.rows), args.levels)
    if args.before:
        return _before_after(Path(args.before), int(args.rows), args.levels, args.md)
    n = int(1e5 if args.quick else args.rows)
    budget = 20.0 if args.quick else args.naive_budget
    minimum = 4 if args.quick else 8

    # warm-up pays the lazy imports (scipy, pandas internals) outside the timings
    RemedyTree(engine.make_study(make_frame(2000, args.levels, 1), y="y", x="x", covariates=list(COVARIATES))).grow(2)

    frame = make_frame(n, args.levels)
    floor = min(_timed(lambda: frame.groupby("x")["y"].agg(["count", "mean", "var"])) for _ in range(5))
    floor_all = min(_timed(lambda: frame.groupby(["x", "batch"])[["y", "t1", "t2"]].agg(["count", "mean", "var"]))
                    for _ in range(5))
    timings = []
    tree = None
    for _ in range(max(1, args.repeat)):
        tree = None  # free the previous tree before the next: a `bendwise grow` process holds one
        tree, t_study, t_grow = grow_tree(frame)
        timings.append((t_study, t_grow))
    t_study = min(t for t, _ in timings)
    t_grow = min(g for _, g in timings)
    nodes = len(tree.nodes)
    print(f"{n:,} rows, {args.levels} levels, covariates {', '.join(COVARIATES)}: {nodes} nodes "
          f"(suggested {tree.suggest().node})", flush=True)

    prof_text = ""
    if args.profile:
        pr = cProfile.Profile()
        study = engine.make_study(frame, y="y", x="x", covariates=list(COVARIATES))
        pr.enable()
        RemedyTree(study).grow(2)
        pr.disable()
        buf = io.StringIO()
        pstats.Stats(pr, stream=buf).sort_stats("tottime").print_stats(15)
        prof_text = buf.getvalue()
        print(prof_text)

    print(f"naive loop (budget {budget:.0f} s) …", flush=True)
    runs, total, extrapolated = naive_loop(frame, tree, budget, minimum)
    per_node = float(np.mean([r["seconds"] for r in runs]))
    naive_total = per_node * total
    coef_rel = max(r["coef_rel"] for r in runs)
    f_rel = max(r["f_rel"] for r in runs)

    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / f"bench.{args.format}"
        if args.format == "parquet":
            frame.to_parquet(path, index=False)
            t_read = min(_timed(lambda: pd.read_parquet(path)) for _ in range(2))
        else:
            frame.to_csv(path, index=False)
            t_read = min(_timed(lambda: pd.read_csv(path)) for _ in range(2))
        proc_wall, proc_rss, proc_nodes = run_process(path)
    t_imp = import_seconds("statsmodels.formula.api")
    naive_proc = t_read + t_imp + naive_total
    assert proc_nodes == nodes, (proc_nodes, nodes)

    ok = coef_rel <= REL and f_rel <= REL
    how = f"{len(runs)} of {total} nodes run, total extrapolated" if extrapolated else f"all {total} nodes run"
    lines = [
        f"`python bench/bench_grow.py{' --quick' if args.quick else f' --rows {n:g}'}` — {n:,} rows, "
        f"{args.levels} levels, covariates t1, t2 (numeric), batch (4 categories); depth 2, {nodes} nodes.",
        "",
        "| what | time | ÷ same-columns floor | ÷ y-only floor | naive ÷ this |",
        "|---|---:|---:|---:|---:|",
        f"| groupby floor, same columns (count/mean/var of y, t1, t2 by x and batch) | {fmt_s(floor_all)} | 1× | "
        f"{floor_all / floor:.1f}× | |",
        f"| groupby floor, y only (count/mean/var of y by x) | {fmt_s(floor)} | {floor / floor_all:.2f}× | 1× | |",
        f"| make_study (cleaning, grouping) | {fmt_s(t_study)} | {t_study / floor_all:.1f}× | {t_study / floor:.0f}× | |",
        f"| grow, in process (after loading) | {fmt_s(t_grow)} | {t_grow / floor_all:.1f}× | {t_grow / floor:.0f}× | "
        f"{naive_total / t_grow:.0f}× |",
        f"| naive loop, statsmodels per node ({how}) | {fmt_s(naive_total)} | {naive_total / floor_all:.0f}× | "
        f"{naive_total / floor:.0f}× | 1× |",
        f"| `bendwise grow` process ({args.format}; imports + read + grow + JSON) | {fmt_s(proc_wall)} | | | "
        f"{naive_proc / proc_wall:.0f}× |",
        f"| naive process (read {fmt_s(t_read)} + import statsmodels {fmt_s(t_imp)} + loop) | {fmt_s(naive_proc)} | | | "
        "1× |",
        "",
        f"Machine: {os.cpu_count()} CPUs, load average {os.getloadavg()[0]:.1f} at the end (other work on the "
        "machine inflates every time above). "
        f"Peak memory of the `bendwise grow` process: {proc_rss:.0f} MB (ru_maxrss). "
        f"Naive per node: {per_node:.2f} s on average.",
        f"Agreement over the {len(runs)} naive nodes: coefficients ≤ {coef_rel:.1e} relative, lack-of-fit F "
        f"≤ {f_rel:.1e} relative ({'within' if ok else 'OUTSIDE'} {REL:g}).",
        f"Targets: in process within 10× one groupby on the same columns — "
        f"{'met' if t_grow <= 10 * floor_all else 'missed'} ({t_grow / floor_all:.1f}×; {t_grow / floor:.0f}× the "
        f"y-only groupby); whole process ≥ 50× ahead of naive — "
        f"{'met' if naive_proc >= 50 * proc_wall else 'missed'} ({naive_proc / proc_wall:.0f}×).",
    ]
    text = "\n".join(lines)
    print("\n" + text)
    if args.md:
        Path(args.md).write_text(text + ("\n\n```\n" + prof_text + "```\n" if prof_text else "\n"), encoding="utf-8")
    return 0 if ok else 1


def _tree_round(n: int, levels: int) -> int:
    """One round in this process: warm-up, then the tree (best of 2) and both floors (best of 5), as JSON."""
    import json

    RemedyTree(engine.make_study(make_frame(2000, levels, 1), y="y", x="x", covariates=list(COVARIATES))).grow(2)
    frame = make_frame(n, levels)
    grow = min(grow_tree(frame)[2] for _ in range(2))
    floor = min(_timed(lambda: frame.groupby("x")["y"].agg(["count", "mean", "var"])) for _ in range(5))
    floor_all = min(_timed(lambda: frame.groupby(["x", "batch"])[["y", "t1", "t2"]].agg(["count", "mean", "var"]))
                    for _ in range(5))
    print(json.dumps({"engine": engine.__file__, "grow": grow, "floor": floor, "floor_all": floor_all}))
    return 0


def _before_after(checkout: Path, n: int, levels: int, md: str | None) -> int:
    """The tree of ``checkout`` (imported through a shim folder put first on the path) against this
    one, in alternating processes, so both meet the same machine load; ratios within each process."""
    import json

    if not (checkout / "engine" / "__init__.py").exists():
        print(f"bench_grow: {checkout} is not a bendwise checkout (no engine/__init__.py)", file=sys.stderr)
        return 2
    rows: dict[str, list[dict]] = {"before": [], "after": []}
    with tempfile.TemporaryDirectory() as shim:
        pkg = Path(shim, "bendwise")
        pkg.mkdir()
        for sub in ("engine", "tui", "datasets"):
            if (checkout / sub).exists():
                (pkg / sub).symlink_to((checkout / sub).resolve())
        for _ in range(3):
            for label, extra in (("before", {"PYTHONPATH": shim}), ("after", {})):
                env = {**os.environ, **extra}
                if not extra:
                    env.pop("PYTHONPATH", None)
                res = subprocess.run([sys.executable, __file__, "--tree-only", "--rows", str(n), "--levels", str(levels)],
                                     capture_output=True, text=True, env=env, check=True)
                rows[label].append(json.loads(res.stdout.strip().splitlines()[-1]))
    lines = [f"`python bench/bench_grow.py --before {checkout} --rows {n:g}` — depth-2 tree, {n:,} rows; 3 alternating "
             "rounds, each process: tree best of 2, floors best of 5.", "",
             "| checkout | tree (range) | ÷ same-columns floor | ÷ y-only floor |", "|---|---:|---:|---:|"]
    for label in ("before", "after"):
        r = rows[label]
        ratio_all = sorted(x["grow"] / x["floor_all"] for x in r)
        ratio_y = sorted(x["grow"] / x["floor"] for x in r)
        times = sorted(x["grow"] for x in r)
        lines.append(f"| {label} ({Path(r[0]['engine']).parent.parent.name if label == 'after' else checkout.name}) | "
                     f"{fmt_s(times[1])} ({fmt_s(times[0])}–{fmt_s(times[-1])}) | {ratio_all[1]:.1f}× "
                     f"({ratio_all[0]:.1f}–{ratio_all[-1]:.1f}) | {ratio_y[1]:.0f}× ({ratio_y[0]:.0f}–{ratio_y[-1]:.0f}) |")
    lines += ["", f"Load average {os.getloadavg()[0]:.1f} at the end; medians with ranges over the rounds."]
    text = "\n".join(lines)
    print(text)
    if md:
        Path(md).write_text(text + "\n", encoding="utf-8")
    return 0


def _timed(fn) -> float:
    start = time.perf_counter()
    fn()
    return time.perf_counter() - start


if __name__ == "__main__":
    raise SystemExit(main())
