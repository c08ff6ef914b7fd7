"""Every speed and memory figure of the README's "Speed and memory" section from one command.

Usage:
    python bench/speed.py                         # the README's sizes (the 10⁸-row DuckDB run takes minutes)
    python bench/speed.py --quick                 # small sizes everywhere: a smoke run of every script
    python bench/speed.py --out /tmp/speed.md     # where the combined report goes (default: print only)
    python bench/speed.py --only grow,check       # a subset: startup, check, grow, worst, sql

Each part is the benchmark script the README names, run as its own process (so one part's memory
does not inflate the next one's peak), in the order below; its output — a Markdown table with the
ratios to its floor — is copied under a heading. The report starts with the machine and its load
average, because other work on a shared machine inflates every time (the ratios, measured within
one script run, move much less than the times).

  startup  bench/bench_app.py --startup-only       first frame, tree root, demo tree, check (pty, 80×24)
  check    bench/bench_check.py --sizes 1e6,1e7    check against one groupby
  grow     bench/bench_grow.py --rows 1e6          depth-2 tree against one groupby on the same columns
  worst    bench/bench_worst_case.py --rows 1e6    every x distinct: check and grow, whole processes
  sql      bench/bench_sql.py --rows 1e8           DuckDB tree against one GROUP BY on the same file
"""

from __future__ import annotations

import argparse
import os
import platform
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent

PARTS = {
    "startup": (["bench_app.py", "--startup-only"], ["bench_app.py", "--startup-only", "--runs", "2"]),
    "check": (["bench_check.py", "--sizes", "1e6,1e7"], ["bench_check.py", "--sizes", "1e5", "--repeat", "1"]),
    "grow": (["bench_grow.py", "--rows", "1e6", "--repeat", "3", "--naive-budget", "60"], ["bench_grow.py", "--quick"]),
    "worst": (["bench_worst_case.py", "--rows", "1e6"], ["bench_worst_case.py", "--rows", "1e5"]),
    "sql": (["bench_sql.py", "--rows", "1e8", "--skip-memory"], ["bench_sql.py", "--quick", "--skip-memory"]),
}


def run_part(name: str, quick: bool) -> tuple[str, float, int]:
    """(output, seconds, exit code) of one part's script."""
    argv = PARTS[name][1 if quick else 0]
    start = time.perf_counter()
    proc = subprocess.run([sys.executable, str(HERE / argv[0]), *argv[1:]], capture_output=True, text=True,
                          check=False)
    seconds = time.perf_counter() - start
    out = proc.stdout.strip()
    if proc.returncode != 0:
        out += "\n\n(exit code {}; last lines of stderr)\n{}".format(
            proc.returncode, "\n".join(proc.stderr.strip().splitlines()[-8:]))
    return out, seconds, proc.returncode


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="small sizes everywhere (a smoke run)")
    ap.add_argument("--only", default=",".join(PARTS), help="comma-separated parts (default: all)")
    ap.add_argument("--out", metavar="PATH", help="also write the combined report here (not over an existing file)")
    args = ap.parse_args(argv)
    names = [p.strip() for p in args.only.split(",") if p.strip()]
    unknown = [p for p in names if p not in PARTS]
    if unknown:
        print(f"bench/speed.py: unknown part {unknown[0]!r}; choose from {', '.join(PARTS)}", file=sys.stderr)
        return 2
    if args.out and Path(args.out).exists():
        print(f"bench/speed.py: {args.out} exists; choose another path", file=sys.stderr)
        return 2
    head = [f"# bendwise speed report ({'quick' if args.quick else 'README sizes'})", "",
            f"Machine: {os.cpu_count()} CPUs, Python {platform.python_version()}, {platform.platform()}; "
            f"load average {os.getloadavg()[0]:.1f} at the start.", ""]
    sections: list[str] = []
    worst = 0
    for name in names:
        print(f"[{name}] running {' '.join(PARTS[name][1 if args.quick else 0])} …", flush=True)
        out, seconds, code = run_part(name, args.quick)
        worst = max(worst, code)
        sections += [f"## {name} ({seconds:.0f} s, load average {os.getloadavg()[0]:.1f} after)", "", out, ""]
    text = "\n".join(head + sections)
    print(text)
    if args.out:
        with tempfile.NamedTemporaryFile("w", dir=Path(args.out).parent or ".", delete=False, encoding="utf-8") as fh:
            fh.write(text + "\n")
        os.replace(fh.name, args.out)
    return worst


if __name__ == "__main__":
    raise SystemExit(main())
