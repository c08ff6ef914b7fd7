"""The ``bendwise`` console entry point.

``bendwise`` alone (or ``bendwise demo``) opens the app on the bundled demo data;
subcommands print engine results as text or JSON for scripts. Bad input never
produces a traceback: one line on stderr and exit status 2.
"""

from __future__ import annotations

import argparse
import importlib
import os
import re
import sys
from collections.abc import Sequence

# The engine solves many small least-squares problems; a threaded BLAS spends more time
# waking threads than computing on them (measured: 18.6 ms vs 0.41 ms for a 200×60 QR on two
# cores). Users can still override this from the environment.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

# Subcommand modules in tui/commands/, in the order --help lists them.
_COMMANDS = ("check", "grow", "plan", "export", "apply", "confirm", "demo", "open")

EXIT_OK = 0
EXIT_FOUND = 1
EXIT_USAGE = 2


class _Parser(argparse.ArgumentParser):
    """argparse that reports usage errors as one line and exit 2."""

    def error(self, message: str) -> None:  # type: ignore[override]
        sys.stderr.write(f"bendwise: error: {message} (see 'bendwise {self._cmd()} --help')\n")
        raise SystemExit(EXIT_USAGE)

    def _cmd(self) -> str:
        parts = self.prog.split()
        return parts[1] if len(parts) > 1 else ""


def build_parser() -> argparse.ArgumentParser:
    """The full parser with every available subcommand registered."""
    parser = _Parser(
        prog="bendwise",
        description="Test a straight line on replicated data, grow remedies, hand the model on.",
    )
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name in _COMMANDS:
        try:
            module = importlib.import_module(f"bendwise.tui.commands.{name}")
        except ModuleNotFoundError as exc:
            if exc.name == f"bendwise.tui.commands.{name}":
                continue  # command not built yet
            raise
        module.register(sub)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the process exit status."""
    from bendwise.engine.errors import BendwiseError

    args_list = list(sys.argv[1:] if argv is None else argv)
    if not args_list:
        args_list = ["demo"]
    elif args_list[0] not in _COMMANDS and not args_list[0].startswith("-"):
        args_list = ["open", *args_list]  # `bendwise DATA ...` opens the app on a table
    parser = build_parser()
    args_list = _attach_negative_values(parser, args_list)
    try:
        args = parser.parse_args(args_list)
    except SystemExit as exc:  # usage errors (2) and --help (0) end here
        return int(exc.code or 0) if isinstance(exc.code, int) else EXIT_USAGE
    if not getattr(args, "func", None):
        parser.print_help()
        return EXIT_USAGE
    try:
        return _run_quietly(args)
    except BendwiseError as exc:
        sys.stderr.write(f"bendwise: error: {exc}\n")
        return EXIT_USAGE
    except KeyboardInterrupt:
        sys.stderr.write("bendwise: interrupted\n")
        return 130
    except BrokenPipeError:
        return EXIT_OK


_NEGATIVE = re.compile(r"^-(\d|\.\d|inf|nan)", re.IGNORECASE)


def _attach_negative_values(parser: argparse.ArgumentParser, argv: list[str]) -> list[str]:
    """``--tolerance -5%`` → ``--tolerance=-5%``: argparse would take a value that starts with '-'
    (and is not a plain negative number) for an option and report a missing value; attached, it
    reaches the option's own check, which says what is wrong with it."""
    sub = next((a for a in parser._actions if isinstance(a, argparse._SubParsersAction)), None)
    command = sub.choices.get(argv[0]) if sub is not None and argv else None
    if command is None:
        return argv
    takes_one = {opt for opt, act in command._option_string_actions.items()
                 if isinstance(act, argparse._StoreAction) and act.nargs is None}
    out: list[str] = []
    i = 0
    while i < len(argv):
        tok = argv[i]
        if tok in takes_one and i + 1 < len(argv) and _NEGATIVE.match(argv[i + 1]):
            out.append(f"{tok}={argv[i + 1]}")
            i += 2
            continue
        out.append(tok)
        if tok == "--":
            out += argv[i + 1:]
            break
        i += 1
    return out


def _run_quietly(args: argparse.Namespace) -> int:
    """Run a command with Python warnings and numpy's floating-point warnings silenced: stderr
    carries only the one-line error or the cleaning report (over- and underflow that matter are
    reported in the results themselves). The filter also covers the app's worker threads."""
    import warnings

    import numpy as np

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with np.errstate(all="ignore"):
            return int(args.func(args))


def entry() -> None:
    """Console-script wrapper."""
    raise SystemExit(main())


if __name__ == "__main__":
    entry()
