"""The main screen: the remedy tree, the selected node's detail and charts, the status lines.

The screen composes widgets that own their state: ``TreeGrower`` owns the engine tree and its
workers, ``RemedyTreeView`` the board, order, filter and mark, ``ChartMaker`` the chart data,
``StatusPanel`` the suggestion, caution, message and progress lines. The screen routes their
messages to one another and turns keys into requests.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, ClassVar

from rich.text import Text
from textual import on
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal, Vertical
from textual.reactive import reactive
from textual.screen import Screen
from textual.widgets import Footer, Static, TabbedContent, TabPane, Tabs, Tree

from ..messages import TreeSummary
from ..reading import DataRequest
from ..widgets.chart_maker import ChartData, ChartMaker
from ..widgets.charts import Markers, boxcox_figure, curve_figure, residual_figure
from ..widgets.detail import NodeDetail
from ..widgets.formatting import plain_glyphs
from ..widgets.grower import TreeGrower
from ..widgets.plot import PlotView
from ..widgets.remedy_tree import SORTS, RemedyTreeView
from ..widgets.status import MessageLine, StatusPanel

if TYPE_CHECKING:
    from bendwise.engine.stats.study import Study

__all__ = ["MainScreen", "RULES"]

RULES = ("aicc", "bic", "simplest", "press")  # engine.remedies.RULES, without importing the engine here
WIDE = (150, 36)
"""From this many columns and rows the charts get their own column instead of tabs."""
CHART_PANES = ("#residuals", "#curve", "#residuals-wide", "#curve-wide")


class MainScreen(Screen):
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
        Binding("t", "stability", "Stability", show=False, id="main.stability",
                tooltip="How often each node wins the suggestion on resampled data (Esc stops the run)"),
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
                tooltip="Stop growing or a stability run (what is done so far stays)"),
    ]

    alpha: reactive[float] = reactive(0.05, init=False)
    """Level of the lack-of-fit verdicts."""
    rule: reactive[str] = reactive("aicc", init=False)
    """Suggestion rule."""

    def __init__(self, request: DataRequest, *, study: Study | None = None, depth: int = 2, alpha: float = 0.05,
                 rule: str = "aicc") -> None:
        super().__init__()
        self.request = request
        self._start = (study, depth)
        self.set_reactive(MainScreen.alpha, alpha)
        self.set_reactive(MainScreen.rule, rule)
        self.markers = Markers(plain_glyphs())
        self._shown_id: str | None = None

    # ---- the widgets' state, read through them ---------------------------------------
    @property
    def board(self) -> TreeSummary | None:
        """The tree as last shown (owned by the tree view)."""
        return self.query_one(RemedyTreeView).board

    @property
    def busy(self) -> bool:
        """True while the grower's worker holds the tree."""
        return self.query_one(TreeGrower).busy

    @property
    def study(self) -> Study | None:
        """The study once read (owned by the grower)."""
        return self.query_one(TreeGrower).study

    @property
    def sort(self) -> str:
        """The tree view's sibling order."""
        return self.query_one(RemedyTreeView).sort

    @property
    def marked(self) -> str | None:
        """The node marked for comparison (owned by the tree view)."""
        return self.query_one(RemedyTreeView).marked

    # ---- layout ---------------------------------------------------------------------
    def compose(self) -> ComposeResult:
        from bendwise.engine.tree.tree import POST_SEARCH_CAUTION

        study, depth = self._start
        yield TreeGrower(self.request, study, depth, id="grower")
        yield ChartMaker(id="charts")
        yield Static(self._title(study), id="title")
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
        view = self.query_one(RemedyTreeView)
        view.on_cursor = self._cursor_moved
        view.focus()
        self.watch(view, "sort", self._order_changed, init=True)
        self.watch(view, "only_passing", self._order_changed, init=False)
        grower = self.query_one(TreeGrower)
        self.watch(grower, "busy", self._busy_changed, init=False)
        self.watch(grower, "cancelling", self._busy_changed, init=False)
        self.query_one(Tabs).can_focus = False  # views switch with 1–4; Tab goes tree ⇄ detail
        self._layout_for(self.size.width, self.size.height)
        self.query_one(StatusPanel).busy("starting…")
        grower.start(self.alpha, self.rule)

    def on_resize(self, event) -> None:
        self._layout_for(event.size.width, event.size.height)
        self._retitle()

    def watch_alpha(self) -> None:
        self._retitle()

    def watch_rule(self) -> None:
        self._retitle()

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

    def _retitle(self) -> None:
        if self.is_mounted:
            self.query_one("#title", Static).update(self._title(self.study))

    def _title(self, st: Study | None) -> Text:
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

    def _order_changed(self) -> None:
        view = self.query_one(RemedyTreeView)
        filt = " · only passing" if view.only_passing else ""
        self.query_one("#tree-pane").border_subtitle = f"sort {view.sort}{filt}"
        if self.is_mounted:
            self._show(self._current())

    def _busy_changed(self) -> None:
        grower = self.query_one(TreeGrower)
        status = self.query_one(StatusPanel)
        if not grower.busy:
            status.idle()
        elif grower.cancelling:
            status.busy("cancelling after this step…")

    def say(self, text: str, *, warning: bool = False) -> None:
        """A message in the status lines (never a toast over the numbers)."""
        self.query_one(MessageLine).say(text, warning=warning)

    # ---- messages from the grower -----------------------------------------------------
    @on(TreeGrower.StudyBuilt)
    def _study_built(self) -> None:
        self._retitle()

    @on(TreeGrower.Progressed)
    def _progressed(self, event: TreeGrower.Progressed) -> None:
        grower = self.query_one(TreeGrower)
        if grower.busy:
            label = "cancelling after this step…" if grower.cancelling else event.label
            self.query_one(StatusPanel).progress(label, event.done, event.total)

    @on(TreeGrower.NodeScored)
    def _node_scored(self, event: TreeGrower.NodeScored) -> None:
        view = self.query_one(RemedyTreeView)
        if event.tree is not None:  # first growth: a board that fills as nodes arrive
            view.start(TreeSummary(event.tree, {"root": event.node}, {"root": event.json}, {"root": ()}, None,
                                   self.rule, self.alpha, None, complete=False))
            self._show(view.highlighted_id)
            return
        view.add_scored(event.node, event.json)

    @on(TreeGrower.Grown)
    def _tree_grown(self, event: TreeGrower.Grown) -> None:
        old = self.board
        if old is not None and old.tree is event.summary.tree:
            for nid, err in old.errors.items():  # errors stay with their node until it grows
                if not (nid == event.focus and event.summary.complete):
                    event.summary.errors.setdefault(nid, err)
        self.alpha, self.rule = event.summary.alpha, event.summary.rule
        view = self.query_one(RemedyTreeView)
        view.board = event.summary
        if event.focus is not None:
            view.select_id(event.focus)
        self._refresh_status()
        self._show(view.highlighted_id)
        stab = event.summary.stability
        if stab is not None:
            partial = (f" (stopped after {stab.resamples} of {event.summary.stability_asked})"
                       if stab.resamples < event.summary.stability_asked else "")
            self.say(f"stability{partial}: {stab.reading()}")
        elif old is not None and old.stability is not None and old.tree is event.summary.tree:
            self.say("stability shares cleared: the tree, α or rule changed (t measures again)")
        elif not event.summary.complete:
            self.say(f"growth stopped: {len(event.summary.nodes)} models scored; press g on a node to grow it")
        elif event.focus is not None:
            n = len(event.new_ids)
            self.say(f"{event.focus}: {n} new model(s) scored" if n else f"{event.focus}: no new models "
                     "(every move was pruned or reaches a model already in the tree)")

    @on(TreeGrower.Failed)
    def _growth_failed(self, event: TreeGrower.Failed) -> None:
        what = f"Could not grow {event.node_id}" if event.node_id else "Could not grow the tree"
        board = self.board
        if event.node_id is not None and board is not None:
            # keep what was scored before the failure, and say what stopped under the node
            board.errors[event.node_id] = event.error
            view = self.query_one(RemedyTreeView)
            view.redraw()
            view.select_id(event.node_id)
            self._show(event.node_id)
        else:
            self.query_one(NodeDetail).show_message(Text(f"{what}: {event.error}", style="bold"))
        self.query_one(StatusPanel).set_suggestion(Text.assemble((what, "bold"), f" — {event.error}"))

    # ---- showing a node -------------------------------------------------------------
    @on(Tree.NodeExpanded, "#tree")
    def _opened(self, event: Tree.NodeExpanded) -> None:
        """Opening a node that was not grown yet grows it (same as g)."""
        board, nid = self.board, event.node.data
        if board is None or nid not in board.nodes or not RemedyTreeView.growable(board, nid) or not board.complete:
            return
        if self.busy:
            event.node.collapse()
        self.query_one(RemedyTreeView).move_cursor(event.node)
        self.action_grow(nid)

    @on(Tree.NodeHighlighted, "#tree")
    def _highlighted(self, event: Tree.NodeHighlighted) -> None:
        self._cursor_moved(event.node.data)

    def _cursor_moved(self, nid: str | None) -> None:
        """From the tree's cursor watcher (same frame) and from NodeHighlighted (a frame later)."""
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
        if "; evidence" in reason:  # the evidence is in the node's detail (n goes there)
            reason = reason.split("; evidence")[0] + "; n shows why"
        status.set_suggestion(Text.assemble(("Suggested", "bold"), f" ({sug.rule}, α {board.alpha:g}): ",
                                            (f"{sug.node} {label}", "bold"), f" — {reason}"))

    # ---- charts -----------------------------------------------------------------------
    def _show_charts(self, nid: str) -> None:
        """Box–Cox profile at once (its data are in the node); the other charts on request."""
        assert self.board is not None
        prof = self.board.nodes[nid].detail.boxcox
        box = self.query_one("#boxcox", PlotView)
        if prof is not None:
            box.show(*boxcox_figure(prof, self.markers))
        else:
            box.show(None, message=f"{nid} is not a Box–Cox node: its profile is shown on nodes made by the "
                     "'Box–Cox y' move")
        self._request_charts(nid)

    def charts_visible(self) -> bool:
        """True when the residual or curve chart is on screen."""
        if self.has_class("-wide"):
            return True
        return self.query_one("#views", TabbedContent).active in ("tab-residuals", "tab-curve")

    def _request_charts(self, nid: str) -> None:
        """Draw kept chart data at once; ask for new data only for a visible chart."""
        maker = self.query_one(ChartMaker)
        kept = maker.kept(nid)
        if kept is not None:
            self._draw_charts(kept)
            return
        for pid in CHART_PANES:
            self.query_one(pid, PlotView).show(None, message=f"drawing {nid}…")
        if self.charts_visible() and self.board is not None:
            maker.request(self.board, nid)

    @on(ChartMaker.Ready)
    def _charts_ready(self, event: ChartMaker.Ready) -> None:
        if self._current() == event.data.node_id:
            self._draw_charts(event.data)

    def on_tabbed_content_tab_activated(self, event: TabbedContent.TabActivated) -> None:
        nid = self._current()
        if nid is not None and self.board is not None and nid in self.board.nodes:
            self._request_charts(nid)

    def _draw_charts(self, data: ChartData) -> None:
        st = self.board.tree.study if self.board is not None else None
        for rid, cid in (("#residuals", "#curve"), ("#residuals-wide", "#curve-wide")):
            if data.residuals is None or st is None:
                self.query_one(rid, PlotView).show(None, message=data.error or "no chart")
                self.query_one(cid, PlotView).show(None, message=data.error or "no chart")
                continue
            self.query_one(rid, PlotView).show(*residual_figure(data.residuals, st.x_name, self.markers))
            self.query_one(cid, PlotView).show(*curve_figure(data.curve, st.x_name, st.y_name, self.markers))

    # ---- actions --------------------------------------------------------------------
    def _refuse_while_busy(self, what: str) -> bool:
        if self.busy:
            self.say(f"still scoring: {what} when it finishes (Esc stops growing)", warning=True)
            return True
        if self.board is None:
            self.say("nothing to work on yet", warning=True)
            return True
        return False

    def _current(self) -> str | None:
        return self.query_one(RemedyTreeView).highlighted_id

    def action_grow(self, nid: str | None = None) -> None:
        nid = nid or self._current()
        if nid is None or self._refuse_while_busy("grow"):
            return
        board = self.board
        assert board is not None
        node = board.nodes[nid]
        if node.score is None:
            self.say(f"{nid} could not be scored, so it cannot grow", warning=True)
            return
        if node.expanded:
            self.say(f"{nid} is already grown: its moves are listed under it (or pruned, with reasons, in the detail)")
            return
        self.query_one(StatusPanel).busy(f"growing {nid}…")
        self.query_one(TreeGrower).expand_node(board, nid)

    def action_cancel(self) -> None:
        self.query_one(TreeGrower).cancel()

    def action_stability(self) -> None:
        from ..dialogs import StabilityDialog
        from ..dialogs.stability import DEFAULT_RESAMPLES

        if self._refuse_while_busy("measure stability"):
            return
        board = self.board
        assert board is not None
        if not board.complete:
            self.say("growth was stopped part-way: grow the tree fully before measuring stability", warning=True)
            return
        last = board.stability

        def chosen(answer: tuple[int, int] | None) -> None:
            if answer is None or self.board is None or self.busy:
                return
            n, seed = answer
            self.query_one(StatusPanel).busy(f"stability 0/{n} resamples")
            self.query_one(TreeGrower).measure_stability(self.board, n, seed)

        self.app.push_screen(StabilityDialog(board.stability_asked or DEFAULT_RESAMPLES,
                                             0 if last is None else last.seed), chosen)

    def action_mark(self) -> None:
        nid = self._current()
        if nid is None or self.board is None:
            return
        view = self.query_one(RemedyTreeView)
        view.marked = None if view.marked == nid else nid
        self.say(f"marked {nid}: move to another node and press c to compare" if view.marked else f"unmarked {nid}")

    def action_compare(self) -> None:
        from .compare import CompareScreen

        nid, marked = self._current(), self.marked
        if self.board is None or nid is None:
            return
        if marked is None:
            self.say("mark a node with m first, then highlight another and press c", warning=True)
            return
        if marked not in self.board.json or nid not in self.board.json:
            self.say("the marked node is not scored yet", warning=True)
            return
        self.app.push_screen(CompareScreen(self.board, marked, nid))

    def action_sort(self) -> None:
        view = self.query_one(RemedyTreeView)
        view.sort = SORTS[(SORTS.index(view.sort) + 1) % len(SORTS)]
        self.say(f"siblings ordered by {view.sort if view.sort != 'moves' else 'the order of moves'}")

    def action_filter(self) -> None:
        view = self.query_one(RemedyTreeView)
        view.only_passing = not view.only_passing
        self.say("showing nodes that pass lack of fit (and their ancestors)" if view.only_passing
                 else "showing every node")

    def action_alpha(self) -> None:
        from ..dialogs import AlphaDialog

        if self._refuse_while_busy("change α"):
            return

        def done(value: float | None) -> None:
            if value is not None and value != self.alpha and self.board is not None:
                self.query_one(StatusPanel).busy(f"judging every node at α = {value:g}")
                self.query_one(TreeGrower).rejudge(self.board, value, self.rule)

        self.app.push_screen(AlphaDialog(self.alpha), done)

    def action_rule(self) -> None:
        if self._refuse_while_busy("change the rule"):
            return
        assert self.board is not None
        rule = RULES[(RULES.index(self.rule) + 1) % len(RULES)]
        self.query_one(StatusPanel).busy(f"suggesting by {rule}")
        self.query_one(TreeGrower).rejudge(self.board, self.alpha, rule)

    def action_goto_suggestion(self) -> None:
        board = self.board
        if board is None or board.suggestion is None or board.suggestion.node is None:
            self.say("no suggestion yet" if board is None or board.suggestion is None
                     else "no node qualifies for the suggestion", warning=True)
            return
        if not self.query_one(RemedyTreeView).select_id(board.suggestion.node):
            self.say("the suggested node is hidden by the filter (press f)", warning=True)

    def action_view(self, name: str) -> None:
        if self.has_class("-wide") and name in ("residuals", "curve"):
            self.say("the charts are on the right at this terminal size")
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
        if self.busy:  # growth started meanwhile: the tree must not be read while it changes
            self.say("not exported: scoring started; export when it finishes", warning=True)
            return
        try:
            req = self.request
            from bendwise.engine.read.files import describe_reading

            reading = None if req.path == "-" else describe_reading(
                req.path, delimiter=getattr(req, "delimiter", None), decimal=getattr(req, "decimal", None),
                sheet=getattr(req, "sheet", None))
            written = export_node(board.tree, nid, path, force=force, data_path=req.path, reading=reading,
                                  report=report, rule=board.rule, stability=board.stability)
        except FileExistsError:
            def answer(yes: bool | None) -> None:
                if yes:
                    self._write_export(nid, path, force=True, report=report)
                else:
                    self.say(f"not exported, kept as it was: {path}")

            self.app.push_screen(ConfirmDialog("The folder exists. Replace it?",
                                               f"{path}\nwould be replaced by the export of {nid}"),
                                 answer)
            return
        except (OSError, ValueError) as exc:
            self.say(f"not exported: {exc}", warning=True)
            return
        self.say(f"exported {nid} to {written}")

