"""The bendwise Textual app (only the App and its factory live here)."""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any, ClassVar

from textual.app import App
from textual.binding import Binding, BindingType

from .reading import DataRequest

__all__ = ["BendwiseApp", "make_app"]


class BendwiseApp(App[int]):
    """Walk the remedy tree of one study by keyboard; all statistics come from the engine."""

    CSS_PATH = "styles/app.tcss"
    TITLE = "bendwise"
    ENABLE_COMMAND_PALETTE = False
    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("question_mark,f1", "help", "Help", id="app.help", tooltip="Keys (generated from the bindings) and About"),
        Binding("q", "quit", "Quit", id="app.quit", tooltip="Quit bendwise"),
    ]

    def __init__(self, request: DataRequest, *, study: Any = None, frame: Any = None, depth: int = 2,
                 alpha: float = 0.05, rule: str = "aicc", export_dir: str | Path | None = None) -> None:
        super().__init__()
        self.request = request
        self._study = study
        self._frame = frame
        self.depth = depth
        self.alpha = alpha
        self.rule = rule
        self.export_dir = Path(export_dir) if export_dir is not None else Path.cwd()
        if os.environ.get("TERM") == "linux" or os.environ.get("BENDWISE_PLAIN"):
            self.add_class("-plain")
        if os.environ.get("TERM") == "linux" or "NO_COLOR" in os.environ:
            self.add_class("-mono")  # colour carries nothing: the cursor row is reverse video

    def notify(self, message: str, *, title: str = "", severity: str = "information", **kwargs: Any) -> None:
        """Messages go to the screen's message line when it has one (a toast would cover the numbers
        and run off an 80-column screen); otherwise a toast kept inside the screen (see app.tcss)."""
        from .widgets.status import MessageLine

        lines = list(self.screen.query(MessageLine)) if self.is_running else []
        if lines:
            lines[0].say(f"{title}: {message}" if title else message, warning=severity != "information")
            return
        super().notify(message, title=title, severity=severity, **kwargs)  # type: ignore[arg-type]

    def on_mount(self) -> None:
        from .screens.main import MainScreen
        from .screens.start import StartScreen

        req = self.request
        if self._study is not None or (req.y and req.x):
            self.push_screen(MainScreen(req, study=self._study, depth=self.depth, alpha=self.alpha, rule=self.rule))
        else:
            self.push_screen(StartScreen(req, frame=self._frame, depth=self.depth, alpha=self.alpha, rule=self.rule))
        self._study = self._frame = None  # the screens own them now

    def action_help(self) -> None:
        from .screens.help import HelpScreen

        if not isinstance(self.screen, HelpScreen):
            self.push_screen(HelpScreen())

    async def action_quit(self) -> None:
        self.workers.cancel_all()
        self.exit(0)


def make_app(
    data: str | Path | None = None,
    *,
    y: str | None = None,
    x: str | None = None,
    covariates: tuple[str, ...] | list[str] = (),
    depth: int = 2,
    alpha: float = 0.05,
    rule: str = "aicc",
    study: Any = None,
    frame: Any = None,
    request: DataRequest | None = None,
    export_dir: str | Path | None = None,
) -> BendwiseApp:
    """The one way to build the app, for the CLI and the tests.

    ``data`` (or a full ``request``) names the table; with ``y`` and ``x`` the app opens on the
    tree, otherwise on the start screen. A ``study`` (or ``frame``) already loaded by the CLI is
    used as is; otherwise the app reads the table in a worker.
    """
    if request is None:
        if data is None:
            from .reading import demo_request

            request = demo_request()
        else:
            request = DataRequest(str(data), y, x, tuple(covariates))
    return BendwiseApp(request, study=study, frame=frame, depth=depth, alpha=alpha, rule=rule, export_dir=export_dir)
