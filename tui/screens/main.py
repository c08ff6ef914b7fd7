"""The main screen: the remedy tree, the selected node's detail and charts, the status line.

Growth, scoring, α/rule changes and chart data run in thread workers that hold the tree
lock and post past-tense messages; this screen only formats what they send.
"""

from __future__ import annotations

import threading
import time
from pathlib import Path
from typing import TYPE_CHECKING, ClassVar

from rich.text import Text
from textual import on
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal, Vertical
from textual.screen import Screen
from textual.timer import Timer
from textual.widgets import Footer, Static, TabbedContent, TabPane, Tabs, Tree

from ..messages import (
    ChartsComputed,
    GrowthFailed,
    NodeScored,
    ScoringProgressed,
    StudyBuilt,
    TreeGrown,
    TreeSummary,
)
from ..widgets.charts import Markers
from ..widgets.detail import NodeDetail
from ..widgets.formatting import plain_glyphs
from ..widgets.plot import PlotView
from ..widgets.remedy_tree import SORTS, RemedyTreeView
from ..widgets.status import StatusPanel
from .chart_panes import ChartPanes
from .data import DataRequest
from .work import TreeWork

if TYPE_CHECKING:
    from bendwise.engine.stats.study import Study

__all__ = ["MainScreen", "RULES"]

RULES = ("aicc", "bic", "simplest", "press")  # engine.remedies.RULES, without importing the engine here
WIDE = (150, 36)
"""From this many columns and rows the charts get their own column instead of tabs."""


class MainScreen(ChartPanes, TreeWork, Screen):
    """Walk the remedy tree by keyboard."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("g", "grow", "Grow", id="main.grow",
                tooltip="Grow the highlighted node: score every move from it (best-first)"),
        Binding("m", "mark", "Mark", id="main.mark", tooltip="Mark (or unmark) the highlighted node for comparison"),
        Binding("c", "compare", "Compare", id="main.compare",
                tooltip="Compare the marked node with the highlighted one, side by side"),
        Binding("s", "sort", "Sort", id="main.sort",
                tooltip="Order siblings by: order of moves → AICc → BIC → simplest → PRESS"),
        Binding("f", "filter", "Filter", id="main.filter",
                tooltip="Show only nodes that pass lack of fit (and the nodes leading to them)"),
        Binding("a", "alpha", "α", id="main.alpha", tooltip="Change α, the level of the lack-of-fit verdicts"),
        Binding("r", "rule", "Rule", show=False, id="main.rule",
                tooltip="Cycle the suggestion rule: aicc → bic → simplest → press"),
        Binding("n", "goto_suggestion", "Suggested", show=False, id="main.suggested",
                tooltip="Move the cursor to the suggested node"),
        Binding("e", "export", "Export", id="main.export", tooltip="Export the highlighted node: spec.json, reproduce.py and report.md in a folder"),
        Binding("1", "view('detail')", "Detail", show=False, id="main.view.detail",
                tooltip="Show the detail of the node (numbers in words)"),
        Binding("2", "view('residuals')", "Residuals", show=False, id="main.view.residuals",
                tooltip="Chart: residuals by level with each level's pure-error spread"),
        Binding("3", "view('curve')", "Curve", show=False, id="main.view.curve",
                tooltip="Chart: the fitted curve over the data, original scale"),
        Binding("4", "view('boxcox')", "Box–Cox", show=False, id="main.view.boxcox",
                tooltip="Chart: Box–Cox profile (on a Box–Cox node)"),
        Binding("right_square_bracket", "scroll_detail(1)", "Detail down", show=False, id="main.detail.down",
                tooltip="Scroll the detail pane down a page (PgUp/PgDn page through the tree; Tab focuses the "
                "detail so arrows scroll it)"),
        Binding("left_square_bracket", "scroll_detail(-1)", "Detail up", show=False, id="main.detail.up",
                tooltip="Scroll the detail pane up a page"),
        Binding("escape", "cancel", "Cancel", show=False, id="main.cancel",
                tooltip="Stop growing (nodes scored so far stay)"),
    ]

    def __init__(self, request: DataRequest, *, study: Study | None = None, depth: int = 2, alpha: float = 0.05,
                 rule: str = "aicc") -> None:
        super().__init__()
        self.request = request
        self.study = study
        self.depth = depth
        self.alpha = alpha
        self.rule = rule
        self.sort = "moves"
        self.only_passing = False
        self.marked: str | None = None
        self.board: TreeSummary | None = None
        self.markers = Markers(plain_glyphs())
        self._lock = threading.Lock()
        self._charts: dict[str, ChartsComputed] = {}
        self._busy = False
        self._cancelling = False
        self._chart_timer: Timer | None = None
        self._flush_timer: Timer | None = None
        self._progress_timer: Timer | None = None
        self._progress: ScoringProgressed | None = None
        self._pending: list[str] = []
        self._pending_since = 0.0
        self._last_move = 0.0
        self._shown_id: str | None = None

    # ---- layout ---------------------------------------------------------------------
    def compose(self) -> ComposeResult:
        from bendwise.engine.tree.tree import POST_SEARCH_CAUTION

        yield Static(self._title(), id="title")
        with Horizontal(id="body"):
            with Vertical(id="tree-pane"):
                yield RemedyTreeView(id="tree")
            with TabbedContent(id="views", initial="tab-detail"):
                with TabPane("1 Detail", id="tab-detail"):
                    yield NodeDetail(id="detail")
                with TabPane("2 Residuals", id="tab-residuals"):
                    yield PlotView(id="residuals")
                with TabPane("3 Curve", id="tab-curve"):
                    yield PlotView(id="curve")
                with TabPane("4 Box–Cox", id="tab-boxcox"):
                    yield PlotView(id="boxcox")
            with Vertical(id="chart-column"):
                yield PlotView(id="residuals-wide")
                yield PlotView(id="curve-wide")
        yield StatusPanel(POST_SEARCH_CAUTION, id="status")
        yield Footer(compact=True)

    def on_mount(self) -> None:
        self.query_one("#tree-pane").border_title = "Remedy tree"
        self._update_pane_title()
        view = self.query_one(RemedyTreeView)
        view.on_cursor = self._cursor_moved
        view.focus()
        self.query_one(Tabs).can_focus = False  # views switch with 1–4; Tab goes tree ⇄ detail
        self._layout_for(self.size.width, self.size.height)
        self.query_one(StatusPanel).busy("starting…")
        self._busy = True
        self._grow()

    def on_resize(self, event) -> None:
        self._layout_for(event.size.width, event.size.height)
        self.query_one("#title", Static).update(self._title())

    def _layout_for(self, width: int, height: int) -> None:
        wide = width >= WIDE[0] and height >= WIDE[1]
        if wide == self.has_class("-wide"):
            return
        self.set_class(wide, "-wide")
        views = self.query_one("#views", TabbedContent)
        for tab in ("tab-residuals", "tab-curve"):
            (views.hide_tab if wide else views.show_tab)(tab)
        if wide and views.active in ("tab-residuals", "tab-curve"):
            views.active = "tab-detail"
        nid = self._current() if self.is_mounted else None
        if wide and nid is not None and self.board is not None and nid in self.board.nodes:
            self._request_charts(nid)

    def _title(self) -> Text:
        st = self.study
        t = Text.assemble(("bendwise", "bold"), f" · {self.request.source}")
        if st is None:
            t.append(f" · reading {self.request.source}…")
        elif self.size.width >= 120:
            covs = ", ".join(c.name for c in st.covariates) or "none"
            t.append(f" · {st.describe_design()} · y {st.y_name} · covariates {covs}")
        else:
            t.append(f" · {st.n:,} rows at {st.c:,} levels")
        t.append(f" · α {self.alpha:g} · rule {self.rule}")
        return t

    def _update_pane_title(self) -> None:
        pane = self.query_one("#tree-pane")
        filt = " · only passing" if self.only_passing else ""
        pane.border_subtitle = f"sort {self.sort}{filt}"

    # ---- messages from workers -------------------------------------------------------
    @on(StudyBuilt)
    def _study_built(self, event: StudyBuilt) -> None:
        self.study = event.study
        self.query_one("#title", Static).update(self._title())

    @on(ScoringProgressed)
    def _progressed(self, event: ScoringProgressed) -> None:
        # at most ten repaints a second for progress: the keys come first
        self._progress = event
        if self._progress_timer is None:
            self._progress_timer = self.set_timer(0.1, self._show_progress)

    def _show_progress(self) -> None:
        self._progress_timer = None
        event = self._progress
        if self._busy and event is not None:
            label = "cancelling after this step…" if self._cancelling else event.label
            self.query_one(StatusPanel).busy(label, event.done, event.total)

    @on(NodeScored)
    def _node_scored(self, event: NodeScored) -> None:
        view = self.query_one(RemedyTreeView)
        if event.tree is not None:  # first growth: a board that fills as nodes arrive
            self.board = TreeSummary(event.tree, {"root": event.node}, {"root": event.json}, {"root": ()}, None,
                                     self.rule, self.alpha, None, complete=False)
            view.start(self.board)
            self._show(view.highlighted_id)
            return
        board = self.board
        if board is None or board.complete:
            return
        node = event.node
        board.nodes[node.id] = node
        board.json[node.id] = event.json
        board.children[node.id] = ()
        if node.parent is not None:
            board.children[node.parent] = (*board.children.get(node.parent, ()), node.id)
        if not self.only_passing:
            # Adding a line re-lays out the screen; batch the lines so keys stay quick while
            # hundreds of nodes arrive.
            if not self._pending:
                self._pending_since = time.monotonic()
            self._pending.append(node.id)
            if self._flush_timer is None:
                self._flush_timer = self.set_timer(0.25, self._flush_pending)

    def _flush_pending(self) -> None:
        self._flush_timer = None
        now = time.monotonic()
        if now - self._last_move < 0.4 and now - self._pending_since < 2.0:
            # the user is moving through the tree: keep the lines still and the keys quick
            self._flush_timer = self.set_timer(0.25, self._flush_pending)
            return
        board, ids = self.board, self._pending
        self._pending = []
        if board is None or board.complete:
            return
        view = self.query_one(RemedyTreeView)
        view.add_scored_many(board, ids)

    @on(TreeGrown)
    def _tree_grown(self, event: TreeGrown) -> None:
        if self._flush_timer is not None:
            self._flush_timer.stop()
            self._flush_timer = None
        self._pending = []
        old = self.board
        if old is not None and old.tree is event.summary.tree:
            for nid, err in old.errors.items():  # errors stay with their node until it grows
                if not (nid == event.focus and event.summary.complete):
                    event.summary.errors.setdefault(nid, err)
        self.board = event.summary
        self.alpha, self.rule = event.summary.alpha, event.summary.rule
        self._set_idle()
        view = self.query_one(RemedyTreeView)
        view.rebuild(self.board, sort=self.sort, only_passing=self.only_passing, marked=self.marked)
        if event.focus is not None:
            view.select_id(event.focus)
        self._refresh_status()
        self.query_one("#title", Static).update(self._title())
        self._show(view.highlighted_id)
        if not event.summary.complete:
            self.notify(f"growth stopped: {len(event.summary.nodes)} models scored; press g on a node to grow it",
                        title="cancelled")
        elif event.focus is not None:
            n = len(event.new_ids)
            self.notify(f"{event.focus}: {n} new model(s) scored" if n else f"{event.focus}: no new models "
                        "(every move was pruned or reaches a model already in the tree)")

    @on(GrowthFailed)
    def _growth_failed(self, event: GrowthFailed) -> None:
        self._set_idle()
        what = f"Could not grow {event.node_id}" if event.node_id else "Could not grow the tree"
        board = self.board
        if event.node_id is not None and board is not None:
            # keep what was scored before the failure, and say what stopped under the node
            board.errors[event.node_id] = event.error
            self.query_one(RemedyTreeView).rebuild(board, sort=self.sort, only_passing=self.only_passing,
                                                   marked=self.marked)
            self.query_one(RemedyTreeView).select_id(event.node_id)
            self._show(event.node_id)
        else:
            self.query_one(NodeDetail).show_message(Text(f"{what}: {event.error}", style="bold"))
        self.query_one(StatusPanel).set_suggestion(Text.assemble((what, "bold"), f" — {event.error}"))

    def on_worker_state_changed(self, event) -> None:
        """A worker that stopped on an error the workers did not catch still frees the keys."""
        from textual.worker import WorkerState

        if event.state == WorkerState.ERROR and event.worker.group == "tree":
            self.post_message(GrowthFailed(f"internal error ({event.worker.error!r:.200}); the tree so far is kept"))

    # ---- showing a node -------------------------------------------------------------
    @on(Tree.NodeExpanded, "#tree")
    def _opened(self, event: Tree.NodeExpanded) -> None:
        """Opening a node that was not grown yet grows it (same as g)."""
        board, nid = self.board, event.node.data
        if board is None or nid not in board.nodes or not RemedyTreeView.growable(board, nid) or not board.complete:
            return
        if self._busy:
            event.node.collapse()
        self.query_one(RemedyTreeView).move_cursor(event.node)
        self.action_grow(nid)

    @on(Tree.NodeHighlighted, "#tree")
    def _highlighted(self, event: Tree.NodeHighlighted) -> None:
        self._cursor_moved(event.node.data)

    def _cursor_moved(self, nid: str | None) -> None:
        """From the tree's cursor watcher (same frame) and from NodeHighlighted (a frame later)."""
        self._last_move = time.monotonic()
        if nid is not None and nid == self._shown_id:
            return
        self._show(nid)

    def _show(self, nid: str | None) -> None:
        self._shown_id = nid
        board = self.board
        self.query_one(NodeDetail).show_node(board, nid)
        if board is None or nid is None or nid not in board.nodes:
            return
        self._show_charts(nid)

    def _refresh_status(self) -> None:
        board = self.board
        status = self.query_one(StatusPanel)
        if board is None or board.suggestion is None:
            return
        sug = board.suggestion
        if sug.node is None:
            status.set_suggestion(Text.assemble(("Suggested: none", "bold"), f" ({sug.rule}) — {sug.reason}"))
            return
        spec = board.nodes[sug.node].spec
        label = spec.label("y", "x")
        reason = sug.reason
        full = spec.label(board.tree.study.y_name, board.tree.study.x_name) + ": "
        if reason.startswith(full):  # the reason repeats the model; the line already names it
            reason = reason[len(full):]
        status.set_suggestion(Text.assemble(("Suggested", "bold"), f" ({sug.rule}, α {board.alpha:g}): ",
                                            (f"{sug.node} {label}", "bold"), f" — {reason}"))

    def _set_idle(self) -> None:
        self._busy = False
        self._cancelling = False
        self.query_one(StatusPanel).idle()

    def _refuse_while_busy(self, what: str) -> bool:
        if self._busy:
            self.notify(f"still scoring: {what} when it finishes (Esc stops growing)", severity="warning")
            return True
        if self.board is None:
            self.notify("nothing to work on yet", severity="warning")
            return True
        return False

    # ---- actions --------------------------------------------------------------------
    def _current(self) -> str | None:
        return self.query_one(RemedyTreeView).highlighted_id

    def action_grow(self, nid: str | None = None) -> None:
        nid = nid or self._current()
        if nid is None or self._refuse_while_busy("grow"):
            return
        node = self.board.nodes[nid]  # type: ignore[union-attr]
        if node.score is None:
            self.notify(f"{nid} could not be scored, so it cannot grow", severity="warning")
            return
        if node.expanded:
            self.notify(f"{nid} is already grown: its moves are listed under it (or pruned, with reasons, in the detail)")
            return
        self._busy = True
        self.query_one(StatusPanel).busy(f"growing {nid}…")
        self._expand(nid)

    def action_cancel(self) -> None:
        if not self._busy:
            return
        self._cancelling = True
        self.workers.cancel_group(self, "tree")
        self.query_one(StatusPanel).busy("cancelling after this step…")

    def action_mark(self) -> None:
        nid = self._current()
        if nid is None or self.board is None:
            return
        self.marked = None if self.marked == nid else nid
        self.notify(f"marked {nid}: move to another node and press c to compare" if self.marked else f"unmarked {nid}")
        if not self._busy:
            self.query_one(RemedyTreeView).rebuild(self.board, sort=self.sort, only_passing=self.only_passing,
                                                   marked=self.marked)

    def action_compare(self) -> None:
        from .compare import CompareScreen

        nid = self._current()
        if self.board is None or nid is None:
            return
        if self.marked is None:
            self.notify("mark a node with m first, then highlight another and press c", severity="warning")
            return
        if self.marked not in self.board.json or nid not in self.board.json:
            self.notify("the marked node is not scored yet", severity="warning")
            return
        self.app.push_screen(CompareScreen(self.board, self.marked, nid))

    def action_sort(self) -> None:
        self.sort = SORTS[(SORTS.index(self.sort) + 1) % len(SORTS)]
        self._rebuild()
        self.notify(f"siblings ordered by {self.sort if self.sort != 'moves' else 'the order of moves'}")

    def action_filter(self) -> None:
        self.only_passing = not self.only_passing
        self._rebuild()
        self.notify("showing nodes that pass lack of fit (and their ancestors)" if self.only_passing
                    else "showing every node")

    def _rebuild(self) -> None:
        self._update_pane_title()
        if self.board is not None:
            self.query_one(RemedyTreeView).rebuild(self.board, sort=self.sort, only_passing=self.only_passing,
                                                   marked=self.marked)
            self._show(self._current())

    def action_alpha(self) -> None:
        from ..dialogs import AlphaDialog

        if self._refuse_while_busy("change α"):
            return

        def done(value: float | None) -> None:
            if value is not None and value != self.alpha:
                self._busy = True
                self.query_one(StatusPanel).busy(f"judging every node at α = {value:g}")
                self._rejudge(value, self.rule)

        self.app.push_screen(AlphaDialog(self.alpha), done)

    def action_rule(self) -> None:
        if self._refuse_while_busy("change the rule"):
            return
        rule = RULES[(RULES.index(self.rule) + 1) % len(RULES)]
        self._busy = True
        self.query_one(StatusPanel).busy(f"suggesting by {rule}")
        self._rejudge(self.alpha, rule)

    def action_goto_suggestion(self) -> None:
        board = self.board
        if board is None or board.suggestion is None or board.suggestion.node is None:
            self.notify("no suggestion yet" if board is None or board.suggestion is None
                        else "no node qualifies for the suggestion", severity="warning")
            return
        if not self.query_one(RemedyTreeView).select_id(board.suggestion.node):
            self.notify("the suggested node is hidden by the filter (press f)", severity="warning")

    def action_view(self, name: str) -> None:
        if self.has_class("-wide") and name in ("residuals", "curve"):
            self.notify("the charts are on the right at this terminal size")
            return
        self.query_one("#views", TabbedContent).active = f"tab-{name}"

    def action_scroll_detail(self, direction: int) -> None:
        detail = self.query_one(NodeDetail)
        (detail.scroll_page_down if direction > 0 else detail.scroll_page_up)(animate=False)

    def action_export(self) -> None:
        from ..dialogs import ExportDialog
        from ..exporting import default_export_name

        nid = self._current()
        board = self.board
        if nid is None or board is None or nid not in board.json:
            return
        if self._refuse_while_busy("export"):
            return
        default = str(Path(self.app.export_dir) / default_export_name(nid))  # type: ignore[attr-defined]
        label = board.nodes[nid].spec.label("y", "x")

        def chosen(answer: tuple[str, str] | None) -> None:
            if answer is not None:
                self._write_export(nid, answer[0], force=False, report=answer[1])

        self.app.push_screen(ExportDialog(nid, label, default), chosen)

    def _write_export(self, nid: str, path: str, force: bool, report: str = "md") -> None:
        from ..dialogs import ConfirmDialog
        from ..exporting import export_node

        board = self.board
        assert board is not None
        if self._busy:  # growth started meanwhile: the tree must not be read while it changes
            self.notify("not exported: scoring started; export when it finishes", severity="warning")
            return
        try:
            req = self.request
            from bendwise.engine.read.files import describe_reading

            reading = None if req.path == "-" else describe_reading(
                req.path, delimiter=getattr(req, "delimiter", None), decimal=getattr(req, "decimal", None),
                sheet=getattr(req, "sheet", None))
            written = export_node(board.tree, nid, path, force=force, data_path=req.path, reading=reading,
                                  report=report)
        except FileExistsError:
            def answer(yes: bool | None) -> None:
                if yes:
                    self._write_export(nid, path, force=True, report=report)
                else:
                    self.notify(f"not exported, kept as it was: {path}")

            self.app.push_screen(ConfirmDialog("The folder exists. Replace it?",
                                               f"{path}\nwould be replaced by the export of {nid}"),
                                 answer)
            return
        except (OSError, ValueError) as exc:
            self.notify(f"not exported: {exc}", severity="error", title="export")
            return
        self.notify(f"exported {nid} to {written}", title="export")

