"""The app at 80×24 without colour (NO_COLOR=1) and on the Linux console (TERM=linux).

Each test reads what the widgets render at that size: tree lines name the move, verdicts and
the cursor row read without colour, messages stay in our status lines (no toasts over the
numbers), help lists bendwise's keys and the marks the tree really draws, the detail computes
its width advice from its real width, and the status lines are not cut.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from bendwise.tui.app import make_app

pytestmark = pytest.mark.slow  # app walks under Pilot: run 'python -m pytest tests/tui' when you touch the app

DATA = Path(__file__).resolve().parents[2] / "datasets" / "sensor_calibration.csv"
ARGS = dict(y="signal_mv", x="conc_mg_l", covariates=("run_day", "temp_c"))
TERMINALS = {"no-color": {"NO_COLOR": "1", "TERM": "xterm-256color"}, "linux": {"TERM": "linux"}}


@pytest.fixture(params=list(TERMINALS), autouse=True)
def terminal(request, monkeypatch) -> str:
    monkeypatch.delenv("NO_COLOR", raising=False)
    monkeypatch.delenv("BENDWISE_PLAIN", raising=False)
    for k, v in TERMINALS[request.param].items():
        monkeypatch.setenv(k, v)
    return request.param


async def _ready(app, pilot) -> None:
    for _ in range(200):
        await app.workers.wait_for_complete()
        await pilot.pause()
        board = getattr(app.screen, "board", None)
        if board is not None and board.complete:
            break
    await pilot.pause()


def _view(app):
    from bendwise.tui.widgets.remedy_tree import RemedyTreeView

    return app.screen.query_one(RemedyTreeView)


def _tree_lines(app) -> list[str]:
    view = _view(app)
    return [view.render_line(y).text for y in range(view.size.height)]


def _line_of(app, nid: str) -> str:
    lines = _tree_lines(app)
    found = [line for line in lines if f" {nid} " in line]
    assert found, "\n".join(lines)
    return found[0]


async def test_tree_lines_name_the_move_and_the_detail_the_model(terminal):
    app = make_app(DATA, **ARGS)
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        board = app.screen.board
        half = "0.5" if terminal == "linux" else "½"
        from bendwise.tui.widgets.detail import NodeDetail
        from rich.style import Style

        view = _view(app)
        for nid, move in (("n1", "log y"), ("n7", "+ run_day"), ("n9", f"w θ={half}"), ("n4", "bc λ=1.31")):
            assert board.nodes[nid].parent == "root"
            view.select_id(nid)
            await pilot.pause()
            line = view.cursor_node
            assert line is not None and line.data == nid
            label = view.render_label(line, Style(), Style()).plain  # icon + mark + id + verdict + move
            assert label.endswith(move) and "~" not in label, label  # the move, not the model
            depth = 1  # each is a child of the root (asserted above): one guide of two cells
            assert 2 * depth + len(label) <= view.size.width - 1, (label, view.size.width)  # not cut
            st = board.tree.study
            full = board.nodes[nid].spec.label(st.y_name, st.x_name)
            assert full.split("  [")[0] in " ".join(app.screen.query_one(NodeDetail).text.split())
        assert "~" in view.render_label(view.root, Style(), Style()).plain  # the root shows its model


async def test_verdicts_and_cursor_read_without_colour(terminal):
    from bendwise.tui.widgets.formatting import tree_label

    app = make_app(DATA, **ARGS)
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        board = app.screen.board
        label = tree_label(board.nodes["n1"], board.json["n1"], board.alpha, suggested=False, marked=False)
        span = next(s for s in label.spans if label.plain[s.start:s.end] == "FAIL")
        from rich.style import Style

        style = Style.parse(str(span.style))
        assert style.reverse and style.color is None  # FAIL stands out by reverse video, not by colour
        view = _view(app)
        view.select_id("n2")
        await pilot.pause()
        row = view.cursor_line - round(view.scroll_offset.y)
        strip = view.render_line(row)
        assert " n2 " in strip.text
        text_cells = [seg for seg in strip if seg.text.strip() and "n2" in seg.text or "√y" in seg.text]
        assert text_cells and all(seg.style is not None and seg.style.reverse for seg in text_cells)
        other = view.render_line(row + 1)
        assert not any(seg.style is not None and seg.style.reverse and "√x" in seg.text for seg in other)
        from textual.widgets import Tab

        active = app.screen.query_one("Tab.-active", Tab)
        assert active.styles.text_style.reverse  # the active tab without its underline colour


async def test_messages_stay_in_the_status_lines(terminal):
    from bendwise.tui.widgets.detail import NodeDetail
    from bendwise.tui.widgets.status import MessageLine
    from textual.widgets._toast import Toast

    app = make_app(DATA, **ARGS)
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        for key in ("s", "m", "c", "f"):
            await pilot.press(key)
            await pilot.pause()
            if key == "c":
                await pilot.press("escape")
                await pilot.pause()
        line = app.screen.query_one(MessageLine)
        assert "showing nodes that pass lack of fit" in str(line.render())
        assert not list(app.query(Toast)) and not app._notifications  # no toast at all
        region, detail = line.region, app.screen.query_one(NodeDetail).region
        assert region.right <= 80 and region.bottom <= 24 and not region.overlaps(detail)
        assert not region.overlaps(_view(app).region)


async def test_help_lists_our_keys_and_the_marks_the_tree_draws(terminal):
    from bendwise.tui.screens.help import help_renderable
    from rich.console import Console

    app = make_app(DATA, **ARGS)
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        console = Console(width=100, record=True, file=open("/dev/null", "w"))  # noqa: SIM115
        console.print(help_renderable(app))
        text = console.export_text()
        from textual.widgets import Tree

        for b in Tree.BINDINGS:  # Textual's own tree keys, in Textual's words, are not listed
            assert b.description not in text, b.description
        assert "Move to the line below" in text and "Show the children" in text
        closed = _view(app).ICON_NODE.strip()
        assert closed in "".join(_tree_lines(app))  # the mark help describes is the one on screen
        assert f"'{closed}' a node whose children are hidden or not grown yet" in " ".join(text.split())
        assert "'…'" not in text


@pytest.mark.parametrize("size", [(80, 24), (150, 40)], ids=["80x24", "150x40"])
async def test_width_advice_comes_from_the_real_width(terminal, size):
    from bendwise.tui.widgets.detail import WIDE_PANE, NodeDetail

    app = make_app(DATA, **ARGS)
    async with app.run_test(size=size) as pilot:
        await _ready(app, pilot)
        _view(app).select_id("n6")
        await pilot.pause()
        detail = app.screen.query_one(NodeDetail)
        text = " ".join(detail.text.split())
        width = detail.size.width - 1
        assert "110" not in text
        if width < WIDE_PANE:
            assert f"need a detail pane of {WIDE_PANE} columns; this one has {width}" in text
        else:
            assert "95% interval" in text and "this one has" not in text


async def test_status_and_caution_lines_are_not_cut(terminal):
    from bendwise.tui.widgets.status import CautionLine

    app = make_app(DATA, **ARGS)
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        sug = app.screen.query_one("#suggestion")
        plain = sug.render().plain if hasattr(sug.render(), "plain") else str(sug.render())
        lines = sug.render_lines(sug.region.reset_offset)  # what is drawn
        shown = " ".join(strip.text.strip() for strip in lines)
        assert " ".join(plain.split()) == " ".join(shown.split()), (plain, shown)
        assert "n shows why" in plain and plain.startswith("Suggested (aicc")
        caution = app.screen.query_one(CautionLine)
        drawn = " ".join(s.text.strip() for s in caution.render_lines(caution.region.reset_offset))
        assert drawn.endswith("(? for more)") and "p-values after a search are optimistic" in drawn


async def test_a_toast_over_a_dialog_stays_inside_the_screen(terminal):
    """Dialogs have no message line: their rare notices are toasts, kept inside 80×24."""
    from textual.widgets._toast import Toast

    app = make_app(DATA, **ARGS)
    async with app.run_test(size=(80, 24), notifications=True) as pilot:
        await _ready(app, pilot)
        await pilot.press("a")  # the α dialog
        await pilot.pause()
        app.notify("a notice long enough to wrap over several lines of the toast " * 3, title="notice")
        await pilot.pause(0.2)
        toasts = list(app.screen.query(Toast))
        assert toasts
        for toast in toasts:
            r = toast.region
            assert r.width > 0 and r.x >= 0 and r.right <= 80 and r.bottom <= 24, r
