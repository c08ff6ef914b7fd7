"""Ask where to export the selected node and which report to write.

Returns ``(path, report)`` with report 'md', 'html' or 'both' (None: cancelled).
"""

from __future__ import annotations

from typing import ClassVar

from textual import on
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Vertical
from textual.widgets import Input, Label, Static

from .once import OnceModal

__all__ = ["ExportDialog", "report_choices"]


def report_choices() -> tuple[str, ...]:
    """The reports offered: all three when matplotlib is installed (both first), else Markdown only."""
    from bendwise.engine.handon.html import html_available

    return ("both", "html", "md") if html_available() else ("md",)


_WORDS = {"both": "report.md + report.html", "html": "report.html (figures, prints to A4/Letter)",
          "md": "report.md (plain text)"}


class ExportDialog(OnceModal[tuple[str, str] | None]):
    """Type a folder path; ctrl+t switches the report; Enter exports (an existing folder is only
    replaced after a yes)."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("escape", "cancel", "Cancel", id="export.cancel", tooltip="Do not export"),
        Binding("ctrl+t", "next_report", "Report", id="export.report", tooltip="Markdown, HTML or both"),
    ]

    def __init__(self, node_id: str, label: str, default: str) -> None:
        super().__init__()
        self.node_id = node_id
        self.label = label
        self.default = default
        self.choices = report_choices()
        self.report = self.choices[0]

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Label(f"Export {self.node_id}: {self.label}", classes="dialog-title")
            yield Input(value=self.default, id="export-path")
            yield Static(self._report_text(), id="export-report")
            yield Static("", id="export-error", classes="dialog-error")
            yield Static("Writes a folder: spec.json, reproduce.py and the report. Enter = export   "
                         "ctrl+t = switch report   Esc = cancel   ctrl+u = clear", classes="dialog-keys")

    def _report_text(self) -> str:
        text = f"Report: {_WORDS[self.report]}"
        if len(self.choices) == 1:
            text += "  (report.html needs matplotlib: pip install 'bendwise[report]')"
        return text

    def on_mount(self) -> None:
        inp = self.query_one(Input)
        inp.cursor_blink = False
        inp.focus()

    def action_next_report(self) -> None:
        """Cycle both → html → md."""
        i = self.choices.index(self.report)
        self.report = self.choices[(i + 1) % len(self.choices)]
        self.query_one("#export-report", Static).update(self._report_text())

    @on(Input.Submitted, "#export-path")
    def _submitted(self, event: Input.Submitted) -> None:
        path = event.value.strip()
        if not path:
            self.query_one("#export-error", Static).update("give a folder path, e.g. my-model")
            return
        self.finish((path, self.report))

    def action_cancel(self) -> None:
        self.finish(None)
