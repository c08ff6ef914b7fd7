"""``bendwise apply``: use a handed-on model on new data (predictions, or x from a response)."""

from __future__ import annotations

import argparse
import math
from pathlib import Path
from typing import Any

from ..output import fmt_num
from .common import CAUTION, add_engine_args, delimiter_arg, engine_for, progress_line, table


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
    add_engine_args(p, "how NEWDATA is read: whole into memory, or in batches of rows by DuckDB or Spark, "
                    "which also read a folder or glob of Parquet/CSV files")
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


def _compute(args: argparse.Namespace, model: Any, frame: Any, held: dict[str, str], first_row: int = 1,
             more_bad: Any = None) -> tuple[list[dict[str, Any]], str]:
    """Rows of results for one table (or one batch of it, its first row numbered ``first_row``):
    x̂ from responses (``--inverse``) or y from x; and what the confidence interval covers."""
    from bendwise.engine.handon.inverse import inverse_predict
    from bendwise.engine.handon.predict import new_inputs, predict_forward

    if args.inverse:
        inp = new_inputs(model, frame, "y", held, first_row=first_row, more_bad=more_bad)
        results = inverse_predict(model, inp.values, replicates=args.replicates, covs=inp.covs,
                                  level=args.level, user_w=inp.user_w)
        rows = []
        for i, r in enumerate(results):
            row = {"row": i + first_row, **r.as_json()}
            for name, vals in inp.cov_text.items():
                row[name] = vals[i]
            rows.append(row)
        return rows, ""
    inp = new_inputs(model, frame, "x", held, first_row=first_row, more_bad=more_bad)
    pred = predict_forward(model, inp.values, inp.covs, level=args.level, user_w=inp.user_w)
    rows = pred.rows(inp.cov_text)
    if first_row != 1:
        for row in rows:
            row["row"] += first_row - 1
    return rows, pred.ci_of


class _Digest:
    """What the text report needs of every row, kept while the rows stream past: the first
    :data:`SHOWN` rows, the count, the notes and whether any row is outside the range or has an
    interval that is not finite."""

    def __init__(self) -> None:
        self.head: list[dict[str, Any]] = []
        self.total = 0
        self.notes: set[str] = set()
        self.outside = False
        self.unbounded = False
        self.ci_of = ""

    def add(self, rows: list[dict[str, Any]]) -> None:
        """Take in one batch of rows."""
        self.head += rows[:max(0, SHOWN - len(self.head))]
        self.total += len(rows)
        self.notes |= {r["note"] for r in rows if r.get("note")}
        self.outside = self.outside or any(r["outside_range"] for r in rows)
        self.unbounded = self.unbounded or any(r["interval"] not in ("finite", "overflow") for r in rows if "interval" in r)


SHOWN = 200
"""Rows the text report lists (the rest go to -o or --json)."""


class _JsonRows:
    """The JSON object of ``apply --json`` written row by row into ``fh``, byte for byte what
    :func:`emit_json` prints for the whole object (the rows as its "rows" list)."""

    MARK = "\x00rows\x00"

    def __init__(self, fh: Any, head: dict[str, Any]) -> None:
        import json

        from ..output import _clean

        self.fh = fh
        text = json.dumps(_clean({**head, "rows": [self.MARK], "caution": CAUTION}), indent=2, allow_nan=False)
        mark = "    " + json.dumps(self.MARK)
        self.before, self.after = text.split(mark)
        self.count = 0

    def write(self, rows: list[dict[str, Any]]) -> None:
        """Append ``rows`` to the list."""
        import json

        from ..output import _clean

        for r in rows:
            body = json.dumps(_clean(r), indent=2, allow_nan=False).replace("\n", "\n    ")
            self.fh.write((self.before if self.count == 0 else ",\n") + "    " + body)
            self.count += 1

    def close(self) -> None:
        """End the list and the object."""
        self.fh.write((self.before if self.count == 0 else "") + self.after + "\n")


def _batches(args: argparse.Namespace) -> Any:
    """(first row number, frame, counter of unusable numbers further on) for NEWDATA: the whole
    table in memory, or batches of rows read by DuckDB or Spark (``--engine``)."""
    from bendwise.engine import load_table
    from bendwise.engine.errors import UsageError

    engine_name = engine_for(args, args.newdata)
    delim = delimiter_arg(args.delimiter)
    if engine_name == "memory":
        yield 1, load_table(args.newdata, sheet=args.sheet, decimal=args.decimal, delimiter=delim), None
        return
    from bendwise.engine.backends.batches import table_batches
    from bendwise.engine.handon.predict import unusable_numbers

    if args.sheet is not None:
        raise UsageError("--sheet applies to Excel workbooks, which are read in memory: use --engine memory")
    frames = table_batches(args.newdata, engine_name, decimal=args.decimal, delimiter=delim,
                           master=getattr(args, "spark_master", None), progress=progress_line(args))
    first = 1
    for frame in frames:
        def more_bad(col: str, rest: Any = frames) -> int:
            return sum(int(unusable_numbers(f[col], col)[1].sum()) for f in rest)

        yield first, frame, more_bad
        first += frame.shape[0]


def run(args: argparse.Namespace) -> int:
    """Load, check, compute, print: the rows pass batch by batch to the outputs (-o, --json) and
    to the text report's digest, so a large NEWDATA read by DuckDB or Spark is never held whole."""
    import contextlib
    import sys
    import tempfile

    from bendwise.engine.errors import UsageError
    from bendwise.engine.handon.export import RowsCsv, atomic_text_file
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
    label = doc.get("node", {}).get("label", "") if isinstance(doc.get("node"), dict) else ""
    held = _held(args.hold)
    head = {"mode": "inverse" if args.inverse else "forward", "model": label, "level": args.level,
            "replicates": args.replicates if args.inverse else None, **({"held": held} if held else {}),
            **({"runs": {"run": args.run, "note": runs_note, "df": model.df_resid}} if runs_note else {})}
    digest = _Digest()
    with contextlib.ExitStack() as stack:
        out = RowsCsv(stack.enter_context(atomic_text_file(args.out, force=args.force))) if args.out else None
        js = _JsonRows(stack.enter_context(tempfile.TemporaryFile("w+", encoding="utf-8")), head) if args.json else None
        for first_row, frame, more_bad in _batches(args):
            rows, digest.ci_of = _compute(args, model, frame, held, first_row, more_bad)
            digest.add(rows)
            for sink in (out, js):
                if sink is not None:
                    sink.write(rows)
        if js is not None:
            js.close()
            js.fh.seek(0)
            while chunk := js.fh.read(1 << 20):
                sys.stdout.write(chunk)
            return 0
    text = _render_inverse(model, digest, args.level, label) if args.inverse else \
        _render_forward(model, digest, args.level, label, digest.ci_of)
    if runs_note:
        text.insert(1, "  " + runs_note)
    if held:
        text.insert(1, "  held for every row: " + ", ".join(f"{k} = {v}" for k, v in held.items())
                    + ("; 'average' is the average curve over the categories, without a new category's own shift"
                       if any(v.casefold() == "average" for v in held.values()) else ""))
    if args.out:
        text.append(f"wrote {digest.total} row(s) to {Path(args.out)}")
    print("\n".join(text))
    return 0


def _iv(lo, hi) -> str:
    a = "−∞" if lo is None else fmt_num(lo, 5)
    b = "∞" if hi is None else fmt_num(hi, 5)
    return f"{a} … {b}"


def _render_forward(model, digest: _Digest, level: float, label: str, ci_of: str) -> list[str]:
    pct = f"{level * 100:g}%"
    out = [f"bendwise apply · {label}", f"  {digest.total} row(s); {pct} intervals; calibrated {model.predictor_name} "
           f"{fmt_num(model.x_min, 6)} … {fmt_num(model.x_max, 6)}"]
    transformed = not model.response.is_identity
    names = [c.name for c in model.covariates]
    header = [model.predictor_name, *names, "mean" if not transformed else "mean (smearing)"]
    if transformed:
        header.append("median")
    header += [f"CI ({ci_of})", "prediction interval", "range"]
    body = []
    for r in digest.head:
        line = [fmt_num(r["x"], 6), *[str(r[n]) for n in names], fmt_num(r["fit"], 6)]
        if transformed:
            line.append(fmt_num(r["median"], 6))
        blank = r.get("flag") in ("no back-transform", "overflow", "underflow")  # no number, not an open end
        line += ["—" if blank else _iv(r["ci_low"], r["ci_high"]), "—" if blank else _iv(r["pi_low"], r["pi_high"]),
                 "OUTSIDE" if r["outside_range"] else "inside"]
        body.append(line)
    out += table(body, header, right=set(range(len(header))) - {len(header) - 1})
    if digest.total > SHOWN:
        out.append(f"  … {digest.total - SHOWN} more row(s): use -o or --json")
    out += [f"  note: {n}" for n in sorted(digest.notes)]
    if digest.outside:
        out.append("  OUTSIDE: x beyond the calibrated range — an extrapolation the data do not support")
    out += ["", CAUTION]
    return out


def _render_inverse(model, digest: _Digest, level: float, label: str) -> list[str]:
    pct = f"{level * 100:g}%"
    rows = digest.head
    out = [f"bendwise apply --inverse · {label}",
           f"  {digest.total} response value(s), each a mean of {rows[0]['replicates'] if rows else 1} reading(s); "
           f"{pct} Fieller-type sets for {model.predictor_name}"]
    names = [c.name for c in model.covariates]
    line_model = model.is_line
    header = [model.response_name, *names, f"{model.predictor_name} estimate"]
    if line_model:
        header.append("s_x0")
    header += ["set", "kind", "range"]
    body = []
    for r in rows:
        pieces = r["pieces"]
        shown = " ∪ ".join(_iv(a, b) for a, b in pieces) if pieces else ("—" if r.get("flag") else "empty")
        rng = "—" if r["outside_range"] is None else ("OUTSIDE" if r["outside_range"] else "inside")
        line = [fmt_num(r["y"], 6), *[str(r[n]) for n in names], fmt_num(r["x"], 6)]
        if line_model:
            line.append(fmt_num(r["s_x0"], 4))
        line += [shown, r["interval"], rng]
        body.append(line)
    out += table(body, header, right={0, *range(1 + len(names), 2 + len(names) + int(line_model))})
    if digest.total > SHOWN:
        out.append(f"  … {digest.total - SHOWN} more row(s): use -o or --json")
    out += [f"  note: {n}" for n in sorted(digest.notes)]
    if digest.unbounded:
        out.append("  a set that is not a finite interval means the calibration cannot pin x down there")
    g = rows[0].get("g") if rows else None
    if g is not None and math.isfinite(g):
        out.append(f"  g = t²·Var(slope)/slope² = {fmt_num(g, 3)} (finite intervals need g < 1)")
    out += ["", CAUTION]
    return out
