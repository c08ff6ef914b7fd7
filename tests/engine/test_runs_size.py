"""Size of the within-run lack-of-fit test by simulation (slow).

Truth: a straight line measured over 5 days with 3 repeats per day and level, each day shifted by
a normal offset (SD 2, within-day SD 1). At α = 0.05 the within-run test (``engine.checks.runs``,
runs as blocks, pure error within day × level cells) must reject 3.5–6.5 % of 2000 simulated data
sets. The lack-of-fit test that ignores the days (``engine.check``) is off in both directions:

* every day measures all 6 levels: the day shifts land in pure error and the test almost never
  rejects (blind);
* each day measures two neighbouring levels (day 1 levels 1–2, day 2 levels 2–3, …): the day
  shifts land in the level means and the test rejects a true straight line far too often.

Both rates are printed (pytest -s) for the record.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from bendwise.engine import check, make_study
from bendwise.engine.checks.runs import RunFactor, cell_stats, within_run_tests

LEVELS = np.array([0.0, 1.0, 2.0, 5.0, 10.0, 20.0])
REPEATS = 3
SIMULATIONS = 2000
DESIGNS = {
    "every day all levels": [range(6)] * 5,
    "each day two neighbouring levels": [range(d, d + 2) for d in range(5)],
}


def _design(levels_per_day) -> tuple[np.ndarray, np.ndarray]:
    day = [d for d, lv in enumerate(levels_per_day) for _ in lv for _ in range(REPEATS)]
    level = [i for lv in levels_per_day for i in lv for _ in range(REPEATS)]
    return np.array(day), np.array(level)


@pytest.mark.slow
@pytest.mark.parametrize("name", list(DESIGNS))
def test_within_run_lack_of_fit_holds_its_size_and_the_naive_test_does_not(name):
    rng = np.random.default_rng(20261205)
    day, level = _design(DESIGNS[name])
    x = LEVELS[level]
    runs = RunFactor("day", day, tuple(f"d{i}" for i in range(5)))
    within = naive = 0
    for _ in range(SIMULATIONS):
        y = 3.0 + 0.5 * x + rng.normal(0.0, 2.0, 5)[day] + rng.normal(0.0, 1.0, len(x))
        lof, _ = within_run_tests(cell_stats(y, level, LEVELS, runs))
        within += lof.p < 0.05
        naive += check(make_study(pd.DataFrame({"x": x, "y": y}), y="y", x="x")).lack_of_fit.p < 0.05
    size_within, size_naive = within / SIMULATIONS, naive / SIMULATIONS
    print(f"\n{name}: size at α = 0.05 over {SIMULATIONS} data sets: within runs {size_within:.2%}, "
          f"ignoring runs {size_naive:.2%}")
    assert 0.035 <= size_within <= 0.065
    if name == "every day all levels":
        assert size_naive < 0.01
    else:
        assert size_naive > 0.15
