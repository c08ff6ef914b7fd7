"""``bendwise confirm``: test an exported model on an independent run, with no search at all."""

from __future__ import annotations

import argparse

from ..output import emit_json
from .common import add_engine_args, delimiter_arg, engine_for, sql_study


def _alpha(text: str) -> float:
    try:
        val = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"alpha {text!r} is not a number; give e.g. 0.05") from None
    if not 0 < val < 1:
        raise argparse.ArgumentTypeError(f"alpha {text!r} must lie strictly between 0 and 1, e.g. 0.05")
    return val


def _deviation(text: str) -> float:
    try:
        val = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"allowable deviation {text!r} is not a number (y units)") from None
    if not val > 0 or val == float("inf"):
        raise argparse.ArgumentTypeError(f"allowable deviation {text!r} must be a finite number > 0 (y units)")
    return val


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``confirm`` subcommand."""
    p = sub.add_parser(
        "confirm",
        help="test an exported model on a new, independent run (form and curve)",
        description="Read SPEC (spec.json from bendwise export, or its folder) and DATA, a new run with the same "
        "columns. The frozen form is refitted and its lack of fit tested (form), and the new settings are tested "
        "against the exported curve itself (transfer). No search runs, so these p-values are honest. Exit 0; "
        "with --strict 1 when the model is not confirmed; 2 for bad input.",
    )
    p.add_argument("spec", metavar="SPEC", help="spec.json written by bendwise export (or the export folder)")
    p.add_argument("data", metavar="DATA", help="the new run: the model's response, predictor and covariates; - for stdin")
    p.add_argument("--alpha", type=_alpha, default=0.05, help="level of both tests (default 0.05)")
    p.add_argument("--allowable-deviation", type=_deviation, metavar="D",
                   help="largest acceptable departure of a setting's mean from the exported curve, in y units")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--strict", action="store_true", help="exit 1 unless the verdict is 'confirmed'")
    p.add_argument("--sheet", metavar="NAME", help="Excel sheet of DATA (default: the first)")
    p.add_argument("--decimal", choices=[".", ","], help="decimal mark of DATA (default .)")
    p.add_argument("--delimiter", metavar="CHAR", help="field separator of DATA (default: detected)")
    add_engine_args(p, "where the new run's group totals are computed: in memory, by DuckDB over the files, "
                    "or by Spark; DATA may then be a folder or glob of Parquet/CSV files")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Load the spec and the new run, test, print."""
    from bendwise.engine import load_table
    from bendwise.engine.errors import UsageError
    from bendwise.engine.handon.confirm import confirm, group_route_problem, study_columns
    from bendwise.engine.handon.specfile import load_spec

    doc, model = load_spec(args.spec)
    source = "<stdin>" if args.data == "-" else str(args.data).rstrip("/").rsplit("/", 1)[-1]
    engine_name = engine_for(args, args.data)
    if engine_name in ("duckdb", "spark"):
        problem = group_route_problem(model)
        if problem:  # before DuckDB or Spark reads anything
            raise UsageError(problem)
        study = sql_study(args, engine_name, args.data, study_columns(model), source=source)
        result = confirm(doc, model, study=study, alpha=args.alpha, allowable_deviation=args.allowable_deviation)
    else:
        frame = load_table(args.data, sheet=args.sheet, decimal=args.decimal, delimiter=delimiter_arg(args.delimiter))
        result = confirm(doc, model, frame, alpha=args.alpha, allowable_deviation=args.allowable_deviation,
                         source=source)
    if args.json:
        emit_json(result.to_dict())
    else:
        print("\n".join(result.summary()))
    return 1 if args.strict and not result.confirmed else 0
