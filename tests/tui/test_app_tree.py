"""Pilot tests of the main screen: walking the tree by keys shows the ENGINE's numbers.

Every expected value is computed here from a RemedyTree grown on the same data and formatted
with the app's own number formatter (so a rounding change cannot hide a wrong number).
"""

from __future__ import annotations

from pathlib import Path

import pytest
from bendwise.engine import check, load_table, make_study
from bendwise.engine.tree.tree import RemedyTree
from bendwise.tui.app import make_app
from bendwise.tui.widgets.formatting import fmt_num, fmt_p, num, verdict_word

pytestmark = pytest.mark.slow  # app walks under Pilot: run 'python -m pytest tests/tui' when you touch the app

DATA = Path(__file__).resolve().parents[2] / "datasets" / "sensor_calibration.csv"
ARGS = dict(y="signal_mv", x="conc_mg_l", covariates=("run_day", "temp_c"))


@pytest.fixture(scope="module")
def engine_tree() -> RemedyTree:
    study = make_study(load_table(DATA), y="signal_mv", x="conc_mg_l", covariates=["run_day", "temp_c"],
                       source=DATA.name)
    tree = RemedyTree(study, alpha=0.05)
    tree.grow(2)
    return tree


def _app(**kw):
    return make_app(DATA, **{**ARGS, **kw})


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


def _expected_bits(tree: RemedyTree, nid: str) -> list[str]:
    """Numbers of one node as the narrow (80-column) detail pane prints them."""
    node = tree.nodes[nid]
    s = node.score
    st = tree.study
    bits = [node.spec.label(st.y_name, st.x_name)]
    lof = s.lack_of_fit
    if lof.testable:
        bits.append(f"F = {fmt_num(lof.f, 4)} on {lof.df_lack} and {lof.df_pure} df")
        bits.append(fmt_p(lof.p))
    else:
        bits.append("cannot be tested")
    bits.append(f"AICc {num(s.criteria.aicc, 6)}")
    best = tree.best_aicc()
    bits.append(f"ΔAICc {num(s.criteria.aicc - best, 3)}")
    bits.append(f"BIC {num(s.criteria.bic, 6)}")
    for c in s.fit.coefficients:
        bits.append(f"{c.name}")
        bits.append(num(c.estimate, 5))
    bits.append(f"σ̂ {num(s.fit.sigma, 5)} on {s.fit.df_resid} df")
    return bits


async def test_tree_matches_engine_and_walks_by_keys(engine_tree):
    app = _app()
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        view = _view(app)
        board = app.screen.board
        assert board.complete and set(board.nodes) == set(engine_tree.nodes)
        assert view.shown_ids[0] == "root" and view.highlighted_id == "root"
        # the detail pane is narrow at 80 columns: its tables drop MS and the intervals
        from bendwise.tui.widgets.detail import NodeDetail

        assert app.screen.query_one(NodeDetail).size.width < 60
        walked = []
        for _step in range(12):
            nid = view.highlighted_id
            walked.append(nid)
            text = _detail(app)
            for bit in _expected_bits(engine_tree, nid):
                assert bit in text, (nid, bit)
            assert verdict_word(engine_tree.node_json(engine_tree.nodes[nid]), 0.05).upper() in text.upper()
            await pilot.press("down")
            await pilot.pause()
        assert walked == view.shown_ids[:12]  # every line, in display order


async def test_root_shows_the_check_anova_and_path_shows_nested_tests(engine_tree):
    app = _app()
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        chk = check(engine_tree.study, alpha=0.05)
        text = _detail(app)
        for row in chk.anova:
            assert num(row.ss, 5) in text, row
        assert "lack of fit" in text and "pure error" in text
        assert chk.verdict[:40] in text.replace("\n", " ")
        # n6 = + x²: its path names the move and the nested F against the root
        assert _view(app).select_id("n6")
        await pilot.pause()
        text = _detail(app).replace("\n", " ")
        nested = engine_tree.nodes["n6"].nested
        assert "+ x²" in text and f"F = {fmt_num(nested.f, 4)} on {nested.df_num} and {nested.df_den} df" in text
        # pruned moves are listed with their reasons, never hidden
        for move, reason in engine_tree.nodes["n6"].pruned:
            assert move in text and reason[:30] in text


async def test_suggestion_and_caution_always_visible(engine_tree):
    from bendwise.engine.tree.tree import POST_SEARCH_CAUTION

    app = _app()
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        sug = engine_tree.suggest("aicc")
        line = str(app.screen.query_one("#suggestion").render())
        assert sug.node in line and "Suggested" in line
        caution = str(app.screen.query_one("#caution").render())
        assert POST_SEARCH_CAUTION.split(":")[0] in caution
        await pilot.press("n")
        await pilot.pause()
        assert _view(app).highlighted_id == sug.node
        assert "SUGGESTED" in _detail(app)


async def test_sort_cycles_through_engine_rules(engine_tree):
    app = _app()
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        view = _view(app)
        for rule in ("aicc", "bic", "simplest", "press"):
            await pilot.press("s")
            await pilot.pause()
            assert app.screen.sort == rule
            order = [line.data for line in view.root.children]
            key = engine_tree.sort_key(rule)
            assert order == sorted(engine_tree.root.children, key=lambda c: key(engine_tree.nodes[c])), rule
            assert f"sort {rule}" in str(app.screen.query_one("#tree-pane").border_subtitle)
        await pilot.press("s")
        await pilot.pause()
        assert app.screen.sort == "moves"
        assert [line.data for line in view.root.children] == engine_tree.root.children


async def test_filter_shows_passing_nodes_and_their_ancestors(engine_tree):
    app = _app()
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        await pilot.press("f")
        await pilot.pause()
        shown = set(_view(app).shown_ids)
        passing = {n.id for n in engine_tree.nodes.values()
                   if n.score is not None and n.score.lack_of_fit.passes(0.05) is True}
        assert passing and passing <= shown
        for nid in shown - passing:  # context only: the root or an ancestor of a passing node
            assert nid == "root" or any(nid in [p.id for p in engine_tree.path(q)] for q in passing)
        assert "only passing" in str(app.screen.query_one("#tree-pane").border_subtitle)
        await pilot.press("f")
        await pilot.pause()
        assert set(_view(app).shown_ids) == set(engine_tree.nodes)


async def test_alpha_dialog_changes_verdicts(engine_tree):
    from bendwise.tui.dialogs import AlphaDialog

    app = _app()
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        _view(app).select_id("n6")  # lack-of-fit p ≈ 0.87
        await pilot.pause()
        await pilot.press("a")
        await pilot.pause()
        assert isinstance(app.screen, AlphaDialog)
        await pilot.press(*"1.5", "enter")  # refused with a sentence, dialog stays
        await pilot.pause()
        assert isinstance(app.screen, AlphaDialog)
        assert "between 0 and 1" in str(app.screen.query_one("#alpha-error").render())
        await pilot.press("ctrl+u", *"0.9", "enter")
        await _ready(app, pilot)
        board = app.screen.board
        assert board.alpha == 0.9 and app.screen.alpha == 0.9
        for nid, node in engine_tree.nodes.items():
            assert board.json[nid]["passes"] == engine_tree.passes(node, 0.9), nid
        assert engine_tree.nodes["n6"].score.lack_of_fit.p < 0.9
        assert "FAIL" in _detail(app) and "α = 0.9" in _detail(app)
        expect = engine_tree.suggest("aicc", alpha=0.9)
        assert board.suggestion.node == expect.node
        assert "α 0.9" in str(app.screen.query_one("#title").render())


async def test_rule_cycles_and_follows_engine(engine_tree):
    app = _app()
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        for rule in ("bic", "simplest", "press", "aicc"):
            await pilot.press("r")
            await _ready(app, pilot)
            board = app.screen.board
            assert board.rule == rule
            assert board.suggestion.node == engine_tree.suggest(rule).node


async def test_compare_screen_shows_both_nodes_key_numbers(engine_tree):
    from bendwise.tui.screens.compare import CompareScreen

    app = _app()
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        await pilot.press("c")  # nothing marked yet: refused with a hint
        await pilot.pause()
        assert not isinstance(app.screen, CompareScreen)
        await pilot.press("m")
        assert app.screen.marked == "root"
        assert _view(app).select_id("n6")
        await pilot.pause()
        await pilot.press("c")
        await pilot.pause()
        assert isinstance(app.screen, CompareScreen)
        from rich.console import Console

        console = Console(width=120, record=True, file=open("/dev/null", "w"))  # noqa: SIM115
        console.print(app.screen.query_one("#compare-table").content)
        text = console.export_text()
        for nid in ("root", "n6"):
            s = engine_tree.nodes[nid].score
            assert num(s.criteria.aicc, 6) in text and num(s.criteria.bic, 6) in text
            assert num(s.fit.r2, 6) in text
        assert "FAIL" in text and "pass" in text
        await pilot.press("escape")
        await pilot.pause()
        assert not isinstance(app.screen, CompareScreen)


async def test_grow_highlighted_node_best_first(engine_tree):
    app = _app()
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        assert _view(app).select_id("n33")  # depth-2 leaf: not grown yet
        await pilot.pause()
        assert "not grown yet" in _detail(app)
        await pilot.press("g")
        await _ready(app, pilot)
        board = app.screen.board
        # the same expansion in the engine directly
        expected = RemedyTree(engine_tree.study, alpha=0.05)
        expected.grow(2)
        new = expected.expand("n33")
        assert list(board.children["n33"]) == new and new
        assert [board.nodes[c].spec for c in new] == [expected.nodes[c].spec for c in new]
        assert set(_view(app).shown_ids) >= set(new)
        await pilot.press("g")  # already grown: a message, nothing scored
        await pilot.pause()
        assert list(app.screen.board.children["n33"]) == new


async def test_help_lists_every_binding_and_the_caution():
    from bendwise.tui.screens.help import HelpScreen, binding_sections, help_renderable
    from bendwise.tui.screens.main import MainScreen

    app = _app()
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        await pilot.press("question_mark")
        await pilot.pause()
        assert isinstance(app.screen, HelpScreen)
        from rich.console import Console

        console = Console(width=100, record=True, file=open("/dev/null", "w"))  # noqa: SIM115
        console.print(help_renderable(app))
        text = console.export_text()
        ids = set()
        for _title, bindings in binding_sections(app):
            for b in bindings:
                assert (b.tooltip or b.description) in text.replace("\n", " ") or (b.tooltip or b.description)[:40] in text
                if b.id:
                    ids.add(b.id)
        assert {b.id for b in MainScreen.BINDINGS} <= ids  # every main-screen key is documented
        assert "regulatory acceptance" in text and "validated procedures" in text
        await pilot.press("escape")
        await pilot.pause()
        assert not isinstance(app.screen, HelpScreen)


def _key(app, key: str) -> None:
    """Send a key the way the terminal driver does, without Pilot's wait-for-idle: Pilot waits
    until the process stops using CPU, which never happens while a worker is scoring."""
    from textual import events

    event = events.Key(key, None)
    event.set_sender(app)
    app.post_message(event)


async def test_keys_answer_while_scoring_and_escape_cancels(monkeypatch, engine_tree):
    """Slow the engine down; the cursor still moves, and Esc stops growth between nodes."""
    import asyncio
    import time

    import bendwise.engine.tree.tree as rem
    real = rem.RemedyTree._score

    def slow(self, node):
        time.sleep(0.1)
        real(self, node)

    monkeypatch.setattr(rem.RemedyTree, "_score", slow)
    app = _app()
    async with app.run_test(size=(80, 24)):
        deadline = time.monotonic() + 30
        while len(_view(app).shown_ids) < 4 and time.monotonic() < deadline:
            await asyncio.sleep(0.01)
        assert app.screen.busy
        _key(app, "down")
        _key(app, "down")
        while _view(app).highlighted_id in (None, "root") and time.monotonic() < deadline:
            await asyncio.sleep(0.01)
        assert _view(app).highlighted_id not in (None, "root")
        assert app.screen.busy  # still scoring while the cursor moved
        moved_to = _view(app).highlighted_id
        _key(app, "escape")
        while app.screen.busy and time.monotonic() < deadline:
            await asyncio.sleep(0.01)
        board = app.screen.board
        assert not app.screen.busy
        assert not board.complete and 1 < len(board.nodes) < len(engine_tree.nodes), len(board.nodes)
        assert _view(app).highlighted_id == moved_to  # the rebuild kept the cursor on its node
