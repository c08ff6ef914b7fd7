"""Selection stability in the app: the t key measures it in a worker (progress, Esc stops it), the
shares appear after the verdict in the tree, in the detail pane, in the compare screen and in an
export, and they go when the tree, α or rule changes.

Every expected share is computed here by the engine (``selection_stability`` on a tree grown on the
same data with the same depth, seed and rule), the computation ``bendwise grow --stability N --seed
S`` prints, so the app cannot show numbers of its own.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from bendwise.engine import load_table, make_study
from bendwise.engine.tree.stability import selection_stability
from bendwise.engine.tree.tree import RemedyTree
from bendwise.tui.app import make_app
from bendwise.tui.widgets.formatting import share_text

pytestmark = pytest.mark.slow  # app walks under Pilot: run 'python -m pytest tests/tui' when you touch the app

DATA = Path(__file__).resolve().parents[2] / "datasets" / "sensor_calibration.csv"
ARGS = dict(y="signal_mv", x="conc_mg_l", covariates=("run_day", "temp_c"))
N, SEED = 8, 3


@pytest.fixture(scope="module")
def engine_shares() -> dict[str, float]:
    study = make_study(load_table(DATA), y="signal_mv", x="conc_mg_l", covariates=["run_day", "temp_c"],
                       source=DATA.name)
    tree = RemedyTree(study, alpha=0.05)
    tree.grow(2)
    return selection_stability(tree, N, depth=2, seed=SEED, rule="aicc").shares


async def _ready(app, pilot) -> None:
    await app.workers.wait_for_complete()
    await pilot.pause()
    await pilot.pause()


def _view(app):
    from bendwise.tui.widgets.remedy_tree import RemedyTreeView

    return app.screen.query_one(RemedyTreeView)


def _detail(app) -> str:
    from bendwise.tui.widgets.detail import NodeDetail

    return app.screen.query_one(NodeDetail).text


def _label(app, nid: str) -> str:
    return str(_view(app)._lines[nid].label)


async def _measure(app, pilot, n: int, seed: int, *, wait: bool = True) -> None:
    from bendwise.tui.dialogs import StabilityDialog

    await pilot.press("t")
    await pilot.pause()
    assert isinstance(app.screen, StabilityDialog)
    await pilot.press("ctrl+u", *str(n), "tab", "ctrl+u", *str(seed), "enter")
    await pilot.pause()
    if wait:
        await _ready(app, pilot)


async def test_the_key_measures_the_engines_shares_and_shows_them(engine_shares, tmp_path):
    app = make_app(DATA, **ARGS, export_dir=tmp_path)
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        assert "%" not in _label(app, "root")  # no shares before a run
        await _measure(app, pilot, N, SEED)
        board = app.screen.board
        assert board.stability is not None and board.stability.resamples == N
        assert board.stability.shares == pytest.approx(engine_shares, abs=0)  # the engine's, exactly
        # after the verdict in every line of the tree
        for nid in board.nodes:
            label = _label(app, nid) if nid in _view(app)._lines else None
            if label is not None:
                share = engine_shares.get(nid, 0.0)
                assert (share_text(share) if share > 0 else "·") in label.split(maxsplit=3)[2]
        # the detail pane of the suggested node
        sug = board.suggestion.node
        assert _view(app).select_id(sug)
        await pilot.pause()
        text = _detail(app)
        assert (f"Stability: wins {share_text(engine_shares.get(sug, 0.0))} of {N} resamples (seed {SEED}, "
                f"rule aicc)") in " ".join(text.split())
        assert f"--stability {N} --seed {SEED}" in text
        # an export of this tree carries the same shares
        await pilot.press("e")
        await pilot.pause()
        target = tmp_path / "with-shares"
        await pilot.press("ctrl+u", *str(target), "enter")
        await pilot.pause()
        doc = json.loads((target / "spec.json").read_text(encoding="utf-8"))
        assert doc["stability"]["resamples"] == N and doc["stability"]["seed"] == SEED
        assert doc["stability"]["exported_node_share"] == pytest.approx(engine_shares.get(sug, 0.0))


async def test_compare_shows_both_shares(engine_shares):
    from bendwise.tui.screens.compare import CompareScreen
    from rich.console import Console

    app = make_app(DATA, **ARGS)
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        await _measure(app, pilot, N, SEED)
        sug = app.screen.board.suggestion.node
        await pilot.press("m")  # the root
        assert _view(app).select_id(sug)
        await pilot.pause()
        await pilot.press("c")
        await pilot.pause()
        assert isinstance(app.screen, CompareScreen)
        console = Console(width=160, record=True, file=open("/dev/null", "w"))  # noqa: SIM115
        console.print(app.screen.query_one("#compare-table").content)
        text = console.export_text()
        row = next(line for line in text.splitlines() if line.lstrip().startswith("stability"))
        for nid in ("root", sug):
            assert f"wins {share_text(engine_shares.get(nid, 0.0))} of {N}" in row


async def test_shares_go_when_the_rule_changes():
    app = make_app(DATA, **ARGS)
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        await _measure(app, pilot, 4, 0)
        assert app.screen.board.stability is not None
        await pilot.press("r")  # another suggestion rule: the shares belonged to the old one
        await _ready(app, pilot)
        assert app.screen.rule == "bic"
        assert app.screen.board.stability is None
        assert "%" not in _label(app, "root")
        assert "Stability:" not in _detail(app)
        from bendwise.tui.widgets.status import MessageLine

        assert "stability shares cleared" in str(app.screen.query_one(MessageLine).render())


async def test_escape_stops_a_run_and_says_it_is_partial():
    app = make_app(DATA, **ARGS)
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        await _measure(app, pilot, 5000, 1, wait=False)
        for _ in range(20):  # until a few resamples are done
            await pilot.pause(0.2)
            stab_progress = str(app.screen.query_one("#status").render())
            if "stability" in stab_progress:
                break
        await pilot.press("escape")
        await _ready(app, pilot)
        board = app.screen.board
        assert board.stability is not None and board.stability.resamples < 5000
        assert board.stability_asked == 5000
        assert "partial: stopped after" in " ".join(_detail(app).split())
        if board.stability.resamples:
            assert sum(board.stability.shares.values()) == pytest.approx(1.0)
