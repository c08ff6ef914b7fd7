"""A worker that fails must not leave the app stuck: the error shows as one line in the status
row (and in the node being grown), growing stops cleanly, and every key works again."""

from __future__ import annotations

from pathlib import Path

import pytest
from bendwise.engine.tree.tree import RemedyTree
from bendwise.tui.app import make_app

pytestmark = pytest.mark.slow  # app walks under Pilot: run 'python -m pytest tests/tui' when you touch the app

DATA = Path(__file__).resolve().parents[2] / "datasets" / "sensor_calibration.csv"
ARGS = dict(y="signal_mv", x="conc_mg_l", covariates=("run_day", "temp_c"))


async def _ready(app, pilot) -> None:
    await app.workers.wait_for_complete()
    await pilot.pause()
    await pilot.pause()


def _status(app) -> str:
    from bendwise.tui.widgets.status import StatusPanel

    panel = app.screen.query_one(StatusPanel)
    return " ".join(str(w.render()) for w in panel.query("Static"))


def _detail(app) -> str:
    from bendwise.tui.widgets.detail import NodeDetail

    return app.screen.query_one(NodeDetail).text


async def test_first_growth_failing_frees_the_keys(monkeypatch):
    def broken(self, *a, **k):
        raise ValueError("the function value at x=-3.0 is NaN")

    monkeypatch.setattr(RemedyTree, "grow", broken)
    app = make_app(DATA, depth=1, **ARGS)
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        screen = app.screen
        assert not screen.busy, "the screen still thinks it is growing"
        assert "Could not grow the tree" in _status(app) and "ValueError" in _status(app)
        assert "\n" not in _status(app).strip()
        assert "Could not grow the tree" in _detail(app)
        await pilot.press("escape", "a")  # Esc does nothing harmful; α opens its dialog again
        await pilot.pause()
        assert app.screen is not screen
        await pilot.press("escape")
        await pilot.pause()
        assert app.screen is screen
        await pilot.press("q")
        await pilot.pause()
    assert app.return_code in (0, None)


async def test_expand_failing_is_reported_under_the_node_and_growth_stops(monkeypatch):
    app = make_app(DATA, depth=1, **ARGS)
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        screen = app.screen
        from bendwise.tui.widgets.remedy_tree import RemedyTreeView

        view = screen.query_one(RemedyTreeView)
        target = next(nid for nid in screen.board.nodes if nid != "root" and screen.board.nodes[nid].score is not None)
        view.select_id(target)
        await pilot.pause()

        def broken(self, node_id, progress=None, cancel=None):
            raise RuntimeError("root search did not converge")

        monkeypatch.setattr(RemedyTree, "expand", broken)
        await pilot.press("g")
        await _ready(app, pilot)
        assert not screen.busy
        assert f"Could not grow {target}" in _status(app) and "RuntimeError" in _status(app)
        assert f"Growing {target} stopped" in _detail(app)
        # the keys work again: growing another node is accepted once the engine behaves
        monkeypatch.undo()
        other = next(nid for nid in screen.board.nodes
                     if nid not in ("root", target) and screen.board.nodes[nid].score is not None
                     and not screen.board.nodes[nid].expanded)
        view.select_id(other)
        await pilot.pause()
        await pilot.press("g")
        await _ready(app, pilot)
        assert screen.board.nodes[other].expanded
        assert target in screen.board.errors  # the failed node keeps its note until it grows


@pytest.mark.parametrize("size", [(80, 24)])
async def test_rejudge_failing_keeps_alpha(monkeypatch, size):
    app = make_app(DATA, depth=1, **ARGS)
    async with app.run_test(size=size) as pilot:
        await _ready(app, pilot)
        screen = app.screen
        before = screen.board.alpha

        def broken(self, *a, **k):
            raise FloatingPointError("overflow")

        monkeypatch.setattr(RemedyTree, "suggest", broken)
        await pilot.press("r")
        await _ready(app, pilot)
        assert not screen.busy
        assert "FloatingPointError" in _status(app)
        assert screen.board.tree.alpha == before
