"""Helpers shared by the engine tests (imported by name: pytest puts this folder on the path).

``run_cli`` runs the real ``bendwise`` entry point in this process and returns its exit code and
what it printed; ``need_pyspark`` skips a Spark module where pyspark is missing, except in CI,
which installs it and must run those tests.
"""

from __future__ import annotations

import os

import pytest


def run_cli(argv: list[str], capsys) -> tuple[object, str, str]:
    """(exit code, stdout, stderr) of ``bendwise ARGV`` run in process; a SystemExit gives its code."""
    from bendwise.tui.cli import main

    try:
        code: object = main(argv)
    except SystemExit as exc:
        code = exc.code
    out, err = capsys.readouterr()
    return code, out, err


def need_pyspark() -> None:
    """Skip the calling test module when pyspark is not installed (never in CI)."""
    try:
        import pyspark  # noqa: F401
    except ImportError:
        if os.environ.get("CI"):
            raise
        pytest.skip("pyspark is not installed (pip install 'bendwise[spark]'); CI installs it and runs these",
                    allow_module_level=True)
