"""``bendwise plan --runs``: planning a calibration spread over several runs.

The options are added to the ``plan`` parser by :func:`add_options`; ``plan.run`` hands over to
:func:`run_runs` when ``--runs`` is given and calls :func:`refuse_without_runs` otherwise.
"""

from __future__ import annotations

import argparse
import math
from typing import Any

from bendwise.engine.errors import UsageError
from bendwise.tui.output import emit_json, fmt_num

# option → attribute for the options that only make sense with --runs
_RUNS_ONLY = {
    "--between-sd": "between_sd",
    "--interaction-sd": "interaction_sd",
    "--slope": "slope",
    "--at": "at",
    "--new-readings": "new_readings",
    "--interval-level": "interval_level",
    "--target-halfwidth": "target_halfwidth",
    "--run-cost": "run_cost",
    "--measurement-cost": "measurement_cost",
}


def add_options(parser: Any) -> None:
    """Add the multi-run options to the ``plan`` parser."""
    g = parser.add_argument_group("several runs (days, batches, instruments)")
    g.add_argument(
        "--runs",
        metavar="R|LO,HI",
        help="plan R runs, each measuring every level --replicates times (--sigma is then the "
        "within-run SD); with a target, LO,HI is the span of runs searched (2,12)",
    )
    g.add_argument("--between-sd", metavar="S", help="SD of the run-to-run shift, y units (0)")
    g.add_argument(
        "--interaction-sd",
        metavar="S",
        help="SD of a random departure per run × level cell: gives the shape test's power",
    )
    g.add_argument("--slope", metavar="B", help="expected slope (y per x) for the x̂ interval")
    g.add_argument("--at", metavar="X", help="x where the x̂ interval is judged (middle of range)")
    g.add_argument("--new-readings", metavar="M", default="1", help="readings averaged in a new run (1)")
    g.add_argument("--interval-level", metavar="L", default="0.95", help="level of the x̂ interval (0.95)")
    g.add_argument("--target-halfwidth", metavar="H", help="search for designs with x̂ half-width ≤ H")
    g.add_argument("--run-cost", metavar="C", help="cost of setting up one run (0)")
    g.add_argument("--measurement-cost", metavar="C", help="cost of one measurement (1)")


def refuse_without_runs(args: argparse.Namespace) -> None:
    """One line when a multi-run option is given without ``--runs``."""
    defaults = {"new_readings": "1", "interval_level": "0.95"}
    for option, attr in _RUNS_ONLY.items():
        value = getattr(args, attr)
        if value is not None and value != defaults.get(attr):
            raise UsageError(f"{option}: only with --runs R; add the number of runs or drop it")


# ---------------------------------------------------------------- parsing


def _num(option: str, text: str | None) -> float | None:
    if text is None:
        return None
    try:
        v = float(text)
    except ValueError:
        raise UsageError(f"{option}: {text!r} is not a number") from None
    if not math.isfinite(v):
        raise UsageError(f"{option}: {text!r} is not a finite number")
    return v


def _whole(option: str, text: str) -> int:
    v = _num(option, text)
    assert v is not None
    if v != math.floor(v):
        raise UsageError(f"{option}: {text!r} is not a whole number")
    return int(v)


def _runs_option(text: str) -> tuple[int | None, tuple[int, int]]:
    """(runs of the single design or None, span of runs searched)."""
    parts = [t.strip() for t in text.split(",")]
    if len(parts) == 1:
        r = _whole("--runs", parts[0])
        if r < 2:
            raise UsageError(f"--runs: {text!r} is below 2; plan at least 2 runs (3 or more to "
                             "estimate the between-run SD)")
        return r, (2, max(12, r))
    if len(parts) != 2:
        raise UsageError(f"--runs: {text!r} is neither a count R nor a span LO,HI")
    lo, hi = _whole("--runs", parts[0]), _whole("--runs", parts[1])
    if lo < 2 or hi < lo:
        raise UsageError(f"--runs: {text!r} is not a span of 2 or more runs; give LO,HI with 2 ≤ LO ≤ HI")
    return None, (lo, hi)


def _settings(args: argparse.Namespace, levels: list[float], sigma: float | None) -> dict[str, Any]:
    """The numbers shared by the single design and the search, checked once."""
    if args.from_data is not None:
        raise UsageError("--from-data: not with --runs; give --sigma (the within-run SD) and "
                         "--between-sd, e.g. from bendwise check --runs")
    needs_y = ("--between-sd", "--interaction-sd", "--slope", "--target-halfwidth")
    if sigma is None:
        for option in needs_y:
            if getattr(args, _RUNS_ONLY[option]) is not None:
                raise UsageError(f"{option}: in y units needs --sigma (the within-run SD)")
    replicates = None
    if args.replicates is not None:
        if "," in args.replicates:
            raise UsageError("--replicates: with --runs give one count per level and run, not a list")
        replicates = _whole("--replicates", args.replicates)
    run_cost = _num("--run-cost", args.run_cost)
    meas_cost = _num("--measurement-cost", args.measurement_cost)
    for option in ("--run-cost", "--measurement-cost", "--between-sd", "--interaction-sd"):
        value = _num(option, getattr(args, _RUNS_ONLY[option]))
        if value is not None and value < 0:
            raise UsageError(f"{option}: {getattr(args, _RUNS_ONLY[option])!r} is negative; "
                             "give 0 or more")
    return {
        "levels": levels,
        "replicates": replicates,
        "sigma_within": 1.0 if sigma is None else sigma,
        "sigma_between": _num("--between-sd", args.between_sd) or 0.0,
        "interaction_sd": _num("--interaction-sd", args.interaction_sd),
        "slope": _num("--slope", args.slope),
        "at": _num("--at", args.at),
        "level": _num("--interval-level", args.interval_level),
        "new_readings": _whole("--new-readings", args.new_readings),
        "run_cost": 0.0 if run_cost is None else run_cost,
        "measurement_cost": 1.0 if meas_cost is None else meas_cost,
        "target_half_width": _num("--target-halfwidth", args.target_halfwidth),
    }


# ---------------------------------------------------------------- run


def run_runs(args: argparse.Namespace, *, levels: list[float] | None, delta: float | None,
             means: list[float] | None, sigma: dict[str, Any] | None, alpha: float,
             target: float | None) -> int:
    """Plan R runs: the single design and/or the cheapest designs; prints and returns 0."""
    from bendwise.engine.plan.runs import runs_design, search_runs_designs

    if levels is None:
        raise UsageError("--levels: with --runs list the levels (0,5,10) or give N and --range")
    single_runs, span = _runs_option(args.runs)
    st = _settings(args, levels, None if sigma is None else sigma["value"])
    if target is None and st["target_half_width"] is None:
        if single_runs is None:
            raise UsageError("--runs: a span LO,HI needs --target-power or --target-halfwidth")
        if st["replicates"] is None:
            raise UsageError("--replicates: not given; say how many per level in each run")
    common = {k: st[k] for k in ("sigma_within", "sigma_between", "slope", "at", "level",
                                 "new_readings", "run_cost", "measurement_cost")}
    design = None
    if single_runs is not None and st["replicates"] is not None:
        design = runs_design(levels, single_runs, st["replicates"], delta=delta, means=means,
                             alpha=alpha, interaction_sd=st["interaction_sd"], **common)
    search = None
    if target is not None or st["target_half_width"] is not None:
        search = search_runs_designs(
            levels, delta=delta if target is not None else None,
            means=means if target is not None else None, alpha=alpha, target_power=target,
            target_half_width=st["target_half_width"], runs=range(span[0], span[1] + 1), **common)
    mid = st["at"] if st["at"] is not None else 0.5 * (min(levels) + max(levels))
    report = {
        "command": "plan",
        "alpha": alpha,
        "sigma": sigma,
        "units": "y" if sigma is not None else "sigma",
        "several_runs": _runs_json(st, design, search, span, mid),
    }
    if args.json:
        emit_json(report)
        return 0
    lines = _noise_lines(sigma, st)
    if design is not None:
        lines += _design_lines(design, sigma is not None, st)
    if search is not None:
        lines += ([""] if design is not None else []) + _search_lines(search, span, mid)
    print("\n".join(line.rstrip() for line in lines))
    return 0


# ---------------------------------------------------------------- JSON


def _precision_json(p: Any) -> dict[str, Any]:
    return {"x": p.at, "sd": p.sd, "df": p.df, "half_width": p.half_width}


def _design_json(d: Any) -> dict[str, Any]:
    lof = d.lack_of_fit
    shape = d.shape_differs
    xhat = None
    if d.precision is not None:
        xhat = {
            "level": d.precision.level,
            "new_readings": d.precision.new_readings,
            "at": _precision_json(d.precision),
            "by_level": [_precision_json(p) for p in d.precision_by_level],
        }
    return {
        "runs": d.runs,
        "levels": list(d.levels),
        "replicates": d.replicates,
        "total": d.total,
        "cost": d.cost,
        "shape": d.shape,
        "delta": d.delta,
        "delta_sd": d.delta / d.sigma_within,
        "deviations": list(d.deviations),
        "lack_of_fit_within_runs": {
            "df": [lof.df_num, lof.df_den], "noncentrality": lof.noncentrality,
            "critical_f": lof.critical_f, "power": lof.power,
        },
        "shape_differs": None if shape is None else {
            "df": [shape.df_num, shape.df_den], "scale": shape.noncentrality,
            "critical_f": shape.critical_f, "power": shape.power,
        },
        "xhat": xhat,
    }


def _candidate_json(c: Any) -> dict[str, Any]:
    return {"runs": c.runs, "replicates": c.replicates, "total": c.total, "cost": c.cost,
            "power": c.power, "half_width": c.half_width, "meets_targets": c.feasible}


def _runs_json(st: dict[str, Any], design: Any, search: Any, span: tuple[int, int],
               mid: float) -> dict[str, Any]:
    out: dict[str, Any] = {
        "within_sd": st["sigma_within"],
        "between_sd": st["sigma_between"],
        "interaction_sd": st["interaction_sd"],
        "slope": st["slope"],
        "run_cost": st["run_cost"],
        "measurement_cost": st["measurement_cost"],
        "design": None if design is None else _design_json(design),
        "search": None,
    }
    if search is not None:
        out["search"] = {
            "levels": list(search.levels),
            "runs_tried": list(span),
            "replicates_tried": [min(r.replicates for r in search.rows),
                                 max(r.replicates for r in search.rows)],
            "target_power": search.target_power,
            "target_half_width": search.target_half_width,
            "half_width_at": mid if search.target_half_width is not None else None,
            "designs": [_candidate_json(c) for c in search.rows],
            "cheapest": [_candidate_json(c) for c in search.best],
        }
    return out


# ---------------------------------------------------------------- text


def _pct(p: float) -> str:
    """Whole percent rounded down, as in the single-run plan."""
    from bendwise.tui.commands.plan import _pct as pct

    return pct(p)


def _noise_lines(sigma: dict[str, Any] | None, st: dict[str, Any]) -> list[str]:
    if sigma is None:
        return ["Noise: sizes below are in units of σ_w, the SD of one measurement within a run."]
    return [f"Noise: within-run σ = {fmt_num(st['sigma_within'])}, between-run SD "
            f"{fmt_num(st['sigma_between'])}, as given."]


def _cost_words(st: dict[str, Any]) -> str:
    return (f"cost = runs × {fmt_num(st['run_cost'])} + measurements × "
            f"{fmt_num(st['measurement_cost'])}")


def _design_lines(d: Any, known: bool, st: dict[str, Any]) -> list[str]:
    from bendwise.tui.commands.plan import _bend_words

    lof = d.lack_of_fit
    lines = [
        f"Design: {d.runs} runs × {len(d.levels)} levels ({', '.join(fmt_num(v) for v in d.levels)})"
        f" × {d.replicates} per level in each run; {d.total} measurements; "
        f"{_cost_words(st)} = {fmt_num(d.cost)}.",
        f"Bend: {_bend_words(d.shape, d.delta, d.sigma_within, known)}.",
        f"Chance of flagging it at α = {fmt_num(d.alpha)} (run shifts are blocked out):",
        f"  {'lack of fit within runs':<27} {_pct(lof.power):>5}   F({lof.df_num}, {lof.df_den}) > "
        f"{fmt_num(lof.critical_f, 3)}, λ = {fmt_num(lof.noncentrality, 3)}",
    ]
    sh = d.shape_differs
    if sh is not None:
        lines.append(
            f"  {'shape differs between runs':<27} {_pct(sh.power):>5}   F({sh.df_num}, {sh.df_den})"
            f" > {fmt_num(sh.critical_f, 3)} against F × {fmt_num(sh.noncentrality, 3)} "
            f"(cell departures SD {fmt_num(st['interaction_sd'])})"
        )
    if d.precision is not None:
        p = d.precision
        lines.append(
            f"x̂ from the mean of {p.new_readings} reading(s) in a new run, slope "
            f"{fmt_num(st['slope'])}: {p.level:.0%} interval (approximate; t on Satterthwaite df)"
        )
        where = " (middle of the levels)" if st["at"] is None else ""
        lines.append(f"  at x = {fmt_num(p.at)}{where}: ± {fmt_num(p.half_width, 3)}  "
                     f"(SD {fmt_num(p.sd, 3)}, {fmt_num(p.df, 3)} df)")
        lines.append("  at each level: " + ", ".join(
            f"{fmt_num(q.at)} ± {fmt_num(q.half_width, 3)}" for q in d.precision_by_level))
    return lines


def _search_lines(s: Any, span: tuple[int, int], mid: float) -> list[str]:
    reps = sorted({r.replicates for r in s.rows})
    goals = []
    if s.target_power is not None:
        goals.append(f"power ≥ {s.target_power:.0%} for lack of fit within runs")
    if s.target_half_width is not None:
        goals.append(f"x̂ half-width ≤ {fmt_num(s.target_half_width)} at x = {fmt_num(mid)}")
    lines = [
        f"Search: {span[0]}–{span[1]} runs × {reps[0]}–{reps[-1]} per level in each run, levels "
        f"{', '.join(fmt_num(v) for v in s.levels)}.",
        f"  goal: {' and '.join(goals)}; cost = runs × {fmt_num(s.run_cost)} + measurements × "
        f"{fmt_num(s.measurement_cost)}.",
    ]
    if not s.best:
        lines.append(f"  no design in the search meets {'every goal' if len(goals) > 1 else 'the goal'};"
                     " widen --runs LO,HI or relax the target.")
        return lines
    lines.append(f"Cheapest designs meeting {'every goal' if len(goals) > 1 else 'the goal'}:")
    head = f"  {'runs':>4}  {'per level':>9}  {'measurements':>12}  {'cost':>8}"
    if s.target_power is not None:
        head += f"  {'power':>5}"
    if s.target_half_width is not None:
        head += f"  {'x̂ ±':>7}"
    lines.append(head)
    for c in s.best:
        row = f"  {c.runs:>4}  {c.replicates:>9}  {c.total:>12}  {fmt_num(c.cost):>8}"
        if c.power is not None:
            row += f"  {_pct(c.power):>5}"
        if c.half_width is not None:
            row += f"  {fmt_num(c.half_width, 3):>7}"
        lines.append(row)
    return lines
