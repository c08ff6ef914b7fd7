"""The replicate-free worst case: one row per x setting, so every row is its own level.

    python bench/bench_worst_case.py [--rows 1e6] [--md PATH]

Writes a seeded table (x uniform on 0…100, a straight line plus noise, every x distinct), then
runs ``bendwise check`` and ``bendwise grow --depth 2`` as separate processes on the memory engine
and reports wall time and peak resident memory of each (targets: 15 s and 1.5 GB at 10⁶ rows).
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
from pathlib import Path


def _run(cmd: list[str]) -> tuple[float, float]:
    """Wall seconds and peak RSS (GB) of one child process (run alone, so the children's
    maximum is its own)."""
    code = ("import resource, subprocess, sys, time; t = time.perf_counter(); "
            "r = subprocess.run(sys.argv[1:], stdout=subprocess.DEVNULL); "
            "print(time.perf_counter() - t, resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss, r.returncode)")
    out = subprocess.run([sys.executable, "-c", code, *cmd], capture_output=True, text=True, check=True)
    secs, kb, rc = out.stdout.split()
    if rc != "0":
        raise SystemExit(f"{' '.join(cmd)} exited {rc}")
    return float(secs), int(kb) / 1024**2


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=float, default=1e6)
    ap.add_argument("--md", metavar="PATH", help="also write the table as Markdown")
    args = ap.parse_args()
    import numpy as np
    import pandas as pd

    n = int(args.rows)
    rng = np.random.default_rng(20261205)
    x = rng.permutation(np.linspace(0.0, 100.0, n))
    frame = pd.DataFrame({"x": x, "y": 3.0 + 0.5 * x + rng.normal(0.0, 1.0, n)})
    exe = str(Path(sys.executable).parent / "bendwise")
    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "norep.parquet")
        frame.to_parquet(path)
        rows = []
        for name, extra in (("check", []), ("grow --depth 2", ["--depth", "2"])):
            cmd = [exe, name.split()[0], path, "-y", "y", "-x", "x", "--engine", "memory", *extra]
            secs, gb = _run(cmd)
            rows.append(f"| `bendwise {name}` | {n:,} | {secs:.1f} s | {gb:.2f} GB |")
    table = ["| command | rows (all distinct x) | wall time | peak RSS |", "|---|---:|---:|---:|", *rows]
    print("\n".join(table))
    if args.md:
        Path(args.md).write_text("\n".join(table) + "\n", encoding="utf-8")


if __name__ == "__main__":
    main()
