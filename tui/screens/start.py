"""Start screen: choose the response, the predictor and the admitted covariates by keyboard.

Lists every column (type, distinct values, missing cells) and, for the highlighted column as a
candidate predictor, its replicate structure (levels, replicates per level).
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any, ClassVar

from rich.text import Text
from textual import on, work
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.message import Message
from textual.screen import Screen
from textual.widgets import DataTable, Footer, Static

from ..reading import DataRequest, build_study, read_frame
from ..widgets.formatting import num
from ..widgets.status import MessageLine

if TYPE_CHECKING:
    from bendwise.engine.stats.study import Study

__all__ = ["StartScreen"]


class StartScreen(Screen):
    """Pick columns, then grow the tree."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("y", "role('y')", "Response", id="start.response", tooltip="Use the highlighted column as the response y"),
        Binding("x", "role('x')", "Predictor", id="start.predictor",
                tooltip="Use the highlighted column as the predictor x (its settings are the replicate levels)"),
        Binding("c,space", "toggle_covariate", "Covariate", id="start.covariate",
                tooltip="Admit (or drop) the highlighted column as a covariate the tree may add"),
        Binding("r", "toggle_runs", "Runs", id="start.runs",
                tooltip="Mark (or unmark) the highlighted column as the run (day, batch): a random intercept in "
                "every model, never a fixed covariate"),
        Binding("g,enter", "go", "Grow", id="start.go", tooltip="Build the study from the chosen columns and grow the tree"),
    ]

    class TableLoaded(Message):
        """The table was read; its columns are described (start screen)."""

        def __init__(self, frame: Any, columns: tuple, previews: dict) -> None:
            super().__init__()
            self.frame = frame
            self.columns = columns
            self.previews = previews


    class StudyBuilt(Message):
        """Response, predictor and covariates were chosen and cleaned into a Study."""

        def __init__(self, study: Study) -> None:
            super().__init__()
            self.study = study


    class LoadFailed(Message):
        """Reading the table or building the study was refused by the engine (one line)."""

        def __init__(self, error: str) -> None:
            super().__init__()
            self.error = error

    def __init__(self, request: DataRequest, *, frame: Any = None, depth: int = 2, alpha: float = 0.05,
                 rule: str = "aicc") -> None:
        super().__init__()
        self.request = request
        self.frame = frame
        self.depth, self.alpha, self.rule = depth, alpha, rule
        self.columns: dict[str, Any] = {}
        self.previews: dict[str, Any] = {}
        self.y: str | None = request.y
        self.x: str | None = request.x
        self.covariates: list[str] = list(request.covariates)
        self.runs: str | None = request.runs
        self._building = False

    def compose(self) -> ComposeResult:
        yield Static(Text.assemble(("bendwise", "bold"), f" · {self.request.source} · choose the columns"), id="start-title")
        table: DataTable = DataTable(id="columns", cursor_type="row", zebra_stripes=False)
        yield table
        yield Static("", id="preview")
        yield Static("", id="choice")
        yield Static(f"reading {self.request.source}…", id="start-message")
        yield MessageLine(id="message")
        yield Footer(compact=True)

    def on_mount(self) -> None:
        table = self.query_one("#columns", DataTable)
        self._role_column = table.add_columns("role", "column", "type", "distinct", "missing")[0]
        table.focus()
        self._show_choice()
        self._describe()

    # ---- workers ----------------------------------------------------------------------
    @work(thread=True, exclusive=True, exit_on_error=False, group="start")
    def _describe(self) -> None:
        from bendwise.engine.errors import BendwiseError
        from bendwise.engine.read.preview import describe_columns, replicate_preview

        try:
            frame = self.frame if self.frame is not None else read_frame(self.request)
            cols = describe_columns(frame)
            previews = {c.name: replicate_preview(frame, c.name) for c in cols if c.kind == "numeric"}
        except BendwiseError as exc:
            self.post_message(self.LoadFailed(str(exc)))
            return
        self.post_message(self.TableLoaded(frame, cols, previews))

    @work(thread=True, exclusive=True, exit_on_error=False, group="start")
    def _build(self, req: DataRequest) -> None:
        from bendwise.engine.errors import BendwiseError

        try:
            study = build_study(req, self.frame)
        except BendwiseError as exc:
            self.post_message(self.LoadFailed(str(exc)))
            return
        self.post_message(self.StudyBuilt(study))

    # ---- messages ---------------------------------------------------------------------
    @on(TableLoaded)
    def _loaded(self, event: TableLoaded) -> None:
        self.frame = event.frame
        self.columns = {c.name: c for c in event.columns}
        self.previews = event.previews
        n = len(event.frame)
        self.query_one("#start-title", Static).update(
            Text.assemble(("bendwise", "bold"), f" · {self.request.source} · {n:,} rows · {len(self.columns)} columns"))
        self._fill()
        self.query_one("#start-message", Static).update(
            "y = response · x = predictor · c/space = covariate · r = runs (day, batch) · Enter = grow the tree")

    @on(LoadFailed)
    def _failed(self, event: LoadFailed) -> None:
        self._building = False
        self.query_one("#start-message", Static).update(Text.assemble(("NOT POSSIBLE: ", "bold"), event.error))

    @on(StudyBuilt)
    def _built(self, event: StudyBuilt) -> None:
        from .main import MainScreen

        req = self.request.choose(self.y or "", self.x or "", tuple(self.covariates), self.runs)
        self.app.switch_screen(MainScreen(req, study=event.study, depth=self.depth, alpha=self.alpha, rule=self.rule))

    @on(DataTable.RowSelected, "#columns")
    def _selected(self, event: DataTable.RowSelected) -> None:
        self.action_go()  # Enter on the table

    @on(DataTable.RowHighlighted, "#columns")
    def _highlighted(self, event: DataTable.RowHighlighted) -> None:
        self._show_preview(event.row_key.value if event.row_key is not None else None)

    # ---- display ----------------------------------------------------------------------
    def _role(self, name: str) -> str:
        if name == self.y:
            return "y"
        if name == self.x:
            return "x"
        if name == self.runs:
            return "runs"
        return "cov" if name in self.covariates else ""

    def _fill(self) -> None:
        """Fill the table once; later changes touch only the role cells (no clear/refill)."""
        table = self.query_one("#columns", DataTable)
        if table.row_count == 0:
            for c in self.columns.values():
                kind = c.kind if not c.non_numeric else f"{c.kind} ({c.non_numeric} not numbers)"
                table.add_row(*(Text(v) for v in (self._role(c.name), c.name, kind, f"{c.distinct:,}",
                                                   f"{c.missing:,}")), key=c.name)
        else:
            role_key = self._role_column
            for c in self.columns.values():
                table.update_cell(c.name, role_key, Text(self._role(c.name)))
        if self.columns:
            self._show_preview(self._current())
        self._show_choice()

    def _current(self) -> str | None:
        table = self.query_one("#columns", DataTable)
        if not self.columns:
            return None
        key = table.coordinate_to_cell_key(table.cursor_coordinate).row_key
        return key.value

    def _show_preview(self, name: str | None) -> None:
        box = self.query_one("#preview", Static)
        if name is None:
            box.update("")
            return
        p = self.previews.get(name)
        if p is None:
            box.update(Text.assemble((f"{name}", "bold"), ": text column — can be a categorical covariate, "
                                     "not the response or the predictor"))
            return
        levels = "  ".join(f"{num(v, 6)}×{k}" for v, k in p.counts)
        reps = f"{p.min_replicates}" if p.min_replicates == p.max_replicates else f"{p.min_replicates}–{p.max_replicates}"
        more = f"  … {p.more_levels} more" if p.more_levels else ""
        box.update(Text.assemble(
            (f"{name} as the predictor", "bold"), f": {p.levels:,} levels, {p.replicated_levels:,} replicated, "
            f"{reps} rows per level\n",
            ("pure error available" if p.testable else "pure-error test NOT available", "bold"), f" — {p.note}\n",
            f"levels (value×rows): {levels}{more}"))

    def _show_choice(self) -> None:
        covs = ", ".join(self.covariates) if self.covariates else "none"
        self.query_one("#choice", Static).update(Text.assemble(
            ("response y: ", "bold"), self.y or "— (press y)", ("   predictor x: ", "bold"), self.x or "— (press x)",
            ("   covariates: ", "bold"), covs, ("   runs: ", "bold"), self.runs or "none"))

    # ---- actions ----------------------------------------------------------------------
    def action_role(self, role: str) -> None:
        name = self._current()
        if name is None:
            return
        if name not in self.previews:
            self.notify(f"{name} is not numeric: it cannot be the {'response' if role == 'y' else 'predictor'}",
                        severity="warning")
            return
        if role == "y":
            self.y = name
            if self.x == name:
                self.x = None
        else:
            self.x = name
            if self.y == name:
                self.y = None
        if name in self.covariates:
            self.covariates.remove(name)
        if name == self.runs:
            self.runs = None
        self._fill()

    def action_toggle_runs(self) -> None:
        """Mark the highlighted column as the runs column (again: unmark)."""
        name = self._current()
        if name is None:
            return
        if name in (self.y, self.x):
            self.notify(f"{name} is already the {'response' if name == self.y else 'predictor'}", severity="warning")
            return
        self.runs = None if self.runs == name else name
        if name in self.covariates:
            self.covariates.remove(name)
        self._fill()

    def action_toggle_covariate(self) -> None:
        name = self._current()
        if name is None:
            return
        if name in (self.y, self.x):
            self.notify(f"{name} is already the {'response' if name == self.y else 'predictor'}", severity="warning")
            return
        if name in self.covariates:
            self.covariates.remove(name)
        else:
            self.covariates.append(name)
            if name == self.runs:
                self.runs = None
        self._fill()

    def action_go(self) -> None:
        if self._building or self.frame is None:
            return
        if not self.y or not self.x:
            self.notify("choose a response (y) and a predictor (x) first", severity="warning")
            return
        self._building = True
        self.query_one("#start-message", Static).update("building the study…")
        self._build(self.request.choose(self.y, self.x, tuple(self.covariates), self.runs))
