"""Planning over several runs: power of the within-run tests, x̂ precision for a new run, and the
cheapest design by cost.

Monte Carlo checks draw from fixed random streams (the outcome is fixed) and use at least 2,000 simulated data sets:
rejection rates within 3 simulation standard errors of the computed power; the SD of x̂ within
3 standard errors of its planned value (plus 2 % for the first-order slope approximation);
coverage of the interval within 3 standard errors plus 1.5 points (Satterthwaite's df is itself
an approximation).
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from bendwise.engine.checks.runs import RunFactor, cell_stats, within_run_tests
from bendwise.engine.errors import UsageError
from bendwise.engine.plan.power import design_power
from bendwise.engine.plan.runs import (
    design_cost,
    runs_design,
    search_runs_designs,
    xhat_precision,
)
from bendwise.tui.cli import main
from scipy import stats

LEVELS = (0.0, 5.0, 10.0, 20.0, 40.0)


# ---------------------------------------------------------------- simulation helpers


def _layout(levels, runs, reps):
    c = len(levels)
    run = np.repeat(np.arange(runs), c * reps)
    level = np.tile(np.repeat(np.arange(c), reps), runs)
    return run, level


def _rejections(levels, runs, reps, *, deviations, sw, sb, tau, n_sim, stream):
    """Rejection rates at α = 0.05 of the engine's own within-run tests (as run by check --runs)."""
    lv = np.asarray(levels, float)
    run, level = _layout(lv, runs, reps)
    factor = RunFactor("run", run, tuple(str(i) for i in range(runs)))
    rng = np.random.default_rng(stream)
    dev = np.asarray(deviations, float)
    lof_rej = shape_rej = 0
    for _ in range(n_sim):
        u = rng.normal(0.0, sb, runs)
        g = rng.normal(0.0, tau, (runs, lv.size))
        y = 2.0 + 0.05 * lv[level] + dev[level] + u[run] + g[run, level]
        y = y + rng.normal(0.0, sw, run.size)
        lof, shape = within_run_tests(cell_stats(y, level, lv, factor))
        lof_rej += lof.p < 0.05
        shape_rej += shape.p < 0.05
    return lof_rej / n_sim, shape_rej / n_sim


def _simulate_xhat(levels, runs, reps, *, sw, sb, slope, at, n_sim, stream, new_readings=1):
    """x̂ errors and interval half-widths, computed from scratch on simulated balanced data.

    The line is OLS (equal to REML for this balanced design); the mean squares between runs and
    within runs (line + run offsets) give the estimated variance and Satterthwaite's df.
    """
    # reference: Satterthwaite (1946) for the df; Searle, Casella & McCulloch (1992) ch. 3 for
    # the balanced one-way mean squares; t quantiles from scipy.stats.t
    lv = np.asarray(levels, float)
    c, m, r = lv.size, reps, runs
    run, level = _layout(lv, r, m)
    x = lv[level]
    rng = np.random.default_rng(stream)
    y = 1.0 + slope * x + rng.normal(0, sb, (n_sim, r))[:, run] + rng.normal(0, sw, (n_sim, x.size))
    xc = x - x.mean()
    b1 = (y @ xc) / (xc @ xc)
    b0 = y.mean(1) - b1 * x.mean()
    run_means = y.reshape(n_sim, r, c * m).mean(2)
    ms_b = c * m * ((run_means - run_means.mean(1, keepdims=True)) ** 2).sum(1) / (r - 1)
    resid = y - run_means[:, run] - b1[:, None] * xc
    df_w = r * c * m - r - 1
    ms_w = (resid**2).sum(1) / df_w
    k = 1 / new_readings + 1 / (r * c * m) + (at - lv.mean()) ** 2 / (r * m * ((lv - lv.mean()) ** 2).sum())
    a = (1 + 1 / r) / (c * m)
    b = k - a
    v = a * ms_b + b * ms_w
    nu = v**2 / ((a * ms_b) ** 2 / (r - 1) + (b * ms_w) ** 2 / df_w)
    y_new = 1.0 + slope * at + rng.normal(0, sb, n_sim) + rng.normal(0, sw, (n_sim, new_readings)).mean(1)
    err = (y_new - b0) / b1 - at
    half = stats.t.ppf(0.975, nu) * np.sqrt(np.maximum(v, 0.0)) / np.abs(b1)
    return err, half


# ---------------------------------------------------------------- the tests' power


def test_noncentrality_is_runs_times_replicates_times_squared_departures():
    d = runs_design(LEVELS, 4, 3, delta=0.3, sigma_within=0.2)
    dev = np.asarray(d.deviations)
    lam = 4 * 3 * float(dev @ dev) / 0.2**2
    assert d.lack_of_fit.noncentrality == pytest.approx(lam, rel=1e-9)
    assert (d.lack_of_fit.df_num, d.lack_of_fit.df_den) == (3, 4 * 5 * 2)
    # reference: scipy.stats.ncf for the noncentral F tail
    crit = stats.f.isf(0.05, 3, 40)
    assert d.lack_of_fit.power == pytest.approx(stats.ncf.sf(crit, 3, 40, lam), rel=1e-9)
    # the departures are the single-run plan's (same levels, same bend)
    one = design_power(LEVELS, 12, delta=0.3, sigma=0.2)
    assert d.deviations == pytest.approx(one.deviations, abs=1e-12)


@pytest.mark.parametrize(
    ("runs", "reps", "delta", "sb"),
    [(4, 2, 0.015, 0.05), (3, 3, 0.012, 0.2), (6, 2, 0.0, 0.05)],
)
def test_within_run_power_matches_simulation(runs, reps, delta, sb):
    sw = 0.02
    if delta > 0:
        d = runs_design(LEVELS, runs, reps, delta=delta, sigma_within=sw, sigma_between=sb)
        planned, dev = d.lack_of_fit.power, d.deviations
    else:  # a true line: the test keeps its level whatever the run shifts
        planned, dev = 0.05, (0.0,) * len(LEVELS)
    rate, _ = _rejections(LEVELS, runs, reps, deviations=dev, sw=sw, sb=sb, tau=0.0, n_sim=2000,
                          stream=11 + runs)
    se = math.sqrt(planned * (1 - planned) / 2000)
    assert abs(rate - planned) <= 3 * se, (rate, planned, se)


def test_shape_test_power_matches_simulation():
    d = runs_design(LEVELS, 4, 2, delta=0.01, sigma_within=0.02, interaction_sd=0.015)
    sh = d.shape_differs
    assert (sh.df_num, sh.df_den) == (12, 20)
    assert sh.noncentrality == pytest.approx(1 + 2 * 0.015**2 / 0.02**2)
    _, rate = _rejections(LEVELS, 4, 2, deviations=d.deviations, sw=0.02, sb=0.03, tau=0.015,
                          n_sim=2000, stream=5)
    se = math.sqrt(sh.power * (1 - sh.power) / 2000)
    assert abs(rate - sh.power) <= 3 * se, (rate, sh.power)
    none = runs_design(LEVELS, 4, 2, delta=0.01, sigma_within=0.02, interaction_sd=0.0)
    assert none.shape_differs.power == pytest.approx(0.05, abs=1e-12)


def test_between_run_sd_does_not_change_the_within_run_test():
    a = runs_design(LEVELS, 5, 2, delta=0.3, sigma_within=0.2, sigma_between=0.0)
    b = runs_design(LEVELS, 5, 2, delta=0.3, sigma_within=0.2, sigma_between=5.0)
    assert a.lack_of_fit == b.lack_of_fit


def test_more_runs_or_replicates_give_more_power():
    powers = [runs_design(LEVELS, r, 2, delta=0.2, sigma_within=0.2).lack_of_fit.power
              for r in range(2, 13)]
    assert all(p2 > p1 for p1, p2 in zip(powers, powers[1:], strict=False))
    by_reps = [runs_design(LEVELS, 3, m, delta=0.2, sigma_within=0.2).lack_of_fit.power
               for m in range(2, 11)]
    assert all(p2 > p1 for p1, p2 in zip(by_reps, by_reps[1:], strict=False))


# ---------------------------------------------------------------- x̂ precision


@pytest.mark.parametrize(("runs", "reps", "sb", "at"), [(4, 2, 0.05, 20.0), (6, 3, 0.02, 0.0),
                                                         (8, 2, 0.03, 40.0)])
def test_xhat_sd_and_coverage_match_simulation(runs, reps, sb, at):
    n_sim = 4000
    p = xhat_precision(LEVELS, runs, reps, sigma_within=0.02, sigma_between=sb, slope=0.05, at=at)
    err, half = _simulate_xhat(LEVELS, runs, reps, sw=0.02, sb=sb, slope=0.05, at=at,
                               n_sim=n_sim, stream=runs * 7)
    sd = float(np.std(err, ddof=1))
    assert abs(sd / p.sd - 1) <= 3 / math.sqrt(2 * (n_sim - 1)) + 0.02, (sd, p.sd)
    coverage = float(np.mean(np.abs(err) <= half))
    assert abs(coverage - 0.95) <= 3 * math.sqrt(0.95 * 0.05 / n_sim) + 0.015, coverage
    # the planned half-width is the one at the expected mean squares: the simulated average
    # half-width lies within 10 % of it (Jensen's gap in √ and in t's df)
    assert abs(float(np.mean(half)) / p.half_width - 1) <= 0.10


def test_xhat_variance_formula_by_hand():
    lv = np.asarray(LEVELS)
    r, m, sw, sb, at = 4, 3, 0.02, 0.05, 10.0
    p = xhat_precision(LEVELS, r, m, sigma_within=sw, sigma_between=sb, slope=0.05, at=at,
                       new_readings=2)
    sxx = float(((lv - lv.mean()) ** 2).sum())
    var = sb**2 + sw**2 / 2 + sb**2 / r + sw**2 / (r * 5 * m) + (at - lv.mean()) ** 2 * sw**2 / (r * m * sxx)
    assert p.sd == pytest.approx(math.sqrt(var) / 0.05, rel=1e-12)
    assert p.half_width == pytest.approx(stats.t.ppf(0.975, p.df) * p.sd, rel=1e-12)
    # Satterthwaite (1946): var = A·MS_B + B·MS_W at the expected mean squares
    k = 1 / 2 + 1 / (r * 5 * m) + (at - lv.mean()) ** 2 / (r * m * sxx)
    a = (1 + 1 / r) / (5 * m)
    ms_b, ms_w = sw**2 + 5 * m * sb**2, sw**2
    df = var**2 / ((a * ms_b) ** 2 / (r - 1) + ((k - a) * ms_w) ** 2 / (r * 5 * m - r - 1))
    assert p.df == pytest.approx(df, rel=1e-12)


def test_more_runs_narrow_the_xhat_interval():
    widths = [xhat_precision(LEVELS, r, 2, sigma_within=0.02, sigma_between=0.05, slope=0.05,
                             at=20.0).half_width for r in range(2, 13)]
    assert all(w2 < w1 for w1, w2 in zip(widths, widths[1:], strict=False))
    # replicates within a run cannot beat the between-run floor σ_b·√(1 + 1/R)
    many = xhat_precision(LEVELS, 3, 1000, sigma_within=0.02, sigma_between=0.05, slope=0.05, at=20.0)
    assert many.sd > 0.05 * math.sqrt(1 + 1 / 3) / 0.05


# ---------------------------------------------------------------- cost search


def _brute(levels, *, target_power, target_half_width, delta, sw, sb, slope, run_cost, meas_cost):
    best = None
    for r in range(2, 13):
        for m in range(2, 11):
            d = runs_design(levels, r, m, delta=delta, sigma_within=sw, sigma_between=sb,
                            slope=slope, run_cost=run_cost, measurement_cost=meas_cost)
            ok = d.lack_of_fit.power >= target_power and d.precision.half_width <= target_half_width
            if ok and (best is None or d.cost < best[0]):
                best = (d.cost, r, m)
    return best


@pytest.mark.parametrize(("run_cost", "meas_cost"), [(0.0, 1.0), (50.0, 1.0), (200.0, 0.5)])
def test_search_picks_the_cheapest_feasible_design(run_cost, meas_cost):
    kw = dict(delta=0.015, sw=0.02, sb=0.05, slope=0.05)
    s = search_runs_designs(LEVELS, delta=0.015, sigma_within=0.02, sigma_between=0.05,
                            slope=0.05, target_power=0.8, target_half_width=3.0,
                            run_cost=run_cost, measurement_cost=meas_cost)
    brute = _brute(LEVELS, target_power=0.8, target_half_width=3.0, run_cost=run_cost,
                   meas_cost=meas_cost, **kw)
    assert brute is not None and s.best
    assert s.best[0].cost == pytest.approx(brute[0])
    assert s.best[0].cost == design_cost(s.best[0].runs, 5, s.best[0].replicates, run_cost, meas_cost)
    assert [c.cost for c in s.best] == sorted(c.cost for c in s.best)
    assert all(c.feasible for c in s.best) and len(s.rows) == 11 * 9


def test_dear_runs_push_the_search_to_fewer_runs():
    kw = dict(delta=0.2, sigma_within=0.2, target_power=0.8)
    cheap = search_runs_designs(LEVELS, run_cost=0.0, **kw).best[0]
    dear = search_runs_designs(LEVELS, run_cost=1000.0, **kw).best[0]
    assert dear.runs <= cheap.runs and dear.runs == 2


def test_search_reports_no_design_when_none_reaches():
    s = search_runs_designs(LEVELS, sigma_within=0.02, sigma_between=1.0, slope=0.05,
                            target_half_width=0.1)
    assert s.best == () and not any(c.feasible for c in s.rows)


# ---------------------------------------------------------------- refusals


@pytest.mark.parametrize(
    ("call", "words"),
    [
        (lambda: runs_design(LEVELS, 1, 2, delta=0.1), "runs: 1 is below 2"),
        (lambda: runs_design(LEVELS, 3, 1, delta=0.1), "replicates: 1 is below 2"),
        (lambda: runs_design(LEVELS, 3, 2, delta=0.1, run_cost=-1), "run cost: -1"),
        (lambda: runs_design(LEVELS, 3, 2, delta=0.1, measurement_cost=-1), "measurement cost"),
        (lambda: runs_design(LEVELS, 3, 2, delta=0.1, sigma_between=-0.1), "between-run SD"),
        (lambda: runs_design(LEVELS, 3, 2, delta=0.1, slope=0.0), "slope: 0.0 is zero"),
        (lambda: search_runs_designs(LEVELS, delta=0.1), "target: none given"),
        (lambda: search_runs_designs(LEVELS, target_half_width=1.0), "slope: needed"),
    ],
)
def test_bad_inputs_are_refused_in_one_line(call, words):
    with pytest.raises(UsageError) as err:
        call()
    assert words in str(err.value) and "\n" not in str(err.value)


# ---------------------------------------------------------------- command line


def _cli(argv, capsys):
    code = main(argv)
    out = capsys.readouterr()
    return code, out.out, out.err


BASE = ["plan", "--levels", "0,5,10,20,40", "--sigma", "0.02", "--delta", "0.015"]


def test_cli_runs_json_and_text(capsys):
    argv = BASE + ["--runs", "4", "--replicates", "2", "--between-sd", "0.05", "--slope", "0.05",
                   "--interaction-sd", "0.01", "--run-cost", "50"]
    code, out, _ = _cli(argv + ["--json"], capsys)
    assert code == 0
    rep = json.loads(out)["several_runs"]
    d = runs_design(LEVELS, 4, 2, delta=0.015, sigma_within=0.02, sigma_between=0.05, slope=0.05,
                    interaction_sd=0.01, run_cost=50)
    assert rep["design"]["lack_of_fit_within_runs"]["power"] == pytest.approx(d.lack_of_fit.power)
    assert rep["design"]["xhat"]["at"]["half_width"] == pytest.approx(d.precision.half_width)
    assert rep["design"]["xhat"]["at"]["x"] == 20.0
    assert rep["design"]["cost"] == 50 * 4 + 40
    assert len(rep["design"]["xhat"]["by_level"]) == 5
    code, text, _ = _cli(argv, capsys)
    assert code == 0
    assert "4 runs × 5 levels" in text and "lack of fit within runs" in text
    assert "shape differs between runs" in text and "Satterthwaite" in text


def test_cli_runs_search(capsys):
    argv = BASE + ["--runs", "2,8", "--between-sd", "0.05", "--slope", "0.05", "--target-power",
                   "0.8", "--target-halfwidth", "3", "--run-cost", "50", "--json"]
    code, out, _ = _cli(argv, capsys)
    assert code == 0
    s = json.loads(out)["several_runs"]["search"]
    assert s["runs_tried"] == [2, 8] and len(s["designs"]) == 7 * 9
    first = s["cheapest"][0]
    feasible = [d for d in s["designs"] if d["meets_targets"]]
    assert first["cost"] == min(d["cost"] for d in feasible)
    assert first["power"] >= 0.8 and first["half_width"] <= 3


@pytest.mark.parametrize(
    ("extra", "words"),
    [
        (["--runs", "1", "--replicates", "2"], "--runs: '1' is below 2"),
        (["--runs", "3", "--replicates", "2", "--run-cost", "-5"], "--run-cost: '-5' is negative"),
        (["--replicates", "2", "--run-cost", "5"], "--run-cost: only with --runs"),
        (["--runs", "3", "--replicates", "2,3"], "--replicates: with --runs"),
        (["--runs", "2,8", "--replicates", "2"], "needs --target-power or --target-halfwidth"),
        (["--runs", "x", "--replicates", "2"], "--runs: 'x' is not a number"),
    ],
)
def test_cli_refusals(capsys, extra, words):
    code, out, err = _cli(BASE + extra, capsys)
    assert code == 2 and out == ""
    assert words in err and err.count("\n") == 1, err


def test_installed_entry_point_runs_a_multi_run_plan():
    """The real ``bendwise`` command of this environment, as a user would run it."""
    exe = Path(sys.executable).parent / "bendwise"
    if not exe.exists():
        pytest.skip("no bendwise entry point next to this Python")
    argv = [str(exe), *BASE, "--runs", "5", "--replicates", "3", "--between-sd", "0.05",
            "--slope", "0.05", "--run-cost", "40", "--target-power", "0.8"]
    done = subprocess.run(argv, capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert "lack of fit within runs" in done.stdout
    assert "Cheapest designs meeting the goal:" in done.stdout
    bad = subprocess.run([str(exe), *BASE, "--runs", "3", "--replicates", "2",
                          "--measurement-cost", "-1"], capture_output=True, text=True, timeout=120)
    assert bad.returncode == 2 and bad.stdout == ""
    assert bad.stderr.strip().endswith("--measurement-cost: '-1' is negative; give 0 or more")
