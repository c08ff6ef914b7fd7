"""Options and loading shared by the commands that read a table."""

from __future__ import annotations

import argparse
from pathlib import Path

from bendwise.engine.cautions import CAUTION

__all__ = ["CAUTION", "add_data_args", "alpha_arg", "split_list", "load_study", "table"]


def add_data_args(p: argparse.ArgumentParser, *, need_xy: bool = True, covariates: bool = False) -> None:
    """DATA, -y, -x and the reading options."""
    p.add_argument("data", metavar="DATA", help="table file (CSV/TSV/Parquet/Excel/JSON lines) or - for stdin")
    p.add_argument("-y", "--response", dest="y", required=need_xy, metavar="COL", help="response column")
    p.add_argument("-x", "--predictor", dest="x", required=need_xy, metavar="COL", help="predictor column")
    if covariates:
        p.add_argument("--covariates", metavar="A,B", default="", help="extra columns the tree may add")
    p.add_argument("--weights", metavar="COL", help="column of positive weights (∝ 1/variance)")
    p.add_argument("--tolerance", metavar="T", help="merge settings closer than T (or T%% of the x range)")
    p.add_argument("--sheet", metavar="NAME", help="Excel sheet (default: the first)")
    p.add_argument("--decimal", choices=[".", ","], help="decimal mark in text files (default: a point, or a comma when nothing else can be meant)")
    p.add_argument("--delimiter", metavar="CHAR", help="field separator in text files (default: detected)")
    add_engine_args(p)


def add_engine_args(p: argparse.ArgumentParser,
                    what: str = "where group totals are computed: in memory, by DuckDB over the files, or by Spark") -> None:
    """--engine, --spark-master and --memory-cap (``what`` says what the engine does for the command)."""
    p.add_argument("--engine", choices=["auto", "memory", "duckdb", "spark"], default="auto",
                   help=f"{what} (auto: DuckDB for folders, globs and files above --memory-cap)")
    p.add_argument("--spark-master", metavar="URL", default=None,
                   help="with --engine spark: the Spark master (default local[*]; SPARK_REMOTE selects Spark Connect)")
    p.add_argument("--memory-cap", metavar="SIZE", default="2G",
                   help="with --engine auto, files larger than this go through DuckDB (default 2G)")


def alpha_arg(text: str) -> float:
    """argparse type for a level strictly between 0 and 1."""
    try:
        val = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"alpha {text!r} is not a number; give e.g. 0.05") from None
    if not 0 < val < 1:
        raise argparse.ArgumentTypeError(f"alpha {text!r} must lie strictly between 0 and 1, e.g. 0.05")
    return val


def split_list(text: str | None) -> list[str]:
    """'a, b' → ['a', 'b']."""
    return [s.strip() for s in (text or "").split(",") if s.strip()]


def parse_size(text: str) -> int:
    """'2G' → bytes; plain numbers are bytes."""
    from bendwise.engine.errors import UsageError

    t = str(text).strip().upper().removesuffix("B")
    mult = {"K": 1 << 10, "M": 1 << 20, "G": 1 << 30, "T": 1 << 40}
    try:
        if t and t[-1] in mult:
            return int(float(t[:-1]) * mult[t[-1]])
        return int(float(t))
    except ValueError:
        raise UsageError(f"size {text!r} is not understood; give e.g. 500M or 2G") from None


def load_study(args: argparse.Namespace, progress=None):
    """Read the table and build the Study from the common options."""
    from bendwise.engine import load_table, make_study

    delim = delimiter_arg(args.delimiter)
    engine_name = engine_for(args, args.data)
    columns = dict(y=args.y, x=args.x, covariates=split_list(getattr(args, "covariates", "")), weights=args.weights)
    if engine_name in ("duckdb", "spark"):
        return _tell_cleaning(sql_study(args, engine_name, args.data, columns, progress=progress), [])
    frame = load_table(args.data, sheet=args.sheet, decimal=args.decimal, delimiter=delim)
    source = "<stdin>" if args.data == "-" else Path(args.data).name
    return _tell_cleaning(make_study(frame, tolerance=args.tolerance, source=source, **columns),
                          list(frame.attrs.get("read_notes", [])))


def delimiter_arg(text: str | None) -> str | None:
    """--delimiter as given, with \\t, tab and TAB meaning a tab."""
    return "\t" if text in {"\\t", "tab", "TAB"} else text


def engine_for(args: argparse.Namespace, path: str) -> str:
    """'memory', 'duckdb' or 'spark' for the command's --engine and --memory-cap and the table at ``path``."""
    from bendwise.engine.backends.duckdb import choose_engine

    return choose_engine(path, getattr(args, "engine", "memory"), parse_size(getattr(args, "memory_cap", "2G")))


def progress_line(args: argparse.Namespace, progress=None):
    """The progress callback for an SQL engine: ``progress`` when given, else one rewritten line on
    standard error when it is a terminal (and no --json), else None."""
    import sys

    if progress is None and sys.stderr.isatty() and not getattr(args, "json", False):
        def progress(text: str) -> None:
            sys.stderr.write(f"\r  {text[:70]:<70}" if text else "\r" + " " * 72 + "\r")
            sys.stderr.flush()
    return progress


def sql_study(args: argparse.Namespace, engine_name: str, path: str, columns: dict, *, source: str = "",
              progress=None):
    """The study over ``path`` built by DuckDB or Spark (``columns``: y, x, covariates, weights)."""
    progress = progress_line(args, progress)
    common = dict(tolerance=getattr(args, "tolerance", None), decimal=args.decimal,
                  delimiter=delimiter_arg(args.delimiter), progress=progress, source=source, **columns)
    if engine_name == "spark":
        from bendwise.engine.backends.spark import make_spark_study

        return make_spark_study(path, master=getattr(args, "spark_master", None), **common)
    from bendwise.engine.backends.duckdb import make_sql_study

    return make_sql_study(path, **common)


def _tell_cleaning(study, notes: list[str]):
    """Say on standard error what reading assumed and which rows were dropped (counts and first row
    numbers), so it survives ``> file`` and ``--json``; nothing when all is plain."""
    import sys

    lines = notes + list(study.report.lines())
    for line in lines:
        sys.stderr.write(f"bendwise: {line}\n")
    return study


def table(rows: list[list[str]], header: list[str], indent: str = "  ", right: set[int] | None = None) -> list[str]:
    """Plain aligned text table (numbers right-aligned)."""
    right = right if right is not None else set(range(1, len(header)))
    widths = [max(len(str(r[i])) for r in [header, *rows]) for i in range(len(header))]

    def line(r: list[str]) -> str:
        cells = [str(v).rjust(widths[i]) if i in right else str(v).ljust(widths[i]) for i, v in enumerate(r)]
        return (indent + "  ".join(cells)).rstrip()

    return [line(header), indent + "  ".join("─" * w for w in widths)] + [line(r) for r in rows]


def category_notice(study, spec) -> str | None:
    """One line when a model uses categorical covariates: predicting with it needs a category it
    saw (a known run day, batch …); a new run needs ``apply --hold NAME=average`` or a model
    without them."""
    cats = [c.name for c in study.covariates if c.kind == "categorical" and c.name in spec.covariates]
    if not cats:
        return None
    names = ", ".join(repr(c) for c in cats)
    first = cats[0]
    return (f"this model needs a known {names} to predict: bendwise apply reads it from the new table and refuses "
            f"categories it never saw; for a new run use --hold {first}=average (the average curve over the "
            f"categories seen; the new run's own shift is not in the interval) or choose a node without it")
