"""Start screen: choose response, predictor and covariates by keyboard, then grow."""

from __future__ import annotations

from pathlib import Path

import pytest
from bendwise.engine import load_table, make_study
from bendwise.engine.tree.tree import RemedyTree
from bendwise.tui.app import make_app

pytestmark = pytest.mark.slow  # app walks under Pilot: run 'python -m pytest tests/tui' when you touch the app

DATA = Path(__file__).resolve().parents[2] / "datasets" / "sensor_calibration.csv"


async def _ready(app, pilot):
    await app.workers.wait_for_complete()
    await pilot.pause()
    await pilot.pause()


async def _to_row(app, pilot, name: str) -> None:
    from textual.widgets import DataTable

    table = app.screen.query_one("#columns", DataTable)
    names = [str(k.value) for k in table.rows]
    target = names.index(name)
    while table.cursor_row != target:
        await pilot.press("down" if table.cursor_row < target else "up")


def _text(widget) -> str:
    return str(widget.render())


async def test_columns_listed_with_type_distinct_missing_and_replicates():
    from bendwise.tui.screens.start import StartScreen

    app = make_app(DATA)
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        assert isinstance(app.screen, StartScreen)
        from textual.widgets import DataTable

        table = app.screen.query_one("#columns", DataTable)
        rows = {str(k.value): [str(c) for c in table.get_row(k)] for k in table.rows}
        assert rows["conc_mg_l"][1:] == ["conc_mg_l", "numeric", "8", "0"]
        assert rows["run_day"][1:] == ["run_day", "text", "3", "0"]
        assert rows["signal_mv"][2:] == ["numeric", "24", "0"]
        await _to_row(app, pilot, "conc_mg_l")
        preview = _text(app.screen.query_one("#preview"))
        assert "8 levels" in preview and "3 rows per level" in preview and "pure error available" in preview
        await _to_row(app, pilot, "signal_mv")
        preview = _text(app.screen.query_one("#preview"))
        assert "24 levels" in preview and "NOT available" in preview


async def test_choose_columns_by_keys_then_grow():
    from bendwise.tui.screens.main import MainScreen

    app = make_app(DATA)
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        await _to_row(app, pilot, "run_day")
        await pilot.press("y")  # a text column cannot be the response
        assert app.screen.y is None
        await _to_row(app, pilot, "signal_mv")
        await pilot.press("y")
        await _to_row(app, pilot, "conc_mg_l")
        await pilot.press("x")
        await _to_row(app, pilot, "temp_c")
        await pilot.press("c")
        await _to_row(app, pilot, "run_day")
        await pilot.press("space", "space", "c")  # admit, drop, admit again
        assert (app.screen.y, app.screen.x, app.screen.covariates) == ("signal_mv", "conc_mg_l", ["temp_c", "run_day"])
        choice = _text(app.screen.query_one("#choice"))
        assert "signal_mv" in choice and "conc_mg_l" in choice and "temp_c, run_day" in choice
        await pilot.press("enter")
        await _ready(app, pilot)
        await _ready(app, pilot)
        assert isinstance(app.screen, MainScreen)
        board = app.screen.board
        study = make_study(load_table(DATA), y="signal_mv", x="conc_mg_l", covariates=["temp_c", "run_day"])
        tree = RemedyTree(study)
        tree.grow(2)
        assert board.complete and set(board.nodes) == set(tree.nodes)
        for nid in ("root", "n6"):
            assert board.json[nid]["criteria"] == tree.node_json(tree.nodes[nid])["criteria"]


async def test_grow_needs_both_columns_and_engine_refusals_stay_on_screen(tmp_path):
    from bendwise.tui.screens.start import StartScreen

    bad = tmp_path / "flat.csv"
    bad.write_text("x,y\n1,5\n2,5\n3,5\n1,5\n", encoding="utf-8")
    app = make_app(bad)
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        await pilot.press("enter")  # nothing chosen yet: a hint, no growth
        await pilot.pause()
        assert isinstance(app.screen, StartScreen)
        await _to_row(app, pilot, "y")
        await pilot.press("y")
        await _to_row(app, pilot, "x")
        await pilot.press("x", "enter")
        await _ready(app, pilot)
        assert isinstance(app.screen, StartScreen)
        msg = _text(app.screen.query_one("#start-message"))
        assert "NOT POSSIBLE" in msg and "constant" in msg
