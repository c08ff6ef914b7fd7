"""The suggestion rule's operating characteristics, held on seeds of this test's own.

The simulation is ``bench/suggestion_rates.py`` (its module text defines the designs, the truths
and what "finding the remedy" means); the README publishes its table on other seeds. Targets:

* straight-line truth (four designs): a remedy in at most 8 % of data sets, and an exact 95 %
  interval whose lower end does not exceed α = 0.05 (the rule's guarantee is ≤ α);
* a line with an irrelevant batch column: at most 8 %;
* recovery on 6×3 and 10×4: quadratic with a turn, saturating curve and missing batch ≥ 85 %,
  log-normal growth ≥ 75 %; spread growing with the mean ≥ 65 % at 3 or more replicates.

Recovery is held with a margin for simulation error: the observed rate must reach the target
minus two binomial standard errors at the target (about 6.5 points at 85 % with 120 sets).
"""

from __future__ import annotations

import importlib
import math
import sys
from pathlib import Path

import pytest

BENCH = Path(__file__).resolve().parents[2] / "bench" / "suggestion_rates.py"
SEED = 7_700_421  # not the README's seed
NULL_SETS = 200
FOUND_SETS = 120
ALPHA = 0.05


def _load():
    # an importable module (not loaded from a path): the simulation's worker processes import it
    # by name, and spawned processes inherit this search path
    if str(BENCH.parent) not in sys.path:
        sys.path.insert(0, str(BENCH.parent))
    return importlib.import_module("suggestion_rates")


@pytest.fixture(scope="module")
def rates():
    sim = _load()
    null = sim.run(NULL_SETS, designs=tuple(sim.DESIGNS), truths=("line",), base_seed=SEED)
    null.update(sim.run(FOUND_SETS, designs=("6x3", "10x4"), truths=("line+batch",), base_seed=SEED))
    found = sim.run(FOUND_SETS, designs=("6x3", "10x4"),
                    truths=("quadratic", "saturating", "batch", "lognormal", "spread"), base_seed=SEED)
    found.update(sim.run(FOUND_SETS, designs=("uneven",), truths=("spread",), base_seed=SEED))
    report = [f"{d:<7} {t:<11} remedy {c['remedy'] / c['n']:6.1%}  found {c['found'] / c['n']:6.1%}  (n = {c['n']})"
              for (d, t, _p), c in sorted({**null, **found}.items())]
    print("\n" + "\n".join(report))
    return sim, null, found


@pytest.mark.slow
@pytest.mark.parametrize("design", ["6x3", "4x2", "10x4", "uneven"])
def test_straight_line_rarely_gets_a_remedy(rates, design):
    sim, null, _ = rates
    cell = null[(design, "line", "default")]
    rate = cell["remedy"] / cell["n"]
    low, _high = sim.clopper_pearson(cell["remedy"], cell["n"])
    assert rate <= 0.08, f"{design}: a remedy in {rate:.1%}; picked: {cell['picked'].most_common(3)}"
    assert low <= ALPHA, f"{design}: the rate {rate:.1%} is clearly above α (interval from {low:.1%})"


@pytest.mark.slow
@pytest.mark.parametrize("design", ["6x3", "10x4"])
def test_an_irrelevant_covariate_is_not_taken(rates, design):
    _, null, _ = rates
    cell = null[(design, "line+batch", "default")]
    assert cell["remedy"] / cell["n"] <= 0.08, cell["picked"].most_common(3)


TARGETS = [("6x3", "quadratic", 0.85), ("10x4", "quadratic", 0.85), ("6x3", "saturating", 0.85),
           ("10x4", "saturating", 0.85), ("6x3", "batch", 0.85), ("10x4", "batch", 0.85),
           ("6x3", "lognormal", 0.75), ("10x4", "lognormal", 0.75), ("6x3", "spread", 0.65),
           ("10x4", "spread", 0.65), ("uneven", "spread", 0.65)]


@pytest.mark.slow
@pytest.mark.parametrize(("design", "truth", "target"), TARGETS)
def test_a_real_remedy_is_found(rates, design, truth, target):
    _, _, found = rates
    cell = found[(design, truth, "default")]
    rate = cell["found"] / cell["n"]
    margin = 2 * math.sqrt(target * (1 - target) / cell["n"])
    assert rate >= target - margin, (f"{design} {truth}: found {rate:.1%} < {target:.0%} − {margin:.1%}; "
                                     f"picked instead: {cell['picked'].most_common(3)}")


def test_the_simulated_truths_have_their_feature():
    """Guards the generators with plain numpy: each truth really has what it is named for."""
    import numpy as np

    sim = _load()
    line = sim.simulate("6x3", "line", 0)
    assert sim.simulate("6x3", "line", 0).equals(line)  # seeded
    quad = sim.simulate("10x4", "quadratic", 0)
    means = quad.groupby("x")["y"].mean().to_numpy()
    assert np.argmax(means) not in (0, means.size - 1)  # the turn lies inside the range
    sat = sim.simulate("10x4", "saturating", 0).groupby("x")["y"].mean().to_numpy()
    assert np.diff(sat)[-1] < np.diff(sat)[0] / 3  # it levels off
    spread = sim.simulate("10x4", "spread", 0).groupby("x")["y"].std().to_numpy()
    assert spread[-1] > 2 * spread[0]
    batch = sim.simulate("6x3", "batch", 0)
    assert set(batch["batch"]) == {"b1", "b2"} and (sim.simulate("4x2", "line+batch", 3)["batch"] == "b1").sum() == 4
    assert (sim.simulate("uneven", "lognormal", 0)["y"] > 0).all()


def test_published_rates_match_the_readme_table():
    """The rates reports quote (engine/suggestion_rates.json) are the README's table."""
    from bendwise.engine.tree.suggestion import published_rates

    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")
    table = readme.split("**Now**", 1)[1].split("**Before**", 1)[0]
    doc = published_rates()
    assert doc["sets"] >= 1000 and doc["depth"] == 2 and len(doc["cells"]) >= 20
    for cell in doc["cells"]:
        text = f"{100 * cell['rate']:.1f} % ({100 * cell['low']:.1f}–{100 * cell['high']:.1f})"
        assert text in table, (cell, text)
