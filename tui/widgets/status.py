"""Always-visible status: the suggested node, the post-search caution, messages, and progress.

Messages (what a key did, why it was refused) are written in a line of ours instead of toasts,
so nothing covers the numbers being read.
"""

from __future__ import annotations

from rich.console import RenderableType
from rich.text import Text
from textual.app import ComposeResult
from textual.containers import Horizontal, Vertical
from textual.reactive import reactive
from textual.renderables.bar import Bar as BarRenderable
from textual.timer import Timer
from textual.widgets import Label, ProgressBar, Static

from .formatting import glyph, plain_glyphs

__all__ = ["StatusPanel", "CautionLine", "PlainProgressBar", "MessageLine"]


class _PlainBar(BarRenderable):
    """'#####-----' for fonts without the thin bar glyphs (and for monochrome)."""

    def __rich_console__(self, console, options):  # type: ignore[override]
        width = self.width or options.max_width
        start, end = self.highlight_range
        start, end = max(int(start), 0), min(int(end), width)
        yield Text("-" * start + "#" * max(end - start, 0) + "-" * max(width - max(end, start), 0), end="")


class PlainProgressBar(ProgressBar):
    """ProgressBar drawn with ASCII on the Linux console."""

    BAR_RENDERABLE = _PlainBar


class MessageLine(Static):
    """The last message of the app, wrapped inside the screen; warnings start with a mark."""

    DEFAULT_CSS = """
    MessageLine { height: auto; max-height: 2; display: none; }
    MessageLine.-shown { display: block; }
    """

    message: reactive[str] = reactive("", init=False)
    """The text shown (empty: the line is hidden)."""
    warning: reactive[bool] = reactive(False, init=False)
    """True for a refusal or a problem: the line starts with '! ' in bold."""

    def say(self, text: str, *, warning: bool = False) -> None:
        """Show ``text`` (replacing the previous message)."""
        self.warning = warning
        self.message = " ".join(text.split())

    def watch_message(self) -> None:
        self._redraw()

    def watch_warning(self) -> None:
        self._redraw()

    def _redraw(self) -> None:
        self.set_class(bool(self.message), "-shown")
        if self.warning:
            self.update(Text.assemble(("! ", "bold"), (self.message, "bold")))
        else:
            self.update(Text.assemble(glyph("› ", "> "), self.message))


class CautionLine(Static):
    """POST_SEARCH_CAUTION: in full when it fits, else its first clause and a pointer to help."""

    def __init__(self, caution: str, *, id: str | None = None) -> None:
        super().__init__(id=id)
        self._caution = caution

    def render(self) -> RenderableType:
        mark = glyph("⚠ ", "! ")
        full = f"{mark}{self._caution}"
        if len(full) <= self.size.width or self.size.width == 0:
            return Text(full)
        head = self._caution.split(":")[0]
        for short in (f"{mark}{head}: treat them as descriptive (? for more)", f"{mark}{head} (? for more)"):
            if len(short) <= self.size.width:
                return Text(short)
        return Text(f"{mark}{head}", overflow="fold")


class StatusPanel(Vertical):
    """Suggestion line, caution line and (while working) a progress row with a cancel hint."""

    DEFAULT_CSS = """
    StatusPanel { height: auto; }
    StatusPanel > #suggestion { height: auto; max-height: 2; text-overflow: ellipsis; }
    StatusPanel > CautionLine { height: auto; max-height: 2; }
    StatusPanel > #progress-row { height: 1; display: none; }
    StatusPanel > #progress-row.-busy { display: block; }
    StatusPanel #progress-label { width: 1fr; text-wrap: nowrap; text-overflow: ellipsis; }
    StatusPanel ProgressBar { width: auto; }
    """

    def __init__(self, caution: str, *, id: str | None = None) -> None:
        super().__init__(id=id)
        self._caution = caution
        self._latest: tuple[str, int | None, int | None] | None = None
        self._timer: Timer | None = None

    def compose(self) -> ComposeResult:
        yield Static("Suggested: growing the tree…", id="suggestion")
        yield CautionLine(self._caution, id="caution")
        yield MessageLine(id="message")
        with Horizontal(id="progress-row"):
            bar_cls = PlainProgressBar if plain_glyphs() else ProgressBar
            yield bar_cls(total=None, show_eta=False, id="progress-bar")
            yield Label("", id="progress-label")

    def set_suggestion(self, text: Text | str) -> None:
        """Replace the suggestion line."""
        self.query_one("#suggestion", Static).update(text)

    def busy(self, label: str, done: int | None = None, total: int | None = None) -> None:
        """Show the progress row (indeterminate when ``total`` is None)."""
        self.query_one("#progress-row").add_class("-busy")
        bar = self.query_one("#progress-bar", ProgressBar)
        bar.update(total=total, progress=done or 0)
        # one fixed line: no need to lay the screen out again for each progress message
        self.query_one("#progress-label", Label).update(f" Esc cancels · {label}", layout=False)

    def progress(self, label: str, done: int | None = None, total: int | None = None) -> None:
        """Like ``busy`` while the row is shown, at most ten times a second (the keys come first)."""
        self._latest = (label, done, total)
        if self._timer is None:
            self._timer = self.set_timer(0.1, self._show_latest)

    def _show_latest(self) -> None:
        self._timer = None
        if self._latest is not None and self.is_busy:
            self.busy(*self._latest)

    def idle(self) -> None:
        """Hide the progress row."""
        self._latest = None
        self.query_one("#progress-row").remove_class("-busy")

    @property
    def is_busy(self) -> bool:
        """True while the progress row is shown."""
        return self.query_one("#progress-row").has_class("-busy")
