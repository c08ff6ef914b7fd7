"""Seeded simulation: does the suggested remedy match the model that generated the data?

Six truths, each at 6 levels of x (1, 2, 4, 6, 8, 10) with 3 replicates (18 rows), 40 data
sets per truth, moderate effects (stated beside each generator). The tree is grown to depth 1:
every truth here is one move from the straight line, and depth 1 keeps the study near 30 s on
two cores. The suggestion uses the default rule (aicc) at α = 0.05.

What "matches" means (strict; documented here because the rates depend on it):

* straight line      → the root (no remedy). Target: a remedy in at most 25% of data sets.
* quadratic          → identity response, identity predictor, degree 2, no weights or covariates,
  for the curve whose turning point lies inside the range. A second quadratic only bends at the
  top (monotone over the range, as in the demo data): at 18 rows it cannot be told apart from a
  power of x (the best √x curve stays within 0.6σ of the truth and lack of fit has about 17%
  power against it), and the power has one parameter fewer, so the AICc rule rightly prefers it.
  For that shape a match is "the bend is captured": identity response and either x² or a
  power/log/√ of x, passing lack of fit. The printed rates show which one was picked.
* log y (multiplicative error) → response log (a Box–Cox λ̂ rounded to 0 is the same node),
  identity predictor, degree 1.
* missing covariate  → the suggested spec contains the covariate ``batch``.
* spread ∝ mean      → the suggestion has weights, or a variance-stabilising response
  (log or √y); and it passes the lack-of-fit test (``RemedyTree.passes``).

Target for every truth except the line: a match in at least 75% of data sets. Rates are
printed (run with ``-s``) whatever the outcome, with what was picked instead.

Workers run in two spawned processes with single-threaded BLAS (the usual setting when
processes already use every core; it also avoids a large per-call overhead of threaded
OpenBLAS on tiny matrices seen on two-core machines).
"""

from __future__ import annotations

import multiprocessing as mp
import time
from collections import Counter
from concurrent.futures import ProcessPoolExecutor

import numpy as np
import pandas as pd
import pytest

LEVELS = np.array([1.0, 2.0, 4.0, 6.0, 8.0, 10.0])
REPS = 3
DATASETS = 40
DEPTH = 1
TARGET = 0.75
LINE_REMEDY_MAX = 0.25

TRUTHS = ("line", "quadratic_turning", "quadratic_top_bend", "log_y", "covariate", "spread")


def simulate(truth: str, seed: int) -> pd.DataFrame:
    """One data set of ``truth``; the seed stream is (truth index, seed)."""
    rng = np.random.default_rng([20261202, TRUTHS.index(truth), seed])
    x = np.repeat(LEVELS, REPS)
    frame = pd.DataFrame({"x": x})
    if truth == "line":
        y = 10 + 2 * x + rng.normal(0, 1.0, x.size)
    elif truth == "quadratic_turning":
        # vertex at x = 6: the curve rises then falls a little; bow ≈ 2.2 σ off the best line
        y = 10 + 3 * x - 0.25 * x**2 + rng.normal(0, 0.6, x.size)
    elif truth == "quadratic_top_bend":
        # monotone over 1–10 (vertex at 12.5), flattens at the top; bow ≈ 1.6 σ off the best line
        y = 10 + 2 * x - 0.08 * x**2 + rng.normal(0, 0.5, x.size)
    elif truth == "log_y":
        # log y linear in x, multiplicative error with a 12% coefficient of variation
        y = np.exp(0.5 + 0.25 * x + rng.normal(0, 0.12, x.size))
    elif truth == "covariate":
        # a batch shifts y by 2.9 σ; batches assigned at random, so partly confounded with x
        batch = np.where(rng.random(x.size) < 0.5, "b1", "b2")
        y = 10 + 2 * x + 2.0 * (batch == "b2") + rng.normal(0, 0.7, x.size)
        frame["batch"] = batch
    elif truth == "spread":
        # linear mean 18–90, SD = 6% of the mean (SD ratio 5 across the levels)
        mu = 10 + 8 * x
        y = mu + rng.normal(0, 0.06 * mu, x.size)
    else:  # pragma: no cover - guarded by TRUTHS
        raise ValueError(truth)
    frame["y"] = y
    return frame


def matches(truth: str, tree, node_id: str | None) -> bool:
    """The strict match rules of the module docstring."""
    from engine.transforms import IDENTITY

    if node_id is None:
        return False
    spec = tree.nodes[node_id].spec
    plain = spec.weights is None and not spec.covariates
    if truth == "line":
        return node_id == "root"
    if truth == "quadratic_turning":
        return spec.response == IDENTITY and spec.predictor == IDENTITY and spec.degree == 2 and plain
    if truth == "quadratic_top_bend":
        # a monotone bend over the range: x², or a power/log/√ of x that also passes lack of
        # fit, describe it equally well at this size (see the module docstring)
        curved = spec.degree == 2 or (spec.predictor != IDENTITY and spec.degree == 1)
        return spec.response == IDENTITY and curved and plain and tree.passes(tree.nodes[node_id])
    if truth == "log_y":
        return spec.response.kind == "log" and spec.predictor == IDENTITY and spec.degree == 1
    if truth == "covariate":
        return "batch" in spec.covariates
    if truth == "spread":
        stabilised = spec.weights is not None or spec.response.kind in {"log", "sqrt"}
        return stabilised and tree.passes(tree.nodes[node_id])
    raise ValueError(truth)


class Outcomes:
    """Results per truth (short repr, so a failing assertion does not print every case)."""

    def __init__(self, by_truth: dict[str, list[tuple[bool, str]]], elapsed: float) -> None:
        self.by_truth = by_truth
        self.elapsed = elapsed

    def __repr__(self) -> str:
        return f"<{sum(map(len, self.by_truth.values()))} simulated cases, {self.elapsed:.1f} s>"


def one_case(job: tuple[str, int]) -> tuple[str, int, bool, str]:
    """Grow and suggest on one simulated data set (runs in a worker process)."""
    import engine

    truth, seed = job
    frame = simulate(truth, seed)
    covs = ["batch"] if "batch" in frame else []
    study = engine.make_study(frame, y="y", x="x", covariates=covs)
    tree = engine.grow(study, depth=DEPTH)
    sug = tree.suggest("aicc")
    label = "none passes" if sug.node is None else tree.nodes[sug.node].spec.label()
    return truth, seed, matches(truth, tree, sug.node), label


@pytest.fixture(scope="module")
def outcomes(request):
    mp_ctx = mp.get_context("spawn")
    jobs = [(t, s) for t in TRUTHS for s in range(DATASETS)]
    mpatch = pytest.MonkeyPatch()
    mpatch.setenv("OPENBLAS_NUM_THREADS", "1")
    mpatch.setenv("OMP_NUM_THREADS", "1")
    start = time.perf_counter()
    try:
        with ProcessPoolExecutor(max_workers=2, mp_context=mp_ctx) as pool:
            results = list(pool.map(one_case, jobs, chunksize=8))
    finally:
        mpatch.undo()
    elapsed = time.perf_counter() - start
    by_truth: dict[str, list[tuple[bool, str]]] = {t: [] for t in TRUTHS}
    for truth, _seed, ok, label in results:
        by_truth[truth].append((ok, label))
    lines = [f"simulation: {DATASETS} data sets per truth, depth {DEPTH}, {elapsed:.1f} s"]
    for truth in TRUTHS:
        rows = by_truth[truth]
        rate = sum(ok for ok, _ in rows) / len(rows)
        others = Counter(label for ok, label in rows if not ok).most_common(4)
        shown = "; ".join(f"{lab} ×{k}" for lab, k in others) or "—"
        lines.append(f"  {truth:<20} match {rate:6.1%}   otherwise: {shown}")
    print("\n" + "\n".join(lines))
    return Outcomes(by_truth, elapsed)


def _rate(rows) -> float:
    return sum(ok for ok, _ in rows) / len(rows)


def _picked_instead(rows) -> str:
    return ", ".join(f"{lab} ×{k}" for lab, k in Counter(lab for ok, lab in rows if not ok).most_common(4))


def test_straight_line_rarely_gets_a_remedy(outcomes):
    rows = outcomes.by_truth["line"]
    remedy = 1 - _rate(rows)
    assert remedy <= LINE_REMEDY_MAX, f"a remedy was suggested in {remedy:.0%}: {_picked_instead(rows)}"


@pytest.mark.parametrize("truth", [t for t in TRUTHS if t != "line"])
def test_suggestion_matches_truth(outcomes, truth):
    rows = outcomes.by_truth[truth]
    rate = _rate(rows)
    assert rate >= TARGET, f"{truth}: match {rate:.0%} < {TARGET:.0%}; picked instead: {_picked_instead(rows)}"


def test_simulation_is_fast(outcomes):
    # budget for two cores; the whole study, pool start-up included
    assert outcomes.elapsed < 60.0, f"simulation took {outcomes.elapsed:.1f} s"


def test_simulated_truths_differ():
    """Guards the generators: each truth really has its feature (checked with plain numpy)."""
    line = simulate("line", 0)
    top = simulate("quadratic_top_bend", 0)
    spread = simulate("spread", 0)
    # the top-bend quadratic is monotone over the levels (true mean), the turning one is not
    mean_top = 10 + 2 * LEVELS - 0.08 * LEVELS**2
    mean_turn = 10 + 3 * LEVELS - 0.25 * LEVELS**2
    assert (np.diff(mean_top) > 0).all() and not (np.diff(mean_turn) > 0).all()
    sd = spread.groupby("x")["y"].std()
    assert sd.iloc[-1] > sd.iloc[0]
    assert (simulate("log_y", 0)["y"] > 0).all()
    assert not line.equals(top)
    assert simulate("line", 3).equals(simulate("line", 3))  # seeded
