"""`bendwise open FILE --engine spark`: the app opens at once, its worker builds the study with
Spark, and Spark's task counts (the texts of the CLI's progress line) show in the status row
before the tree. Without pyspark the module is skipped, except in CI (``CI`` set), where it must
run (as tests/engine/test_spark_backend.py)."""

from __future__ import annotations

import os

import numpy as np
import pandas as pd
import pytest
from bendwise.tui.cli import main
from bendwise.tui.reading import DataRequest

try:
    import pyspark  # noqa: F401
except ImportError:
    if os.environ.get("CI"):
        raise
    pytest.skip("pyspark is not installed (pip install 'bendwise[spark]'); CI installs it and runs these",
                allow_module_level=True)

pytestmark = [pytest.mark.slow,  # starts a JVM: run 'python -m pytest tests/tui' when you touch the app
              pytest.mark.filterwarnings("ignore:PySpark does not yet fully support pandas"),
              pytest.mark.filterwarnings("ignore:The copy keyword is deprecated")]


def _table(tmp_path):
    """A Parquet file: six replicated levels, a gentle curve."""
    rng = np.random.default_rng(23)
    x = np.repeat([1.0, 2.0, 4.0, 6.0, 8.0, 10.0], 30)
    y = 5 + 2 * x - 0.06 * x**2 + rng.normal(0, 0.3, x.size)
    path = tmp_path / "run.parquet"
    pd.DataFrame({"resp": y, "dose": x}).to_parquet(path)
    return path


def test_open_with_spark_launches_without_building_the_study(tmp_path, monkeypatch):
    import bendwise.tui.commands.open as open_cmd

    path = _table(tmp_path)
    seen = {}

    def fake_launch(req, **kw):
        seen["req"], seen["study"] = req, kw["study"]
        return 0

    monkeypatch.setattr(open_cmd, "launch", fake_launch)
    monkeypatch.setattr(open_cmd, "terminal_problem", lambda *a, **k: None)  # as if in a terminal
    assert main(["open", str(path), "-y", "resp", "-x", "dose", "--engine", "spark",
                 "--spark-master", "local[2]"]) == 0
    assert seen["study"] is None  # the app's worker builds it, with progress in the status row
    assert seen["req"].engine == "spark" and seen["req"].spark_master == "local[2]"


def test_open_with_spark_names_a_missing_file_before_the_app(tmp_path, monkeypatch, capsys):
    monkeypatch.setattr("bendwise.tui.commands.open.terminal_problem", lambda *a, **k: None)
    assert main(["open", str(tmp_path / "nope.parquet"), "-y", "a", "-x", "b", "--engine", "spark"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "nope.parquet" in err[0]


async def test_spark_task_counts_show_in_the_status_row_then_the_tree(tmp_path):
    from bendwise.tui.app import make_app
    from bendwise.tui.widgets.status import StatusPanel

    path = _table(tmp_path)
    shown: list[str] = []
    real = StatusPanel.progress

    def spy(self, label, done=None, total=None):
        shown.append(label)
        return real(self, label, done, total)

    req = DataRequest(str(path), "resp", "dose", engine="spark", spark_master="local[2]")
    app = make_app(request=req, depth=1)
    StatusPanel.progress = spy  # type: ignore[method-assign]
    try:
        async with app.run_test(size=(100, 30)) as pilot:
            await app.workers.wait_for_complete()
            await pilot.pause()
            board = app.screen.board
            assert board is not None and board.complete and len(board.nodes) > 1
            assert type(app.screen.study).__name__ == "SqlStudy" and app.screen.study.n == 180
    finally:
        StatusPanel.progress = real  # type: ignore[method-assign]
    spark = [i for i, s in enumerate(shown) if s.startswith("Spark ")]
    assert spark, shown
    assert any(s.startswith("Spark stage ") and " tasks" in s for s in shown), shown  # Spark's own counts
    tree = [i for i, s in enumerate(shown) if "models ·" in s]
    assert tree and spark[0] < tree[0], shown  # the Spark texts came while the study was built, before the tree
