"""Snapshots of the app at 80×24 and 120×40 (pytest-textual-snapshot; fixed data, no cursor
blink, no toasts, progress hidden once growth is done). Update with --snapshot-update."""

from __future__ import annotations

from pathlib import Path

import pytest
from bendwise.tui.app import make_app

pytestmark = pytest.mark.slow  # app walks under Pilot: run 'python -m pytest tests/tui' when you touch the app

DATA = Path(__file__).resolve().parents[2] / "datasets" / "sensor_calibration.csv"
ARGS = dict(y="signal_mv", x="conc_mg_l", covariates=("run_day", "temp_c"))
SIZES = [(80, 24), (120, 40)]

pytest.importorskip("pytest_textual_snapshot")


@pytest.fixture(autouse=True)
def _plain_terminal(monkeypatch, tmp_path):
    """Same output wherever the tests run: colour on, fancy glyphs, fixed export folder."""
    monkeypatch.delenv("NO_COLOR", raising=False)
    monkeypatch.delenv("BENDWISE_PLAIN", raising=False)
    monkeypatch.setenv("TERM", "xterm-256color")


def _app():
    return make_app(DATA, **ARGS, export_dir="/tmp")


def _settle(*keys: str, node: str | None = None):
    async def run_before(pilot) -> None:
        app = pilot.app
        for _ in range(500):  # until the worker's result has been shown, not only computed
            await app.workers.wait_for_complete()
            await pilot.pause()
            board = getattr(app.screen, "board", None)
            if (board is not None and board.complete) or getattr(app.screen, "columns", None):
                break
        if node is not None:
            from bendwise.tui.widgets.remedy_tree import RemedyTreeView

            app.screen.query_one(RemedyTreeView).select_id(node)
            await pilot.pause()
        if keys:
            await pilot.press(*keys)
            await app.workers.wait_for_complete()
        screen = app.screen
        if hasattr(screen, "charts_visible") and screen.charts_visible():
            from bendwise.tui.widgets.chart_maker import ChartMaker
            from bendwise.tui.widgets.remedy_tree import RemedyTreeView

            for _ in range(500):  # chart data are computed once the cursor rests
                if screen.query_one(ChartMaker).kept(screen.query_one(RemedyTreeView).highlighted_id):
                    break
                await pilot.pause(0.02)
                await app.workers.wait_for_complete()
        await pilot.pause()
        app.clear_notifications()
        await pilot.pause()

    return run_before


class TestMainScreen:
    @pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
    def test_root(self, snap_compare, size):
        assert snap_compare(_app(), terminal_size=size, run_before=_settle())

    @pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
    def test_quadratic_node(self, snap_compare, size):
        assert snap_compare(_app(), terminal_size=size, run_before=_settle(node="n6"))

    @pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
    def test_residuals_chart(self, snap_compare, size):
        assert snap_compare(_app(), terminal_size=size, run_before=_settle("2", node="n6"))

    @pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
    def test_boxcox_profile(self, snap_compare, size):
        assert snap_compare(_app(), terminal_size=size, run_before=_settle("4", node="n4"))

    def test_filter_and_sort(self, snap_compare):
        assert snap_compare(_app(), terminal_size=(80, 24), run_before=_settle("f", "s"))


class TestOtherScreens:
    @pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
    def test_compare(self, snap_compare, size):
        assert snap_compare(_app(), terminal_size=size, run_before=_settle("m", "n", "c"))

    @pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
    def test_help(self, snap_compare, size):
        assert snap_compare(_app(), terminal_size=size, run_before=_settle("question_mark"))

    @pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
    def test_start_screen(self, snap_compare, size):
        assert snap_compare(make_app(DATA), terminal_size=size, run_before=_settle("down"))
