"""Benchmark the terminal app as a user meets it: the real `bendwise` entry point in a pty.

1. Start-up: time from launching `bendwise demo` to the first frame that shows the app shell,
   the first frame that shows the tree (its root line with a verdict), and the fully grown tree.
2. Key-to-repaint latency while a worker scores a 10⁶-row table (grown to depth 4, so scoring
   lasts long enough): send a cursor key, time until the detail pane shows the newly highlighted
   node; only samples taken while the progress row says the tree is being scored count. The same
   is then measured once growth has finished, for comparison.

    python bench/bench_app.py                  # 5 start-ups, 10⁶ rows, 30 key presses
    python bench/bench_app.py --runs 3 --rows 200000 --keys 20
    python bench/bench_app.py --startup-only    # the check process and the start-ups only

Also `bendwise check` on a 100-row CSV as a whole process. The package is byte-compiled first.
Targets: root with its verdict ≤ 0.8 s, whole demo tree ≤ 1.2 s, check ≤ 0.7 s; key-to-repaint
≤ 100 ms while scoring.
Needs pexpect and pyte (the `test` extra).
"""

from __future__ import annotations

import argparse
import compileall
import os
import re
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pexpect
import pyte

COLS, ROWS = 80, 24
DOWN, UP = "\x1b[B", "\x1b[A"
ROOT_LINE = re.compile(r"root (FAIL|pass|untestable)")
NODE_LINE = re.compile(r"\bn\d+\s+(FAIL|pass|untestable)")
DETAIL_ID = re.compile(r"^\s*(root|n\d+)\s")


def bendwise() -> str:
    exe = Path(sys.executable).parent / "bendwise"
    found = str(exe) if exe.exists() else shutil.which("bendwise")
    if not found:
        sys.exit("bendwise is not installed in this environment (pip install -e .)")
    return found


class Term:
    """A child on a pty whose output is fed to a pyte screen."""

    def __init__(self, args: list[str], cwd: str) -> None:
        env = {k: v for k, v in os.environ.items() if k not in {"NO_COLOR", "COLUMNS", "LINES", "BENDWISE_PLAIN"}}
        env["TERM"] = "xterm-256color"
        self.screen = pyte.Screen(COLS, ROWS)
        self.stream = pyte.ByteStream(self.screen)
        self.child = pexpect.spawn(args[0], args[1:], cwd=cwd, env=env, dimensions=(ROWS, COLS))
        self.child.delaybeforesend = None  # pexpect sleeps 50 ms before every send by default

    def pump(self, timeout: float = 0.002) -> bool:
        """Read what is there; True when anything arrived."""
        got = False
        while True:
            try:
                data = self.child.read_nonblocking(65536, timeout=timeout)
            except (pexpect.TIMEOUT, pexpect.EOF):
                return got
            self.stream.feed(data)
            got = True
            timeout = 0

    @property
    def text(self) -> str:
        return "\n".join(self.screen.display)

    def detail_id(self) -> str | None:
        """Id in the detail pane's header line (right of the tree pane)."""
        lines = self.screen.display
        edge = lines[1].find("┐")
        if edge < 0:
            return None
        m = DETAIL_ID.match(lines[3][edge + 1:])
        return m.group(1) if m else None

    def quit(self) -> None:
        self.child.send("q")
        try:
            self.child.expect(pexpect.EOF, timeout=15)
        except pexpect.TIMEOUT:
            self.child.terminate(force=True)


def start_up(runs: int, cwd: str) -> dict[str, list[float]]:
    out: dict[str, list[float]] = {"shell": [], "tree": [], "grown": []}
    for _ in range(runs):
        t0 = time.perf_counter()
        term = Term([bendwise(), "demo"], cwd)
        marks: dict[str, float] = {}
        deadline = t0 + 60
        while "grown" not in marks and time.perf_counter() < deadline:
            if not term.pump(0.002):
                continue
            now = time.perf_counter() - t0
            screen = term.text
            if "shell" not in marks and "bendwise ·" in screen:
                marks["shell"] = now
            if "tree" not in marks and ROOT_LINE.search(screen):
                marks["tree"] = now
            if "Suggested (aicc" in screen:
                marks["grown"] = now
        term.quit()
        for k, v in marks.items():
            out[k].append(v)
    return out


def compile_package() -> None:
    """Write the package's bytecode first, as an installed copy has it (pip compiles on install;
    an editable checkout run with PYTHONDONTWRITEBYTECODE=1 would recompile every module per start)."""
    import bendwise.engine  # light (tests/engine/test_import_isolation.py)

    root = Path(bendwise.engine.__file__).resolve().parents[1]
    for sub in ("engine", "tui"):
        compileall.compile_dir(str(root / sub), quiet=1)


def check_process(runs: int, cwd: str) -> list[float]:
    """Whole-process wall time of `bendwise check` on a 100-row CSV (10 levels × 10 replicates)."""
    path = Path(cwd) / "small.csv"
    rng = np.random.default_rng(7)
    x = np.repeat(np.arange(1.0, 11.0), 10)
    y = 2.0 + 0.5 * x + 0.02 * x**2 + rng.normal(0.0, 0.1, x.size)
    path.write_text("x,y\n" + "".join(f"{a:g},{b:.6f}\n" for a, b in zip(x, y, strict=True)))
    exe = bendwise()
    out = []
    for _ in range(runs):
        t0 = time.perf_counter()
        subprocess.run([exe, "check", str(path), "-y", "y", "-x", "x"], cwd=cwd, capture_output=True, check=True)
        out.append(time.perf_counter() - t0)
    return out


def make_table(path: Path, rows: int) -> None:
    """50 replicated settings, a mild bend, spread growing with x, two covariates (numpy only)."""
    rng = np.random.default_rng(20261202)
    levels = np.linspace(1.0, 50.0, 50)
    x = levels[rng.integers(0, levels.size, rows)]
    day = rng.integers(0, 3, rows)
    temp = 23.0 + rng.normal(0.0, 0.8, rows)
    y = 10.0 + 2.0 * x - 0.01 * x**2 + 0.5 * (temp - 23.0) + rng.normal(0.0, 0.5 + 0.02 * x, rows)
    with open(path, "w", encoding="ascii") as fh:
        fh.write("x,y,day,temp\n")
        np.savetxt(fh, np.column_stack([x, y, day, temp]), delimiter=",", fmt=["%.6g", "%.6f", "%d", "%.3f"])


def latency(table: Path, keys: int, cwd: str) -> tuple[list[float], list[float], float]:
    """(latencies while scoring, latencies once idle, seconds until the tree had 3 nodes)."""
    t0 = time.perf_counter()
    term = Term([bendwise(), str(table), "-y", "y", "-x", "x", "--covariates", "day,temp", "--depth", "4"], cwd)
    deadline = t0 + 300
    while time.perf_counter() < deadline:
        term.pump(0.01)
        if len(NODE_LINE.findall(term.text)) >= 3 and "Esc cancels" in term.text:
            break
    ready = time.perf_counter() - t0
    busy: list[float] = []
    idle: list[float] = []
    key = DOWN

    def one_key() -> float | None:
        nonlocal key
        term.pump(0.0)
        before = term.detail_id()
        sent = time.perf_counter()
        term.child.send(key)
        key = UP if key == DOWN else DOWN
        while time.perf_counter() - sent < 5:
            term.pump(0.001)
            now_id = term.detail_id()
            if now_id is not None and now_id != before:
                return time.perf_counter() - sent
        return None

    while len(busy) < keys and time.perf_counter() < deadline and "Esc cancels" in term.text:
        took = one_key()
        if took is not None and "Esc cancels" in term.text:
            busy.append(took)
        time.sleep(0.08)
    while "Esc cancels" in term.text and time.perf_counter() < deadline:  # let growth finish
        term.pump(0.05)
    settle = time.perf_counter() + 1.0
    while time.perf_counter() < settle:
        term.pump(0.05)
    for _ in range(max(10, keys // 2)):
        took = one_key()
        if took is not None:
            idle.append(took)
        time.sleep(0.08)
    term.quit()
    return busy, idle, ready


def _fmt(values: list[float]) -> str:
    if not values:
        return "no samples"
    ms = sorted(v * 1000 for v in values)
    p90 = ms[min(len(ms) - 1, int(round(0.9 * (len(ms) - 1))))]
    return f"median {statistics.median(ms):.0f} ms, p90 {p90:.0f} ms, max {ms[-1]:.0f} ms (n = {len(ms)})"


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=5, help="start-ups to time (default 5)")
    ap.add_argument("--rows", type=int, default=1_000_000, help="rows of the latency table (default 10⁶)")
    ap.add_argument("--keys", type=int, default=30, help="key presses to time while scoring (default 30)")
    ap.add_argument("--startup-only", action="store_true", help="time the start-ups only (no latency table)")
    args = ap.parse_args()
    compile_package()
    with tempfile.TemporaryDirectory(prefix="bendwise-bench-") as tmp:
        c = check_process(args.runs, tmp)
        print(f"`bendwise check` on a 100-row CSV, whole process, median of {args.runs}: "
              f"{statistics.median(c):.2f} s (min {min(c):.2f}, max {max(c):.2f})")
        s = start_up(args.runs, tmp)
        print(f"start-up of `bendwise demo` at {COLS}×{ROWS}, median of {args.runs}:")
        for k, what in (("shell", "first frame (app shell)"), ("tree", "first frame showing the tree"),
                        ("grown", "tree fully grown (45 models)")):
            vals = s[k]
            print(f"  {what:<32} {statistics.median(vals):.2f} s (min {min(vals):.2f}, max {max(vals):.2f})"
                  if vals else f"  {what:<32} not reached")
        if args.startup_only:
            return 0
        table = Path(tmp) / "big.csv"
        t = time.perf_counter()
        make_table(table, args.rows)
        print(f"wrote {args.rows:,} rows in {time.perf_counter() - t:.1f} s")
        busy, idle, ready = latency(table, args.keys, tmp)
        print(f"key-to-repaint with {args.rows:,} rows (tree with 3 nodes after {ready:.1f} s):")
        print(f"  while a worker scores: {_fmt(busy)}")
        print(f"  once idle:             {_fmt(idle)}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
