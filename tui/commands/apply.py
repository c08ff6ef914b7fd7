"""``bendwise apply``: use a handed-on model on new data (predictions, or x from a response)."""

from __future__ import annotations

import argparse
import math
from typing import Any

from ..output import emit_json, fmt_num
from .common import CAUTION, table


def _level(text: str) -> float:
    try:
        val = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"level {text!r} is not a number; give e.g. 0.95") from None
    if not 0 < val < 1:
        raise argparse.ArgumentTypeError(f"level {text!r} must lie strictly between 0 and 1, e.g. 0.95")
    return val


def _count(text: str) -> int:
    try:
        val = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"replicates {text!r} is not a whole number; give e.g. 3") from None
    if val < 1:
        raise argparse.ArgumentTypeError(f"replicates {text!r} must be at least 1")
    return val


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``apply`` subcommand."""
    p = sub.add_parser(
        "apply",
        help="predict from an exported model, or estimate x from measured responses",
        description="Read SPEC (spec.json from bendwise export, or its folder) and NEWDATA. Without --inverse: "
        "the mean response at each x with confidence and prediction intervals. With --inverse: the x that "
        "fits each measured response, with its Fieller-type interval.",
    )
    p.add_argument("spec", metavar="SPEC", help="spec.json written by bendwise export (or the export folder)")
    p.add_argument("newdata", metavar="NEWDATA", help="table with the predictor (or, with --inverse, the response) "
                   "and any covariates the model uses; - for stdin")
    p.add_argument("-o", "--out", metavar="OUT", help="also write the rows as CSV to OUT")
    p.add_argument("--force", action="store_true", help="replace OUT if it exists")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--inverse", action="store_true", help="estimate x from response values")
    p.add_argument("--replicates", type=_count, default=1, metavar="M",
                   help="with --inverse: each response value is the mean of M readings (default 1)")
    p.add_argument("--level", type=_level, default=0.95, help="confidence level of the intervals (default 0.95)")
    p.add_argument("--hold", action="append", default=[], metavar="NAME=VALUE",
                   help="hold a covariate at one value for every row instead of reading its column: a category "
                   "the model saw, a number, or 'average' (a categorical covariate averaged over its categories "
                   "with equal weight: the average curve over, say, the calibration days; a new day's own shift "
                   "is not in the interval). Repeat for several covariates")
    p.add_argument("--run", metavar="NAME",
                   help="with a spec exported with --runs: the reading comes from this run of the calibration "
                   "(its own offset); without it, from a new run (between-run SD in the interval)")
    p.add_argument("--sheet", metavar="NAME", help="Excel sheet of NEWDATA (default: the first)")
    p.add_argument("--decimal", choices=[".", ","], help="decimal mark of NEWDATA (default .)")
    p.add_argument("--delimiter", metavar="CHAR", help="field separator of NEWDATA (default: detected)")
    p.set_defaults(func=run)


def _held(items: list[str]) -> dict[str, str]:
    """``--hold NAME=VALUE`` options as a mapping (one line when malformed or repeated)."""
    from bendwise.engine.errors import UsageError

    out: dict[str, str] = {}
    for item in items:
        name, sep, value = item.partition("=")
        if not sep or not name.strip() or not value.strip():
            raise UsageError(f"--hold {item!r}: write NAME=VALUE, e.g. --hold run_day=average")
        if name.strip() in out:
            raise UsageError(f"--hold {name.strip()} is given twice; give each covariate once")
        out[name.strip()] = value.strip()
    return out


def _compute(args: argparse.Namespace, model: Any, frame: Any, held: dict[str, str],
             label: str) -> tuple[list[dict[str, Any]], list[str]]:
    """Rows of results and the text report: x̂ from responses (``--inverse``) or y from x."""
    from bendwise.engine.handon.inverse import inverse_predict
    from bendwise.engine.handon.predict import new_inputs, predict_forward

    if args.inverse:
        inp = new_inputs(model, frame, "y", held)
        results = inverse_predict(model, inp.values, replicates=args.replicates, covs=inp.covs,
                                  level=args.level, user_w=inp.user_w)
        rows = []
        for i, r in enumerate(results):
            row = {"row": i + 1, **r.as_json()}
            for name, vals in inp.cov_text.items():
                row[name] = vals[i]
            rows.append(row)
        return rows, _render_inverse(model, rows, args.level, label)
    inp = new_inputs(model, frame, "x", held)
    pred = predict_forward(model, inp.values, inp.covs, level=args.level, user_w=inp.user_w)
    rows = pred.rows(inp.cov_text)
    return rows, _render_forward(model, rows, args.level, label, pred.ci_of)


def run(args: argparse.Namespace) -> int:
    """Load, check, compute, print."""
    from bendwise.engine import load_table
    from bendwise.engine.errors import UsageError
    from bendwise.engine.handon.export import write_rows_csv
    from bendwise.engine.handon.specfile import load_spec

    if args.replicates != 1 and not args.inverse:
        raise UsageError("--replicates applies to --inverse only (it says how many readings each response averages)")
    doc, model = load_spec(args.spec)
    runs_note = None
    from bendwise.engine.handon.runs_spec import model_for_run, read_runs

    runs = read_runs(doc, model)
    if runs is not None:
        model, runs_note = model_for_run(model, runs, args.run, args.replicates)
    elif args.run is not None:
        raise UsageError("--run needs a spec exported with --runs; this one has no runs")
    delim = "\t" if args.delimiter in {"\\t", "tab", "TAB"} else args.delimiter
    frame = load_table(args.newdata, sheet=args.sheet, decimal=args.decimal, delimiter=delim)
    label = doc.get("node", {}).get("label", "") if isinstance(doc.get("node"), dict) else ""
    held = _held(args.hold)
    rows, text = _compute(args, model, frame, held, label)
    if runs_note:
        text.insert(1, "  " + runs_note)
    if held:
        text.insert(1, "  held for every row: " + ", ".join(f"{k} = {v}" for k, v in held.items())
                    + ("; 'average' is the average curve over the categories, without a new category's own shift"
                       if any(v.casefold() == "average" for v in held.values()) else ""))
    if args.out:
        path = write_rows_csv(rows, args.out, force=args.force)
        if not args.json:
            text.append(f"wrote {len(rows)} row(s) to {path}")
    if args.json:
        emit_json({
            "mode": "inverse" if args.inverse else "forward",
            "model": label,
            "level": args.level,
            "replicates": args.replicates if args.inverse else None,
            **({"held": held} if held else {}),
            **({"runs": {"run": args.run, "note": runs_note, "df": model.df_resid}} if runs_note else {}),
            "rows": rows,
            "caution": CAUTION,
        })
    else:
        print("\n".join(text))
    return 0


def _iv(lo, hi) -> str:
    a = "−∞" if lo is None else fmt_num(lo, 5)
    b = "∞" if hi is None else fmt_num(hi, 5)
    return f"{a} … {b}"


def _render_forward(model, rows: list[dict], level: float, label: str, ci_of: str) -> list[str]:
    pct = f"{level * 100:g}%"
    out = [f"bendwise apply · {label}", f"  {len(rows)} row(s); {pct} intervals; calibrated {model.predictor_name} "
           f"{fmt_num(model.x_min, 6)} … {fmt_num(model.x_max, 6)}"]
    transformed = not model.response.is_identity
    names = [c.name for c in model.covariates]
    header = [model.predictor_name, *names, "mean" if not transformed else "mean (smearing)"]
    if transformed:
        header.append("median")
    header += [f"CI ({ci_of})", "prediction interval", "range"]
    body = []
    for r in rows[:200]:
        line = [fmt_num(r["x"], 6), *[str(r[n]) for n in names], fmt_num(r["fit"], 6)]
        if transformed:
            line.append(fmt_num(r["median"], 6))
        blank = r.get("flag") in ("no back-transform", "overflow", "underflow")  # no number, not an open end
        line += ["—" if blank else _iv(r["ci_low"], r["ci_high"]), "—" if blank else _iv(r["pi_low"], r["pi_high"]),
                 "OUTSIDE" if r["outside_range"] else "inside"]
        body.append(line)
    out += table(body, header, right=set(range(len(header))) - {len(header) - 1})
    if len(rows) > 200:
        out.append(f"  … {len(rows) - 200} more row(s): use -o or --json")
    notes = sorted({r["note"] for r in rows if r.get("note")})
    out += [f"  note: {n}" for n in notes]
    if any(r["outside_range"] for r in rows):
        out.append("  OUTSIDE: x beyond the calibrated range — an extrapolation the data do not support")
    out += ["", CAUTION]
    return out


def _render_inverse(model, rows: list[dict], level: float, label: str) -> list[str]:
    pct = f"{level * 100:g}%"
    out = [f"bendwise apply --inverse · {label}",
           f"  {len(rows)} response value(s), each a mean of {rows[0]['replicates'] if rows else 1} reading(s); "
           f"{pct} Fieller-type sets for {model.predictor_name}"]
    names = [c.name for c in model.covariates]
    line_model = model.is_line
    header = [model.response_name, *names, f"{model.predictor_name} estimate"]
    if line_model:
        header.append("s_x0")
    header += ["set", "kind", "range"]
    body = []
    for r in rows[:200]:
        pieces = r["pieces"]
        shown = " ∪ ".join(_iv(a, b) for a, b in pieces) if pieces else ("—" if r.get("flag") else "empty")
        rng = "—" if r["outside_range"] is None else ("OUTSIDE" if r["outside_range"] else "inside")
        line = [fmt_num(r["y"], 6), *[str(r[n]) for n in names], fmt_num(r["x"], 6)]
        if line_model:
            line.append(fmt_num(r["s_x0"], 4))
        line += [shown, r["interval"], rng]
        body.append(line)
    out += table(body, header, right={0, *range(1 + len(names), 2 + len(names) + int(line_model))})
    if len(rows) > 200:
        out.append(f"  … {len(rows) - 200} more row(s): use -o or --json")
    notes = sorted({r["note"] for r in rows if r.get("note")})
    out += [f"  note: {n}" for n in notes]
    if any(r["interval"] not in ("finite", "overflow") for r in rows):
        out.append("  a set that is not a finite interval means the calibration cannot pin x down there")
    g = rows[0].get("g") if rows else None
    if g is not None and math.isfinite(g):
        out.append(f"  g = t²·Var(slope)/slope² = {fmt_num(g, 3)} (finite intervals need g < 1)")
    out += ["", CAUTION]
    return out
