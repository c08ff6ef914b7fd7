"""Change α, the level of the lack-of-fit verdicts."""

from __future__ import annotations

from typing import ClassVar

from textual import on
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Vertical
from textual.widgets import Input, Label, Static

from .once import OnceModal

__all__ = ["AlphaDialog", "parse_alpha"]


def parse_alpha(text: str) -> float:
    """A level strictly between 0 and 1; ValueError with a sentence otherwise."""
    try:
        val = float(text.strip())
    except ValueError:
        raise ValueError(f"{text.strip()!r} is not a number; give e.g. 0.05") from None
    if not 0 < val < 1:
        raise ValueError(f"α = {val:g} must lie strictly between 0 and 1, e.g. 0.05 or 0.01")
    return val


class AlphaDialog(OnceModal[float | None]):
    """Type a new α; Enter applies, Esc keeps the old one."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("escape", "cancel", "Cancel", id="alpha.cancel", tooltip="Keep the current α"),
    ]

    def __init__(self, current: float) -> None:
        super().__init__()
        self.current = current

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Label("Level α of the lack-of-fit verdicts", classes="dialog-title")
            yield Input(value=f"{self.current:g}", id="alpha-input", restrict=r"[0-9.eE+-]*")
            yield Static("", id="alpha-error", classes="dialog-error")
            yield Static("Enter = apply   Esc = cancel. Verdicts, the filter and the suggestion follow α; "
                         "the scores do not change.", classes="dialog-keys")

    def on_mount(self) -> None:
        inp = self.query_one(Input)
        inp.cursor_blink = False
        inp.focus()
        inp.select_all()

    @on(Input.Submitted, "#alpha-input")
    def _submitted(self, event: Input.Submitted) -> None:
        try:
            val = parse_alpha(event.value)
        except ValueError as exc:
            self.query_one("#alpha-error", Static).update(f"not applied: {exc}")
            return
        self.finish(val)

    def action_cancel(self) -> None:
        self.finish(None)
