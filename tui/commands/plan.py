"""``bendwise plan``: how likely is the next run to show a bend, and how many measurements it needs.

Values are read as text and checked here, so a bad number is reported like any other engine
refusal (one line, exit 2) rather than by argparse.
"""

from __future__ import annotations

import argparse
import math
from typing import Any

from bendwise.engine.errors import UsageError
from bendwise.tui.output import emit_json, fmt_num

_TEST_LABELS = {
    "lack_of_fit": "lack of fit vs pure error",
    "curvature": "curvature (x² term, 1 df)",
}


def register(subparsers: Any) -> None:
    """Add the ``plan`` subcommand."""
    p = subparsers.add_parser(
        "plan",
        help="power of the lack-of-fit tests for a planned design; find the cheapest design",
        description=(
            "Before measuring: the chance that the lack-of-fit test and the x² test will flag a "
            "bend of a given size, for a design of levels × replicates. With --target-power, "
            "try 2-10 replicates (and 4-12 levels over --range) and pick the cheapest design."
        ),
    )
    design = p.add_argument_group("design")
    design.add_argument(
        "--levels",
        metavar="LIST|N",
        help="the x settings, e.g. 0,5,10,20,40; or a count N spread over --range",
    )
    design.add_argument("--range", metavar="LO,HI", help="span for N equally spaced levels")
    design.add_argument(
        "--replicates",
        metavar="R",
        help="observations per level: one count, or one per level (2,3,3,2)",
    )
    bend = p.add_argument_group("bend to detect")
    bend.add_argument("--delta", metavar="D", help="largest departure from a line, y units")
    bend.add_argument("--delta-sd", metavar="K", help="largest departure in units of σ")
    bend.add_argument(
        "--means",
        metavar="LIST",
        help="true mean at each listed level instead of a quadratic bend",
    )
    noise = p.add_argument_group("noise")
    noise.add_argument("--sigma", metavar="S", help="SD of a single measurement")
    noise.add_argument("--from-data", metavar="FILE", help="take σ from the pure error in FILE")
    noise.add_argument(
        "-y", "--response", metavar="COL", dest="y", help="response column in --from-data"
    )
    noise.add_argument(
        "-x", "--predictor", metavar="COL", dest="x", help="setting column in --from-data"
    )
    noise.add_argument(
        "--sigma-upper",
        metavar="CONF",
        help="plan with the one-sided CONF upper bound for σ (e.g. 0.9) instead of the estimate",
    )
    p.add_argument("--alpha", metavar="A", default="0.05", help="significance level (0.05)")
    p.add_argument(
        "--target-power", metavar="P", help="search for the cheapest design reaching power P"
    )
    p.add_argument("--json", action="store_true", help="print one JSON object")
    from bendwise.tui.commands.plan_runs import add_options

    add_options(p)
    p.set_defaults(func=run)


# ---------------------------------------------------------------- parsing


def _number(option: str, text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise UsageError(f"{option}: {text!r} is not a number") from None
    if not math.isfinite(v):
        raise UsageError(f"{option}: {text!r} is not a finite number")
    return v


def _numbers(option: str, text: str) -> list[float]:
    parts = [t.strip() for t in text.split(",")]
    if any(not t for t in parts):
        raise UsageError(
            f"{option}: {text!r} has an empty entry; separate numbers by single commas"
        )
    return [_number(option, t) for t in parts]


def _count(option: str, text: str) -> int:
    v = _number(option, text)
    if v != math.floor(v):
        raise UsageError(f"{option}: {text!r} is not a whole number")
    return int(v)


def _levels(args: argparse.Namespace) -> tuple[list[float] | None, tuple[float, float] | None]:
    """(fixed levels, None) or (spaced levels or None, (lo, hi))."""
    from bendwise.engine.plan.power import spaced_levels

    span = None
    if args.range is not None:
        bounds = _numbers("--range", args.range)
        if len(bounds) != 2:
            raise UsageError(f"--range: {args.range!r} needs two numbers, LO,HI")
        span = (bounds[0], bounds[1])
    if args.levels is None:
        if span is None:
            raise UsageError("--levels: not given; list the levels (0,5,10) or give N and --range")
        return None, span
    if "," not in args.levels:
        if span is None:
            raise UsageError(
                f"--levels: {args.levels!r} is one value; list the levels (0,5,10) "
                "or add --range LO,HI to spread that many"
            )
        return list(spaced_levels(_count("--levels", args.levels), *span)), span
    if span is not None:
        raise UsageError("--range: only with --levels N; drop it or give a level count")
    return _numbers("--levels", args.levels), None


def _replicates(args: argparse.Namespace) -> int | list[int] | None:
    if args.replicates is None:
        return None
    counts = [_count("--replicates", t) for t in args.replicates.split(",")]
    return counts[0] if len(counts) == 1 else counts


def _sigma(args: argparse.Namespace) -> dict[str, Any] | None:
    """σ and where it came from, or None when the plan is in σ units only."""
    from bendwise.engine.plan.power import sigma_from_pure_error

    if args.sigma is not None and args.from_data is not None:
        raise UsageError("--sigma: give it or --from-data, not both")
    if args.sigma_upper is not None and args.from_data is None:
        raise UsageError("--sigma-upper: needs --from-data (a bound comes from estimated σ)")
    if args.from_data is None and (args.y is not None or args.x is not None):
        raise UsageError("-y/-x: only with --from-data FILE")
    if args.sigma is not None:
        s = _number("--sigma", args.sigma)
        if s <= 0:
            raise UsageError(f"--sigma: {args.sigma!r} is not above 0; give the measurement SD")
        return {"value": s, "source": "given"}
    if args.from_data is None:
        return None
    if args.y is None or args.x is None:
        raise UsageError("--from-data: name the columns with -y COL and -x COL")
    from pathlib import Path

    from bendwise.engine import load_table, make_study, pure_error

    frame = load_table(args.from_data)
    study = make_study(frame, y=args.y, x=args.x, source=Path(args.from_data).name)
    ss_pure, df_pure = pure_error(study)
    conf = None if args.sigma_upper is None else _number("--sigma-upper", args.sigma_upper)
    est = sigma_from_pure_error(ss_pure, df_pure, conf)
    return {
        "value": est.sigma,
        "source": "upper bound" if est.upper is not None else "pure error",
        "estimate": est.estimate,
        "upper": est.upper,
        "confidence": est.confidence,
        "df": est.df,
        "file": args.from_data,
    }


# ---------------------------------------------------------------- run


def run(args: argparse.Namespace) -> int:
    """Compute and print the plan; returns 0.

    Long because the options are checked in the order the error messages promise before either
    output (JSON or text) is written."""
    from bendwise.engine.plan.power import design_power, search_designs

    levels, span = _levels(args)
    reps = _replicates(args)
    alpha = _number("--alpha", args.alpha)
    target = None if args.target_power is None else _number("--target-power", args.target_power)
    means = None if args.means is None else _numbers("--means", args.means)
    if means is not None and span is not None:
        raise UsageError("--means: needs listed levels, not --range")
    if args.delta is not None and args.delta_sd is not None:
        raise UsageError("--delta: give it or --delta-sd, not both")
    if args.runs is not None:
        return _run_runs(args, levels, means, alpha, target)
    from bendwise.tui.commands.plan_runs import refuse_without_runs

    refuse_without_runs(args)
    sigma = _sigma(args)
    s = 1.0 if sigma is None else sigma["value"]
    delta = _bend(args, sigma, means)

    report: dict[str, Any] = {
        "command": "plan",
        "alpha": alpha,
        "sigma": sigma,
        "units": "y" if sigma is not None else "sigma",
    }
    single = None
    if levels is not None and reps is not None:
        counts = reps if isinstance(reps, list) else [reps]
        # one measurement per level: no pure error, but the x² test still runs
        tests = ("curvature",) if all(r == 1 for r in counts) else ("lack_of_fit", "curvature")
        single = design_power(
            levels, reps, delta=delta, means=means, sigma=s, alpha=alpha, tests=tests
        )
        report["design"] = _design_json(single)
    search = None
    if target is not None:
        fixed = span is None
        search = search_designs(
            levels=levels if fixed else None,
            span=None if fixed else span,
            delta=delta,
            means=means,
            sigma=s,
            alpha=alpha,
            target=target,
        )
        report["search"] = _search_json(search)
    elif single is None:
        raise UsageError("--replicates: not given; say how many observations per level")

    if args.json:
        emit_json(report)
        return 0
    known = sigma is not None
    lines = _sigma_lines(sigma)
    if single is not None:
        lines += _design_lines(single, known)
    if search is not None:
        if single is not None:
            lines.append("")
        lines += _search_lines(search, known)
    print("\n".join(line.rstrip() for line in lines))
    return 0


def _bend(args: argparse.Namespace, sigma: dict[str, Any] | None, means: list[float] | None,
          required: bool = True) -> float | None:
    """The bend size in y units (σ units when σ is unknown); None when ``means`` set it.

    When ``required`` is False and no bend is stated, None too (a plan for precision only).
    """
    s = 1.0 if sigma is None else sigma["value"]
    if args.delta is not None:
        if sigma is None:
            raise UsageError("--delta: in y units needs --sigma or --from-data; or use --delta-sd")
        return _number("--delta", args.delta)
    if args.delta_sd is not None:
        return _number("--delta-sd", args.delta_sd) * s
    if means is not None:
        if sigma is None:
            raise UsageError("--means: in y units needs --sigma or --from-data")
        return None
    if required:
        raise UsageError("--delta: not given; state the bend with --delta, --delta-sd or --means")
    return None


def _run_runs(args: argparse.Namespace, levels: list[float] | None, means: list[float] | None,
              alpha: float, target: float | None) -> int:
    """Hand a ``--runs`` plan over to plan_runs, with σ and the bend read as for one run."""
    from bendwise.tui.commands.plan_runs import run_runs

    if args.from_data is not None:
        raise UsageError("--from-data: not with --runs; give --sigma (the within-run SD) and "
                         "--between-sd, e.g. from bendwise check --runs")
    sigma = _sigma(args)
    needs_bend = target is not None or args.target_halfwidth is None
    delta = _bend(args, sigma, means, required=needs_bend)
    return run_runs(args, levels=levels, delta=delta, means=means, sigma=sigma, alpha=alpha,
                    target=target)


# ---------------------------------------------------------------- JSON


def _test_json(tp: Any) -> dict[str, Any] | None:
    if tp is None:
        return None
    return {
        "df": [tp.df_num, tp.df_den],
        "noncentrality": tp.noncentrality,
        "denominator_noncentrality": tp.den_noncentrality,
        "critical_f": tp.critical_f,
        "power": tp.power,
    }


def _design_json(dp: Any) -> dict[str, Any]:
    return {
        "levels": list(dp.levels),
        "replicates": list(dp.replicates),
        "total": dp.total,
        "shape": dp.shape,
        "delta": dp.delta,
        "delta_sd": dp.delta / dp.sigma,
        "deviations": list(dp.deviations),
        "lack_of_fit": _test_json(dp.lack_of_fit),
        "curvature": _test_json(dp.curvature),
    }


def _choice_json(ch: Any, sigma: float) -> dict[str, Any] | None:
    if ch is None:
        return None
    dd = ch.detectable_delta
    return {
        "levels": list(ch.design.levels),
        "replicates": ch.design.replicates,
        "total": ch.design.total,
        "power": ch.power,
        "detectable_delta": dd,
        "detectable_delta_sd": None if dd is None else dd / sigma,
    }


def _search_json(ps: Any) -> dict[str, Any]:
    return {
        "target_power": ps.target,
        "shape": ps.shape,
        "delta": ps.delta,
        "delta_sd": ps.delta / ps.sigma,
        "fixed_levels": ps.fixed_levels,
        "designs": [
            {
                "levels": len(r.levels),
                "replicates": r.replicates,
                "total": r.total,
                "power_lack_of_fit": r.power_lack_of_fit,
                "power_curvature": r.power_curvature,
            }
            for r in ps.rows
        ],
        "cheapest_lack_of_fit": _choice_json(ps.lack_of_fit, ps.sigma),
        "cheapest_curvature": _choice_json(ps.curvature, ps.sigma),
    }


# ---------------------------------------------------------------- text


def _size(value: float, sigma: float, known: bool) -> str:
    if known:
        return f"{fmt_num(value)} ({fmt_num(value / sigma, 3)} σ)"
    return f"{fmt_num(value / sigma, 3)} σ"


def _sigma_lines(sigma: dict[str, Any] | None) -> list[str]:
    if sigma is None:
        return ["Noise: sizes below are in units of σ, the SD of one measurement."]
    if sigma["source"] == "given":
        return [f"Noise: σ = {fmt_num(sigma['value'])} as given."]
    line = (
        f"Noise: σ estimated from the repeats in {sigma['file']}: {fmt_num(sigma['estimate'])} "
        f"on {sigma['df']} df"
    )
    if sigma["upper"] is not None:
        line += (
            f"; planning with its {sigma['confidence']:.0%} upper bound {fmt_num(sigma['upper'])}"
        )
    return [line + "."]


def _bend_words(shape: str, delta: float, sigma: float, known: bool) -> str:
    what = "a quadratic bend" if shape == "quadratic" else "the stated true means"
    return f"{what}, at most {_size(delta, sigma, known)} away from the best straight line"


def _pct(p: float) -> str:
    """Whole percent, rounded down so a power just short of the target never reads as reaching it."""
    if p >= 0.995:
        return ">99%"
    if p < 0.01:
        return "<1%"
    return f"{math.floor(p * 100 + 1e-9)}%"


def _design_lines(dp: Any, known: bool) -> list[str]:
    reps = set(dp.replicates)
    rep_words = f"{dp.replicates[0]} each" if len(reps) == 1 else ",".join(map(str, dp.replicates))
    lines = [
        f"Design: {len(dp.levels)} levels ({', '.join(fmt_num(v) for v in dp.levels)}), "
        f"replicates {rep_words}; {dp.total} measurements.",
        f"Bend: {_bend_words(dp.shape, dp.delta, dp.sigma, known)}.",
        f"Chance of flagging it at α = {fmt_num(dp.alpha)}:",
    ]
    if dp.lack_of_fit is None:
        lines.append(
            f"  {_TEST_LABELS['lack_of_fit']:<27}   —     no level is repeated, so there is "
            "no pure error to test against"
        )
    for tp in (dp.lack_of_fit, dp.curvature):
        if tp is None:
            continue
        lines.append(
            f"  {_TEST_LABELS[tp.test]:<27} {_pct(tp.power):>5}"
            f"   F({tp.df_num}, {tp.df_den}) > {fmt_num(tp.critical_f, 3)}, "
            f"λ = {fmt_num(tp.noncentrality, 3)}"
        )
    if dp.curvature.den_noncentrality > 0:
        lines.append(
            "  (the curve is not a pure quadratic: part of it stays in the x² test's residual)"
        )
    return lines


def _cell(p: float, target: float) -> str:
    return f"{_pct(p)}{'*' if p >= target else ' '}"


def _search_lines(ps: Any, known: bool) -> list[str]:
    lines = [
        f"Search: designs reaching {ps.target:.0%} power at α = {fmt_num(ps.alpha)} against",
        f"  {_bend_words(ps.shape, ps.delta, ps.sigma, known)}.",
    ]
    if ps.fixed_levels:
        lines.append(
            f"Levels fixed at {', '.join(fmt_num(v) for v in ps.rows[0].levels)}; "
            "* marks power at or above the target."
        )
        lines.append(f"  {'per level':>9}  {'total':>5}  {'lack of fit':>11}  {'curvature':>9}")
        for r in ps.rows:
            lines.append(
                f"  {r.replicates:>9}  {r.total:>5}  "
                f"{_cell(r.power_lack_of_fit, ps.target):>11}  "
                f"{_cell(r.power_curvature, ps.target):>9}"
            )
    else:
        lo, hi = ps.rows[0].levels[0], ps.rows[0].levels[-1]
        counts = sorted({r.replicates for r in ps.rows})
        lines.append(
            f"Levels evenly spaced over {fmt_num(lo)}..{fmt_num(hi)}; rows: levels, "
            "columns: replicates per level; * marks power at or above the target."
        )
        for test, attr in (("lack_of_fit", "power_lack_of_fit"), ("curvature", "power_curvature")):
            lines.append(f"  {_TEST_LABELS[test]}")
            lines.append("  lvls " + "".join(f"{c:>6}" for c in counts))
            by_count: dict[int, list[Any]] = {}
            for r in ps.rows:
                by_count.setdefault(len(r.levels), []).append(r)
            for n_lv, rs in by_count.items():
                cells = "".join(f"{_cell(getattr(r, attr), ps.target):>6}" for r in rs)
                lines.append(f"  {n_lv:>4} {cells}")
    lines.append("Cheapest design (fewest measurements):")
    for ch, test in ((ps.lack_of_fit, "lack_of_fit"), (ps.curvature, "curvature")):
        label = _TEST_LABELS[test]
        if ch is None:
            lines.append(f"  {label}: no design in the search reaches {ps.target:.0%}.")
            continue
        d = ch.design
        lines.append(
            f"  {label}: {len(d.levels)} levels × {d.replicates} = {d.total} measurements, "
            f"power {_pct(ch.power)}"
        )
        if ch.detectable_delta is None:
            lines.append(f"    no bend of this shape reaches {ps.target:.0%} there.")
        else:
            lines.append(
                f"    smallest bend it catches with {ps.target:.0%} power: "
                f"{_size(ch.detectable_delta, ps.sigma, known)}"
            )
    return lines
