"""Operating characteristics of the suggestion rule: how often does ``bendwise grow`` suggest a
remedy when the straight line is the truth, and how often does it find the remedy a known
truth needs?

Usage:
    python bench/suggestion_rates.py                       # 400 data sets per cell, depth 2
    python bench/suggestion_rates.py --sets 1000 --md /tmp/rates.md
    python bench/suggestion_rates.py --quick               # 60 sets per cell: a smoke run
    python bench/suggestion_rates.py --policies            # the alternative rules side by side

Every data set is simulated (seeded; the seed stream is (base seed, design, truth, set)), then
``engine.make_study`` → ``engine.grow(depth)`` → ``tree.suggest('aicc')``: exactly what
``bendwise grow FILE -y y -x x`` does. Rates come with exact (Clopper–Pearson) 95% intervals.

Designs (levels of x, replicates per level):
  6x3      6 evenly spaced levels from 1 to 10, 3 replicates (18 rows)
  4x2      4 evenly spaced levels from 1 to 10, 2 replicates (8 rows)
  10x4     10 evenly spaced levels from 1 to 10, 4 replicates (40 rows)
  uneven   levels 0, 0.5, 1, 2, 5, 10, 3 replicates (18 rows; log x and 1/x cannot apply)

Truths (x in the units of the levels; effects fixed, so a larger design sees them better):
  line         y = 10 + 2x + e, e ~ N(0, 1)
  line+batch   the same, plus a column 'batch' that has no effect (two batches of equal size in
               random order; admitted as a covariate: the rule must not take it)
  quadratic    y = 10 + 3x − 0.25x² + e, e ~ N(0, 0.6²): rises, turns at x = 6, falls a little
  saturating   y = 5 + 20x/(2 + x) + e, e ~ N(0, 1): a response that levels off
  batch        y = 10 + 2x + 2·[batch = b2] + e, e ~ N(0, 0.7²); two batches of equal size in random
               order, so partly confounded with x; 'batch' is admitted as a covariate
  lognormal    y = exp(0.5 + 0.25x + e), e ~ N(0, 0.12²): growth with multiplicative error
  spread       y = (10 + 8x)(1 + e), e ~ N(0, 0.06²): a straight mean whose SD grows with it

What counts as finding the remedy (the suggested node, or nothing when no node is suggested):
  line, line+batch   the straight line itself (anything else is a false remedy)
  quadratic          degree 2 in untransformed x and y, no weights, no covariate
  saturating         a change of shape (a transform of y or x, or a higher degree) that passes
                     lack of fit at α
  batch              a model that contains 'batch'
  lognormal          log y (a Box–Cox λ̂ snapped to 0 is the same node), straight in x
  spread             weights, or a variance-stabilising transform of y (log, √y, Box–Cox λ < 1),
                     passing lack of fit at α

Workers: two processes with single-threaded BLAS (tiny matrices; threads only add overhead).
"""

from __future__ import annotations

import argparse
import math
import os
import sys
import time
from collections import Counter
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

DESIGNS: dict[str, tuple[tuple[float, ...], int]] = {
    "6x3": (tuple(np.linspace(1.0, 10.0, 6)), 3),
    "4x2": (tuple(np.linspace(1.0, 10.0, 4)), 2),
    "10x4": (tuple(np.linspace(1.0, 10.0, 10)), 4),
    "uneven": ((0.0, 0.5, 1.0, 2.0, 5.0, 10.0), 3),
}
TRUTHS = ("line", "line+batch", "quadratic", "saturating", "batch", "lognormal", "spread")
NULL_TRUTHS = ("line", "line+batch")
BASE_SEED = 20261205


def simulate(design: str, truth: str, index: int, base_seed: int = BASE_SEED):
    """One simulated data set (a pandas DataFrame with x, y and maybe batch)."""
    import pandas as pd

    levels, reps = DESIGNS[design]
    rng = np.random.default_rng([base_seed, list(DESIGNS).index(design), TRUTHS.index(truth), index])
    x = np.repeat(np.asarray(levels, dtype=float), reps)
    frame = pd.DataFrame({"x": x})
    n = x.size
    if truth in ("line", "line+batch"):
        y = 10 + 2 * x + rng.normal(0, 1.0, n)
        if truth == "line+batch":
            frame["batch"] = _batches(rng, n)
    elif truth == "quadratic":
        y = 10 + 3 * x - 0.25 * x**2 + rng.normal(0, 0.6, n)
    elif truth == "saturating":
        y = 5 + 20 * x / (2 + x) + rng.normal(0, 1.0, n)
    elif truth == "batch":
        batch = _batches(rng, n)
        y = 10 + 2 * x + 2.0 * (batch == "b2") + rng.normal(0, 0.7, n)
        frame["batch"] = batch
    elif truth == "lognormal":
        y = np.exp(0.5 + 0.25 * x + rng.normal(0, 0.12, n))
    elif truth == "spread":
        y = (10 + 8 * x) * (1 + rng.normal(0, 0.06, n))
    else:  # pragma: no cover - guarded by TRUTHS
        raise ValueError(truth)
    frame["y"] = y
    return frame


def _batches(rng, n: int):
    """Two batches of (nearly) equal size in random order: partly confounded with x by chance."""
    return rng.permutation(np.array(["b1", "b2"] * (n // 2) + ["b1"] * (n % 2)))


def found(truth: str, tree, node_id: str | None) -> bool:
    """Did the suggestion find what ``truth`` needs? (the definitions of the module text)"""
    if truth in NULL_TRUTHS:
        return node_id == "root"
    if node_id is None:
        return False
    node = tree.nodes[node_id]
    spec = node.spec
    kind = spec.response.kind
    plain = spec.weights is None and not spec.covariates
    if truth == "quadratic":
        return kind == "identity" and spec.predictor.kind == "identity" and spec.degree == 2 and plain
    if truth == "saturating":
        shaped = kind != "identity" or spec.predictor.kind != "identity" or spec.degree > 1
        return shaped and bool(tree.passes(node))
    if truth == "batch":
        return "batch" in spec.covariates
    if truth == "lognormal":
        return kind == "log" and spec.predictor.kind == "identity" and spec.degree == 1
    if truth == "spread":
        stabilised = (spec.weights is not None or kind in ("log", "sqrt")
                      or (kind == "boxcox" and spec.response.param is not None and spec.response.param < 1))
        return stabilised and bool(tree.passes(node))
    raise ValueError(truth)


def one_case(job: tuple[str, str, int, int, int, float, tuple[str, ...]]) -> tuple:
    """Simulate, grow and suggest one data set (runs in a worker process)."""
    import bendwise.engine as engine
    design, truth, index, base_seed, depth, alpha, policies = job
    frame = simulate(design, truth, index, base_seed)
    covs = ["batch"] if "batch" in frame else []
    study = engine.make_study(frame, y="y", x="x", covariates=covs)
    tree = engine.grow(study, depth=depth, alpha=alpha)
    line_passes = bool(tree.passes(tree.root))
    out = []
    for policy in policies:
        sug = tree.suggest("aicc") if policy == "default" else tree.suggest("aicc", policy=policy)
        label = "no node passes" if sug.node is None else tree.nodes[sug.node].spec.label()
        out.append((found(truth, tree, sug.node), sug.node is not None and sug.node != "root", label))
    return design, truth, index, line_passes, tuple(out)


def clopper_pearson(k: int, n: int, level: float = 0.95) -> tuple[float, float]:
    """Exact binomial interval for k successes in n trials."""
    from scipy.stats import beta

    a = (1 - level) / 2
    lo = 0.0 if k == 0 else float(beta.ppf(a, k, n - k + 1))
    hi = 1.0 if k == n else float(beta.ppf(1 - a, k + 1, n - k))
    return lo, hi


def run(sets: int, *, depth: int = 2, alpha: float = 0.05, designs=tuple(DESIGNS), truths=TRUTHS,
        policies: tuple[str, ...] = ("default",), base_seed: int = BASE_SEED, workers: int = 2,
        start: int = 0) -> dict:
    """Simulate every (design, truth) cell; returns {(design, truth, policy): counts}."""
    jobs = [(d, t, i, base_seed, depth, alpha, policies)
            for d in designs for t in truths for i in range(start, start + sets)
            if not (t == "spread" and DESIGNS[d][1] < 3)]
    os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    if workers > 1:
        import multiprocessing as mp

        with ProcessPoolExecutor(max_workers=workers, mp_context=mp.get_context("spawn")) as pool:
            results = list(pool.map(one_case, jobs, chunksize=16))
    else:
        results = [one_case(j) for j in jobs]
    table: dict = {}
    for design, truth, _i, line_passes, outs in results:
        for policy, (ok, remedy, label) in zip(policies, outs, strict=True):
            cell = table.setdefault((design, truth, policy), {"n": 0, "found": 0, "remedy": 0,
                                                                "passes": 0, "remedy_when_passes": 0,
                                                                "picked": Counter()})
            cell["n"] += 1
            cell["found"] += ok
            cell["remedy"] += remedy
            cell["passes"] += line_passes
            cell["remedy_when_passes"] += remedy and line_passes
            if not ok:
                cell["picked"][label] += 1
    return table


def _pct(k: int, n: int) -> str:
    if n == 0:
        return "—"
    lo, hi = clopper_pearson(k, n)
    return f"{100 * k / n:.1f} % ({100 * lo:.1f}–{100 * hi:.1f})"


def rates_json(table: dict, sets: int, args) -> dict:
    """The default rule's cells as plain JSON (rates with exact 95 % intervals)."""
    cells = []
    for (d, t, p), c in sorted(table.items()):
        if p != "default":
            continue
        key = "remedy" if t in NULL_TRUTHS else "found"
        lo, hi = clopper_pearson(c[key], c["n"])
        cells.append({"design": d, "truth": t, "measure": "remedy suggested" if t in NULL_TRUTHS else "remedy found",
                      "rate": c[key] / c["n"], "low": lo, "high": hi, "n": c["n"]})
    return {"script": "bench/suggestion_rates.py", "sets": sets, "depth": args.depth, "alpha": args.alpha,
            "seed": args.seed, "rule": "aicc", "cells": cells}


def markdown(table: dict, policy: str = "default") -> str:
    """The README's two tables for one policy."""
    designs = [d for d in DESIGNS if any(k[0] == d and k[2] == policy for k in table)]
    lines = ["| design | straight line: a remedy is suggested | same, when the line passes lack of fit | "
             "line + an irrelevant batch column: a remedy |",
             "|---|---|---|---|"]
    for d in designs:
        c = table.get((d, "line", policy))
        cb = table.get((d, "line+batch", policy))
        lines.append(f"| {d} | {_pct(c['remedy'], c['n']) if c else '—'} | "
                     f"{_pct(c['remedy_when_passes'], c['passes']) if c else '—'} | "
                     f"{_pct(cb['remedy'], cb['n']) if cb else '—'} |")
    found_truths = [t for t in TRUTHS if t not in NULL_TRUTHS]
    lines += ["", "| design | " + " | ".join(found_truths) + " |", "|---|" + "---|" * len(found_truths)]
    for d in designs:
        cells = []
        for t in found_truths:
            c = table.get((d, t, policy))
            cells.append(_pct(c["found"], c["n"]) if c else "—")
        lines.append(f"| {d} | " + " | ".join(cells) + " |")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--sets", type=int, default=400, help="data sets per design and truth (default 400)")
    ap.add_argument("--depth", type=int, default=2, help="tree depth (default 2, as bendwise grow)")
    ap.add_argument("--alpha", type=float, default=0.05)
    ap.add_argument("--seed", type=int, default=BASE_SEED, help="base seed of the simulation")
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--quick", action="store_true", help="60 sets per cell")
    ap.add_argument("--policies", action="store_true", help="also run the alternative rules side by side")
    ap.add_argument("--policy", action="append", metavar="NAME",
                    help="run only these alternative rules (repeatable; see engine.SUGGESTION_POLICIES)")
    ap.add_argument("--md", help="write the tables (Markdown) to this file as well")
    ap.add_argument("--json", metavar="PATH",
                    help="write the default rule's rates as JSON (the published copy is "
                    "engine/suggestion_rates.json, read by reports)")
    args = ap.parse_args(argv)
    sets = 60 if args.quick else args.sets
    policies: tuple[str, ...] = ("default",)
    if args.policies:
        from bendwise.engine import SUGGESTION_POLICIES

        policies = ("default",) + tuple(p for p in SUGGESTION_POLICIES if p != "default")
    if args.policy:
        policies = tuple(args.policy)
    t0 = time.perf_counter()
    table = run(sets, depth=args.depth, alpha=args.alpha, policies=policies, base_seed=args.seed,
                workers=args.workers)
    took = time.perf_counter() - t0
    out = [f"{sets} data sets per cell, depth {args.depth}, α = {args.alpha:g}, rule aicc, "
           f"seed {args.seed}; {took:.0f} s", ""]
    for policy in policies:
        out += [f"### policy: {policy}", "", markdown(table, policy), ""]
        misses = []
        for (d, t, p), c in sorted(table.items()):
            if p == policy and c["picked"]:
                top = "; ".join(f"{lab} ×{k}" for lab, k in c["picked"].most_common(3))
                misses.append(f"  {d:<7} {t:<11} otherwise: {top}")
        out += ["```", *misses, "```", ""]
    text = "\n".join(out)
    print(text)
    if args.md:
        Path(args.md).write_text(text + "\n", encoding="utf-8")
    if args.json:
        import json

        Path(args.json).write_text(json.dumps(rates_json(table, sets, args), indent=1) + "\n", encoding="utf-8")
    _ = math
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
