"""``check --runs COL`` and ``check --limits``: calibrations over several runs, and detection limits.

Not a subcommand of its own: ``check`` registers these options and calls in here only when one of
them is given, so ``check`` without them prints exactly what it printed before.
"""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from ..output import fmt_num, fmt_p
from .common import table

__all__ = ["add_runs_args", "load_study_with_runs", "extras", "render_extras"]


def add_runs_args(p: argparse.ArgumentParser) -> None:
    """The two options ``check`` gains."""
    p.add_argument("--runs", metavar="COL",
                   help="column naming the run (day, batch, instrument): adds lack of fit within runs and "
                   "between-/within-run standard deviations")
    p.add_argument("--limits", action="store_true",
                   help="add detection and quantitation limits (ICH Q2 forms and Hubaux–Vos); with --runs also "
                   "for a new run")


def load_study_with_runs(args: argparse.Namespace):
    """Read the table in memory, check the runs column, and build the study with it attached."""
    from bendwise.engine import load_table, make_study
    from bendwise.engine.backends.duckdb import choose_engine
    from bendwise.engine.checks.runs import validate_runs_column
    from bendwise.engine.errors import UsageError

    from .common import _tell_cleaning, parse_size, split_list

    if choose_engine(args.data, args.engine, parse_size(args.memory_cap)) in ("duckdb", "spark"):
        raise UsageError("--runs reads the table in memory: give one file and --engine memory")
    delim = "\t" if args.delimiter in {"\\t", "tab", "TAB"} else args.delimiter
    frame = load_table(args.data, sheet=args.sheet, decimal=args.decimal, delimiter=delim)
    column = validate_runs_column(frame, args.runs, args.y, args.x)
    source = "<stdin>" if args.data == "-" else Path(args.data).name
    study = make_study(frame, y=args.y, x=args.x, covariates=[column, *split_list(getattr(args, "covariates", ""))],
                       weights=args.weights, tolerance=args.tolerance, source=source)
    args.runs = column
    return _tell_cleaning(study, list(frame.attrs.get("read_notes", [])))


def extras(study, args: argparse.Namespace) -> tuple[Any, Any]:
    """(runs result, limits report) for the options given; None for those not asked."""
    from bendwise.engine.checks.limits import LimitsReport, limits_one_run, limits_with_runs
    from bendwise.engine.checks.runs import check_runs, run_factor

    runs = check_runs(study, args.runs) if args.runs else None
    limits = None
    if args.limits:
        from bendwise.engine.stats.rows import NoRows

        if isinstance(study.rows(), NoRows):
            from bendwise.engine.errors import UsageError

            raise UsageError("--limits needs the rows in memory: use --engine memory")
        one = limits_one_run(study.x, study.y)
        with_runs = None
        if runs is not None:
            with_runs = limits_with_runs(study.x, study.y, run_factor(study, args.runs), runs)
        limits = LimitsReport(0.05, 0.05, one, with_runs)
    return runs, limits


def render_extras(runs, limits, x_name: str, alpha: float) -> list[str]:
    """Text sections for --runs and --limits (our own wording)."""
    out: list[str] = []
    if runs is not None:
        out += _render_runs(runs, alpha)
    if limits is not None:
        out += _render_limits(limits, x_name)
    return out


def _test_line(name: str, t, alpha: float) -> str:
    if not t.testable:
        return f"  {name}: not testable — {t.reason}"
    word = "yes" if t.p < alpha else "no evidence"
    return f"  {name}: F = {fmt_num(t.f, 4)} on {t.df_lack} and {t.df_pure} df, p {fmt_p(t.p)} — {word} at {alpha:g}"


def _render_runs(r, alpha: float) -> list[str]:
    p = r.parts
    lo, hi = p.interval
    out = ["", f"Runs  ({r.column}: {r.count} runs, {r.cells} run × level cells"
           + (f", {r.empty_cells} empty" if r.empty_cells else "") + ")"]
    rows = [[label, fmt_num(m, 6)] for label, m in zip(r.labels, r.run_means, strict=True)]
    out += table(rows, [r.column, "mean response"])
    out.append(f"  between-run SD {fmt_num(p.between_sd, 4)}   (95% interval {fmt_num(lo, 4)} … "
               f"{fmt_num(hi, 4) if hi is not None else 'unbounded'})")
    out.append(f"  within-run SD  {fmt_num(p.within_sd, 4)}")
    out.append(f"  line (REML, run offsets random): b0 {fmt_num(p.intercept, 6)}   b1 {fmt_num(p.slope, 6)}")
    out.append(f"  ({p.method}; interval: {p.interval_method})")
    out.append("  the lack-of-fit test above counts run-to-run shifts as pure error; this one compares within runs:")
    out.append(_test_line("does the line miss the level means within runs", r.lack_of_fit, alpha))
    if r.lack_of_fit.testable:
        out.append(f"    (line + run offsets against run + level means; error: {r.lack_of_fit.kind.split(';')[0]})")
    out.append(_test_line("does the curve's shape differ between runs", r.shape_differs, alpha))
    return out


def _render_limits(lim, x_name: str) -> list[str]:
    out = ["", f"Limits in units of {x_name}  (α = {lim.alpha:g} false positive, β = {lim.beta:g} false negative)"]
    rows = []
    for lm in (lim.one_run, lim.with_runs):
        if lm is None:
            continue
        tag = "as one run" if lm is lim.one_run else "new run"
        rows.append([tag, "3.3σ/b1, 10σ/b1 (σ = residual SD)", fmt_num(lm.lod_residual, 4), fmt_num(lm.loq_residual, 4)])
        rows.append([tag, "3.3σ/b1, 10σ/b1 (σ = intercept SD)", fmt_num(lm.lod_intercept, 4), fmt_num(lm.loq_intercept, 4)])
        rows.append([tag, "Hubaux–Vos: x_C | x_D", fmt_num(lm.x_critical, 4), fmt_num(lm.x_detection, 4)])
    out += table(rows, ["for", "form", "detection | x_C", "quantitation | x_D"], right={2, 3})
    for lm in (lim.one_run, lim.with_runs):
        if lm is None:
            continue
        out.append(f"  {lm.basis}: critical response y_C {fmt_num(lm.y_critical, 6)} on {fmt_num(lm.df, 4)} df; "
                   f"intercept SD = {lm.sigma_intercept_words}")
        if lm.note:
            out.append(f"    {lm.note}")
    out.append("  These limits are estimates from one calibration; a limit used for clinical, environmental or "
               "safety decisions comes from the laboratory's validated procedure.")
    return out
