"""Time ``engine.check`` against one pandas groupby on the same in-memory frame.

Usage:
    python bench/bench_check.py                       # 1e4, 1e6, 1e7 rows, 50 levels
    python bench/bench_check.py --sizes 1e4,1e6 --repeat 5

What is timed (best of --repeat, after one warm-up run that pays the lazy imports):
  groupby   df.groupby('x')['y'].agg(['count', 'mean', 'var'])   — the floor
  study     engine.make_study(df, y='y', x='x')                  — cleaning and grouping
  check     engine.check(study) on a fresh study                 — the statistics
  both      make_study + check                                   — what a user waits for
Loading the file is not timed: the frame is built in memory.

Memory: the tracemalloc peak of make_study + check (numpy and pandas report their buffers to
tracemalloc), divided by the size of the two float64 columns (16 bytes per row).
"""

from __future__ import annotations

import argparse
import gc
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import bendwise.engine as engine  # noqa: E402


def make_frame(n: int, levels: int, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    settings = 1.0 + 0.37 * np.arange(levels)
    x = settings[rng.integers(0, levels, size=n)]
    y = 2.0 + 0.5 * x + 0.01 * x**2 + rng.standard_normal(n)
    return pd.DataFrame({"x": x, "y": y})


def best_of(repeat: int, fn, setup=None) -> float:
    times = []
    for _ in range(repeat):
        arg = setup() if setup is not None else None
        gc.collect()
        start = time.perf_counter()
        fn(arg)
        times.append(time.perf_counter() - start)
        del arg
    return min(times)


def peak_memory(frame: pd.DataFrame) -> int:
    gc.collect()
    tracemalloc.start()
    study = engine.make_study(frame, y="y", x="x")
    engine.check(study)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return peak


def run(sizes: list[int], repeat: int, levels: int) -> list[dict]:
    warm = make_frame(1000, levels)
    engine.check(engine.make_study(warm, y="y", x="x"))
    warm.groupby("x")["y"].agg(["count", "mean", "var"])
    rows = []
    for n in sizes:
        frame = make_frame(n, levels)

        def study(_arg, frame=frame):
            return engine.make_study(frame, y="y", x="x")

        t_group = best_of(repeat, lambda _a, f=frame: f.groupby("x")["y"].agg(["count", "mean", "var"]))
        t_study = best_of(repeat, study)
        t_check = best_of(repeat, lambda s: engine.check(s), setup=lambda f=frame: study(None, f))
        t_both = best_of(repeat, lambda _a, f=frame: engine.check(study(None, f)))
        peak = peak_memory(frame)
        columns = 2 * 8 * n
        rows.append(
            dict(n=n, groupby=t_group, study=t_study, check=t_check, both=t_both,
                 ratio=t_both / t_group, peak=peak, peak_ratio=peak / columns)
        )
        del frame
        gc.collect()
    return rows


def render(rows: list[dict], levels: int, repeat: int) -> str:
    head = ("| rows | levels | groupby | make_study | check | both | both / groupby "
            "| peak memory (tracemalloc) | peak / two columns |\n"
            "|---:|---:|---:|---:|---:|---:|---:|---:|---:|")
    lines = [head]
    for r in rows:
        lines.append(
            f"| {r['n']:.0e} | {levels} | {r['groupby'] * 1e3:.1f} ms | {r['study'] * 1e3:.1f} ms "
            f"| {r['check'] * 1e3:.1f} ms | {r['both'] * 1e3:.1f} ms | {r['ratio']:.2f}× "
            f"| {r['peak'] / 2**20:.1f} MiB | {r['peak_ratio']:.2f}× |"
        )
    lines.append(f"\nbest of {repeat}; numpy {np.__version__}, pandas {pd.__version__}, "
                 f"Python {sys.version.split()[0]}")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="1e4,1e6,1e7", help="comma-separated row counts (1e6 ok)")
    parser.add_argument("--repeat", type=int, default=3, help="timed runs per measurement (best kept)")
    parser.add_argument("--levels", type=int, default=50, help="distinct x settings")
    args = parser.parse_args(argv)
    sizes = [int(float(s)) for s in args.sizes.split(",") if s.strip()]
    if args.repeat < 1 or not sizes or min(sizes) < 3 * args.levels:
        parser.error("need --repeat ≥ 1 and every size ≥ 3 × levels")
    rows = run(sizes, args.repeat, args.levels)
    print(render(rows, args.levels, args.repeat))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
