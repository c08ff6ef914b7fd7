"""Ask where to export the selected node. Returns the path typed (None: cancelled)."""

from __future__ import annotations

from typing import ClassVar

from textual import on
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Vertical
from textual.widgets import Input, Label, Static

from .once import OnceModal

__all__ = ["ExportDialog"]


class ExportDialog(OnceModal[str | None]):
    """Type a file path; Enter exports (an existing file is only replaced after a yes)."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("escape", "cancel", "Cancel", id="export.cancel", tooltip="Do not export"),
    ]

    def __init__(self, node_id: str, label: str, default: str) -> None:
        super().__init__()
        self.node_id = node_id
        self.label = label
        self.default = default

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Label(f"Export {self.node_id}: {self.label}", classes="dialog-title")
            yield Input(value=self.default, id="export-path")
            yield Static("", id="export-error", classes="dialog-error")
            yield Static("Writes a folder: spec.json, reproduce.py, report.md. Enter = export   Esc = cancel   ctrl+u = clear",
                         classes="dialog-keys")

    def on_mount(self) -> None:
        inp = self.query_one(Input)
        inp.cursor_blink = False
        inp.focus()

    @on(Input.Submitted, "#export-path")
    def _submitted(self, event: Input.Submitted) -> None:
        path = event.value.strip()
        if not path:
            self.query_one("#export-error", Static).update("give a folder path, e.g. my-model")
            return
        self.finish(path)

    def action_cancel(self) -> None:
        self.finish(None)
