"""Yes/no question (e.g. replace an existing file). Returns True only on an explicit yes."""

from __future__ import annotations

from typing import ClassVar

from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Vertical
from textual.widgets import Label, Static

from .once import OnceModal

__all__ = ["ConfirmDialog"]


class ConfirmDialog(OnceModal[bool]):
    """Ask a question; y confirms, n or Esc declines."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("y", "answer(True)", "Yes", id="confirm.yes", tooltip="Confirm"),
        Binding("n", "answer(False)", "No", id="confirm.no", tooltip="Decline"),
        Binding("escape", "answer(False)", "Cancel", id="confirm.cancel", tooltip="Decline"),
    ]

    def __init__(self, question: str, detail: str = "") -> None:
        super().__init__()
        self.question = question
        self.detail = detail

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Label(self.question, classes="dialog-title")
            if self.detail:
                yield Static(self.detail, classes="dialog-note")
            yield Static("y = yes   n / Esc = no", classes="dialog-keys")

    def action_answer(self, yes: bool) -> None:
        self.finish(yes)
