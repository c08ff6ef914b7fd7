"""``bendwise open DATA`` (also ``bendwise DATA``): open the app on a table.

The table is read and the chosen columns are checked BEFORE the app starts, so a data error
is one line on stderr and exit status 2, never a flash of the app. Without -y/-x the app
opens on a start screen to choose the columns.

The app needs a terminal: without one (input from a file or /dev/null, output to a pipe or a
file) it refuses at once, in one line, instead of waiting for keys that never come. A table
piped in (``cat t.csv | bendwise open - …``) is read first; the keys then come from the
terminal (/dev/tty).
"""

from __future__ import annotations

import argparse
import os
import sys

from .common import add_data_args, alpha_arg, split_list

__all__ = ["register", "run", "launch", "depth_arg", "terminal_problem", "keys_from_terminal"]

_NO_TERMINAL = "the app needs a terminal, and {what} is not one; for pipes and files use bendwise check or bendwise grow"


def terminal_problem(table_from_stdin: bool = False) -> str | None:
    """Why the app cannot run in this process (None: it can). The app draws on standard output
    and error and reads keys from standard input, which may carry the table instead."""
    for stream, what in ((sys.stdout, "standard output"), (sys.stderr, "standard error")):
        if not _isatty(stream):
            return _NO_TERMINAL.format(what=what)
    if not table_from_stdin and not _isatty(sys.stdin):
        return _NO_TERMINAL.format(what="standard input")
    return None


def _isatty(stream) -> bool:
    try:
        return bool(stream is not None and stream.isatty())
    except (ValueError, OSError):  # closed or detached
        return False


def keys_from_terminal() -> None:
    """After a table was read from standard input, take the keys from the terminal instead."""
    from bendwise.engine.errors import UsageError

    if _isatty(sys.stdin):
        return
    try:
        fd = os.open("/dev/tty", os.O_RDWR)
    except OSError as exc:
        raise UsageError(f"the table came from standard input and no terminal can be opened for the keys "
                         f"({exc.strerror or exc}); save the table to a file, or use bendwise check or bendwise grow"
                         ) from None
    os.dup2(fd, 0)
    os.close(fd)


def depth_arg(text: str) -> int:
    """argparse type: moves from the straight line, 0 to 4."""
    try:
        val = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"depth {text!r} is not a whole number; give 0 to 4") from None
    if not 0 <= val <= 4:
        raise argparse.ArgumentTypeError(f"depth {val} is out of range; use 0 to 4")
    return val


def add_app_args(p: argparse.ArgumentParser) -> None:
    """Options shared by ``open`` and ``demo``."""
    p.add_argument("--depth", type=depth_arg, default=2, help="moves from the straight line to grow at start (default 2)")
    p.add_argument("--alpha", type=alpha_arg, default=0.05, help="level of the lack-of-fit verdicts (default 0.05)")
    p.add_argument("--rule", choices=("aicc", "bic", "simplest", "press"), default="aicc",
                   help="suggestion rule (default aicc)")


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``open`` subcommand."""
    p = sub.add_parser(
        "open",
        help="open the terminal app on a table (also: bendwise DATA)",
        description="Walk the remedy tree of a table by keyboard. Without -y and -x a start screen lets you "
        "choose the response, the predictor and the covariates.",
    )
    add_data_args(p, need_xy=False, covariates=True)
    add_app_args(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Check the data, then run the app."""
    from bendwise.engine.errors import UsageError

    from ..reading import DataRequest, build_study, read_frame

    problem = terminal_problem(table_from_stdin=args.data == "-")
    if problem:
        raise UsageError(problem)
    req = DataRequest(args.data, args.y, args.x, tuple(split_list(args.covariates)), args.weights, args.tolerance,
                      args.sheet, args.decimal, args.delimiter)
    if bool(req.y) != bool(req.x):
        raise UsageError("give both -y and -x, or neither (then choose them on the start screen)")
    if req.covariates and not req.y:
        raise UsageError("--covariates needs -y and -x; without them choose covariates on the start screen")
    from bendwise.engine.backends.duckdb import choose_engine

    from .common import load_study, parse_size

    if choose_engine(args.data, args.engine, parse_size(args.memory_cap)) in ("duckdb", "spark"):
        # the rows stay in the files: the study is built from SQL scans, shown here on stderr
        if not req.y:
            raise UsageError(f"with the {'Spark' if args.engine == 'spark' else 'DuckDB'} engine give -y and -x (the start screen needs the table in memory; "
                             "or add --engine memory)")
        if args.engine == "spark":
            return _launch_spark(req, args)
        _say(f"scanning {req.source}…")
        study = load_study(args)
        study.progress = None  # inside the app the workers report scans in the status row
        return launch(req, study=study, frame=None, depth=args.depth, alpha=args.alpha, rule=args.rule)
    _say(f"reading {req.source}…")
    try:
        frame = read_frame(req)
        study = build_study(req, frame) if req.y else None
        if args.data == "-":
            keys_from_terminal()
    finally:  # an error goes on a clean line
        _say("\r" + " " * 60 + "\r")
    return launch(req, study=study, frame=None if study is not None else frame, depth=args.depth, alpha=args.alpha,
                  rule=args.rule)


def _launch_spark(req, args: argparse.Namespace) -> int:
    """Open the app at once and let its worker build the study with Spark, whose task counts show
    in the status row. What can be checked without starting Spark is checked here first (the file,
    pyspark, Java), so those stay one line on stderr; later failures show in the app's message line."""
    from dataclasses import replace

    from bendwise.engine.backends.spark import require_spark
    from bendwise.engine.read.files import data_files

    if "://" not in req.path:
        data_files(req.path)
    require_spark()
    req = replace(req, engine="spark", spark_master=args.spark_master)
    return launch(req, study=None, frame=None, depth=args.depth, alpha=args.alpha, rule=args.rule)


def _say(text: str) -> None:
    if sys.stderr.isatty():
        sys.stderr.write(f"\r{text}")
        sys.stderr.flush()


def launch(req, **kwargs) -> int:
    """Run the app; if an engine step is still running at quit, leave without waiting for it."""
    import asyncio  # here, not at the top: every subcommand imports this module to register it

    from ..app import make_app

    app = make_app(request=req, **kwargs)
    _say("\r" + " " * 60 + "\r")
    # (No sys.setswitchinterval(0.001) here: measured, it made the start-up ~0.5 s slower while
    # the worker imports scipy, and did not improve key latency during scoring.)
    loop = asyncio.new_event_loop()
    code = app.run(loop=loop)
    # Worker threads only compute (the engine checks the cancel flag between nodes); one node of
    # a large table can take seconds, and quitting must not wait for it.
    if any(not w.is_finished for w in app.workers):
        sys.stdout.flush()
        sys.stderr.flush()
        os._exit(int(app.return_code or 0))
    loop.run_until_complete(loop.shutdown_default_executor())
    loop.close()
    return int(code or app.return_code or 0)
