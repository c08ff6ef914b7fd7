"""``bendwise demo`` (also plain ``bendwise``): the app on the bundled sensor calibration data."""

from __future__ import annotations

import argparse
from pathlib import Path

from .open import add_app_args, launch, terminal_problem

__all__ = ["register", "run"]


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``demo`` subcommand."""
    p = sub.add_parser(
        "demo",
        help="open the terminal app on the demo data (invented sensor calibration)",
        description="Open the app on datasets/sensor_calibration.csv with y = signal_mv, x = conc_mg_l and "
        "covariates run_day, temp_c. The demo numbers are invented (see datasets/README.md).",
    )
    add_app_args(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Check the demo data are present, then run the app (which reads them in a worker)."""
    from bendwise.engine.errors import DataError, UsageError

    from ..reading import datasets_dir, demo_request

    problem = terminal_problem()
    if problem:
        raise UsageError(problem)

    folder = datasets_dir()
    req = demo_request()
    if not folder.is_dir() or not Path(req.path).is_file():
        raise DataError(f"demo data not found in {folder}; the datasets folder ships with the source tree "
                        "(run from a checkout), or open your own table: bendwise DATA -y COL -x COL")
    # the app paints first and reads the (bundled, small) table in its worker: pandas and the
    # engine's imports then overlap the first frames instead of coming before them
    return launch(req, study=None, depth=args.depth, alpha=args.alpha, rule=args.rule)
