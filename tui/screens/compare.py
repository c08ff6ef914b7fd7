"""Two nodes side by side: the key numbers of each, from the same tree and α."""

from __future__ import annotations

from typing import ClassVar

from rich.table import Table
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import VerticalScroll
from textual.screen import Screen
from textual.widgets import Footer, Static

from ..messages import TreeSummary
from ..widgets.formatting import (
    fmt_p,
    num,
    stability_words,
    test_words,
    verdict_style,
    verdict_word,
)

__all__ = ["CompareScreen", "compare_table"]


def _path(board: TreeSummary, nid: str) -> str:
    moves = [n.move for n in board.tree.path(nid)[1:]]
    return " → ".join(moves) if moves else "(the straight line)"


def _relation(board: TreeSummary, a: str, b: str) -> str:
    na, nb = board.nodes[a], board.nodes[b]
    pa = [n.id for n in board.tree.path(a)]
    pb = [n.id for n in board.tree.path(b)]
    if a == b:
        return "the same node"
    if a in pb:
        rel = f"{b} is reached from {a}"
    elif b in pa:
        rel = f"{a} is reached from {b}"
    else:
        rel = "on different branches"
    if na.spec.response != nb.spec.response:
        return f"{rel}; different response scales: compare AICc/BIC (original y scale), not F"
    if na.spec.weights != nb.spec.weights:
        return f"{rel}; different weights: compare AICc/BIC, not F"
    return f"{rel}; same response scale and weights"


def compare_table(board: TreeSummary, a: str, b: str) -> Table:
    """Rows of key numbers for nodes ``a`` and ``b``."""
    st = board.tree.study
    t = Table(box=None, padding=(0, 1), show_edge=False, header_style="bold", expand=True)
    t.add_column("", style="bold", no_wrap=True, ratio=None)
    t.add_column(a, ratio=1)
    t.add_column(b, ratio=1)

    def cells(fn) -> list:
        return [fn(n) for n in (a, b)]

    def verdict(n: str) -> Text:
        w = verdict_word(board.json[n], board.alpha)
        return Text(w, style=verdict_style(w))

    def score(n: str, fn, default: str = "—"):
        s = board.nodes[n].score
        return default if s is None else fn(s)

    j = board.json
    rows = [
        ("model", cells(lambda n: board.nodes[n].spec.label(st.y_name, st.x_name))),
        ("moves", cells(lambda n: _path(board, n))),
        (f"verdict at α {board.alpha:g}", cells(verdict)),
        ("lack of fit", cells(lambda n: f"{j[n]['lack_of_fit'].get('kind', '')}: {test_words(j[n]['lack_of_fit'])}")),
        ("pure-error test", cells(lambda n: test_words(j[n].get("lack_of_fit_pure")))),
        ("vs its parent", cells(lambda n: test_words(j[n].get("nested")) if board.nodes[n].parent else "—")),
        ("k (parameters)", cells(lambda n: str(j[n].get("k") or "—"))),
        ("σ̂ (fitted scale)", cells(lambda n: score(n, lambda s: f"{num(s.fit.sigma, 5)} on {s.fit.df_resid} df"))),
        ("R²", cells(lambda n: score(n, lambda s: num(s.fit.r2, 6)))),
        ("log-lik (y scale)", cells(lambda n: num(j[n].get("criteria", {}).get("loglik"), 6))),
        ("AICc", cells(lambda n: num(j[n].get("criteria", {}).get("aicc"), 6))),
        ("ΔAICc to best", cells(lambda n: num(j[n].get("criteria", {}).get("delta_aicc"), 3))),
        ("BIC", cells(lambda n: num(j[n].get("criteria", {}).get("bic"), 6))),
        ("PRESS", cells(lambda n: num(j[n].get("press"), 5))),
        ("max |stud. resid.|", cells(lambda n: num(j[n].get("max_studentized_residual"), 3))),
        ("equal spread p", cells(lambda n: fmt_p((j[n].get("spread") or {}).get("p")))),
        ("max departure", cells(lambda n: num(j[n].get("max_deviation_from_line"), 4))),
        ("warnings", cells(lambda n: "; ".join(j[n].get("warnings") or []) or "none")),
    ]
    if board.stability is not None:
        rows.insert(3, ("stability", cells(lambda n: stability_words(board, n))))
    for name, (va, vb) in rows:
        t.add_row(*(v if isinstance(v, Text) else Text(str(v)) for v in (name, va, vb)))
    return t


class CompareScreen(Screen):
    """The marked node against the highlighted node."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("escape", "close", "Back", id="compare.back", tooltip="Back to the tree"),
        Binding("c", "close", "Back", show=False, id="compare.back2", tooltip="Back to the tree"),
        Binding("x", "swap", "Swap", id="compare.swap", tooltip="Swap the two columns"),
    ]

    def __init__(self, board: TreeSummary, a: str, b: str) -> None:
        super().__init__()
        self.board = board
        self.a = a
        self.b = b
        self.marked = a

    def compose(self) -> ComposeResult:
        yield Static(self._title(), id="compare-title")
        with VerticalScroll(id="compare-body"):
            yield Static(self._body(), id="compare-table")
        yield Footer(compact=True)

    def _title(self) -> Text:
        other = self.b if self.a == self.marked else self.a
        return Text.assemble(("Compare ", "bold"), f"{self.a} | {self.b} (marked {self.marked}, highlighted {other})"
                             f" — {_relation(self.board, self.a, self.b)}")

    def _body(self):
        from bendwise.engine.tree.tree import POST_SEARCH_CAUTION
        from rich.console import Group

        return Group(compare_table(self.board, self.a, self.b), Text(""), Text(POST_SEARCH_CAUTION, style="italic"))

    def on_mount(self) -> None:
        self.query_one("#compare-body").focus()

    def action_close(self) -> None:
        if self.is_current:  # a second close key before the screen is gone must not pop the one beneath
            self.app.pop_screen()

    def action_swap(self) -> None:
        self.a, self.b = self.b, self.a
        self.query_one("#compare-title", Static).update(self._title())
        self.query_one("#compare-table", Static).update(self._body())
