"""Help generated from the bindings themselves, and the About/caution section."""

from __future__ import annotations

from typing import ClassVar

from rich.console import Group, RenderableType
from rich.table import Table
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import VerticalScroll
from textual.widgets import Static

from ..dialogs.once import OnceModal

__all__ = ["HelpScreen", "binding_sections", "ABOUT"]

ABOUT = (
    "bendwise tests whether a straight line fits data with repeated measurements at the same settings "
    "(the pure-error lack-of-fit F test), grows a tree of candidate remedies — transforms of y or x, "
    "polynomial terms, covariates, weights — scores every node on one scale and suggests one, with its reasons. "
    "Verdicts are written as words (pass, FAIL, untestable), never as colour alone. Each line of the tree "
    "names the move that made the node from its parent ('+ run_day', 'log y', 'w θ=½' for weights, "
    "'bc λ=1.31' for Box–Cox y); the detail pane gives the whole model."
)


def tree_marks() -> str:
    """What the marks in the tree mean, with the glyphs the tree draws on this terminal."""
    from ..widgets.remedy_tree import RemedyTreeView

    closed, opened = RemedyTreeView.icons()
    return (f"In the tree '*' marks the suggested node, '=' the node marked for comparison, '{closed.strip()}' a "
            f"node whose children are hidden or not grown yet (→ or Enter opens it; opening a node not grown yet "
            f"grows it) and '{opened.strip()}' an open node. After a stability run (t) each line shows, after its "
            f"verdict, the share of resamples the node won; the shares go when the tree, α or rule changes.")


def binding_sections(app) -> list[tuple[str, list[Binding]]]:
    """(section title, bindings) for every place the keys act, read from the classes."""
    from ..widgets.remedy_tree import RemedyTreeView
    from .compare import CompareScreen
    from .main import MainScreen
    from .start import StartScreen

    def own(cls) -> list[Binding]:
        return [b for b in cls.BINDINGS if isinstance(b, Binding)]

    return [
        ("Everywhere", own(type(app))),
        ("Remedy tree (moving)", own(RemedyTreeView)),
        ("Main screen", own(MainScreen)),
        ("Compare screen", own(CompareScreen)),
        ("Start screen (choosing columns)", own(StartScreen)),
    ]


def _keys(app, b: Binding) -> str:
    keys = [k.strip() for k in b.key.split(",")]
    shown = []
    for k in keys:
        try:
            shown.append(app.get_key_display(Binding(k, b.action)))
        except Exception:  # noqa: BLE001 - a key name Textual cannot pretty-print
            shown.append(k)
    return " / ".join(shown)


def help_renderable(app) -> RenderableType:
    """Key tables and the About section."""
    from bendwise.engine.cautions import CAUTION
    from bendwise.engine.tree.tree import POST_SEARCH_CAUTION

    parts: list[RenderableType] = [Text("Keys", style="bold underline")]
    for title, bindings in binding_sections(app):
        t = Table(title=title, title_justify="left", title_style="bold", box=None, padding=(0, 1),
                  show_header=False, expand=True)
        t.add_column("key", no_wrap=True, style="bold", min_width=9)
        t.add_column("what it does", ratio=1)
        for b in bindings:
            t.add_row(Text(_keys(app, b)), Text(b.tooltip or b.description))
        parts += [t, Text("")]
    parts += [
        Text("About", style="bold underline"),
        Text(ABOUT),
        Text(tree_marks()),
        Text(""),
        Text(POST_SEARCH_CAUTION, style="italic"),
        Text(""),
        Text(CAUTION, style="bold"),
        Text("bendwise judges statistical adequacy only; where a laboratory's validated procedure or a regulation "
             "prescribes how a calibration is accepted, that procedure decides."),
    ]
    return Group(*parts)


class HelpScreen(OnceModal[None]):
    """Every key, generated from the bindings, and the About section."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("escape", "close", "Close", id="help.close", tooltip="Close help"),
        Binding("question_mark", "close", "Close", show=False, id="help.close2", tooltip="Close help"),
        Binding("q", "close", "Close", show=False, id="help.close3", tooltip="Close help"),
    ]

    def compose(self) -> ComposeResult:
        with VerticalScroll(id="help-body", classes="dialog wide-dialog"):
            yield Static(help_renderable(self.app), id="help-text")
            yield Static("Esc, ? or q closes · ↑/↓ and PgUp/PgDn scroll", classes="dialog-keys")

    def on_mount(self) -> None:
        self.query_one("#help-body").focus()

    def action_close(self) -> None:
        self.finish(None)
