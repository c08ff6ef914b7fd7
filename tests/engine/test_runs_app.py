"""The app's start screen: r marks the runs column; the tree then grows with a random run intercept."""

from __future__ import annotations

from pathlib import Path

import pytest
from bendwise.engine import load_table, make_study
from bendwise.engine.tree.tree import RemedyTree
from bendwise.tui.app import make_app

pytestmark = pytest.mark.slow  # an app walk under Pilot, like tests/tui

DATA = Path(__file__).resolve().parents[2] / "datasets" / "multi_day_calibration.csv"


async def _ready(app, pilot):
    await app.workers.wait_for_complete()
    await pilot.pause()
    await pilot.pause()


async def _to_row(app, pilot, name: str) -> None:
    from textual.widgets import DataTable

    table = app.screen.query_one("#columns", DataTable)
    target = [str(k.value) for k in table.rows].index(name)
    while table.cursor_row != target:
        await pilot.press("down" if table.cursor_row < target else "up")


async def test_r_marks_the_runs_column_and_the_tree_grows_with_runs():
    from bendwise.tui.screens.main import MainScreen

    app = make_app(DATA, depth=1)
    async with app.run_test(size=(100, 30)) as pilot:
        await _ready(app, pilot)
        await _to_row(app, pilot, "absorbance")
        await pilot.press("y")
        await _to_row(app, pilot, "conc_ug_l")
        await pilot.press("x", "r")  # the predictor cannot be the runs column
        assert app.screen.runs is None
        await _to_row(app, pilot, "day")
        await pilot.press("c", "r")  # runs replaces the covariate role
        assert app.screen.runs == "day" and app.screen.covariates == []
        assert "runs: day" in str(app.screen.query_one("#choice").render())
        await pilot.press("enter")
        await _ready(app, pilot)
        await _ready(app, pilot)
        assert isinstance(app.screen, MainScreen)
        board = app.screen.board
        study = make_study(load_table(DATA), y="absorbance", x="conc_ug_l", covariates=["day"])
        tree = RemedyTree(study, runs="day")
        tree.grow(1)
        assert board.complete and set(board.nodes) == set(tree.nodes)
        assert board.json["root"]["runs"] == tree.node_json(tree.root)["runs"]
        assert board.json["root"]["criteria"] == tree.node_json(tree.root)["criteria"]
        # the detail pane shows the run model's numbers (the engine's, formatted by the app)
        from bendwise.tui.widgets.detail import NodeDetail
        from bendwise.tui.widgets.formatting import num

        text = " ".join(app.screen.query_one(NodeDetail).text.split())
        runs = tree.node_json(tree.root)["runs"]
        assert f"between-run SD {num(runs['between_sd'], 5)}" in text
        assert f"within-run SD {num(runs['within_sd'], 5)}" in text
        assert "lack of fit within runs: F = " + num(runs["lack_of_fit_within_runs"]["f"], 4) in text
