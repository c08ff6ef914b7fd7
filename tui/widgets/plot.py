"""A widget that draws a plotext figure at its own size.

plotext keeps its figure in module state, so figures are built only here, inside
``render()`` on the UI thread, sized to ``self.size``; the result is cached per size.
Works with plotext 5 (pinned < 6 in pyproject).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from rich.console import Group, RenderableType
from rich.text import Text
from textual.widget import Widget

__all__ = ["PlotView", "Figure"]

Figure = Callable[[Any], None]
"""Draws on the plotext module (``plt``): scatter, plot, lines, title…"""


class PlotView(Widget):
    """Renders a figure (a function of ``plt``) with a legend line of our own underneath."""

    DEFAULT_CSS = """
    PlotView { height: 1fr; width: 1fr; }
    """

    def __init__(self, *, id: str | None = None, classes: str | None = None) -> None:
        super().__init__(id=id, classes=classes)
        self._figure: Figure | None = None
        self._legend: Text = Text()
        self._message: str = "select a node to draw its chart"
        self._version = 0
        self._cache: tuple[tuple, RenderableType] | None = None

    def show(self, figure: Figure | None, legend: Text | str = "", message: str = "") -> None:
        """Set what to draw (None: show ``message`` instead)."""
        self._figure = figure
        self._legend = legend if isinstance(legend, Text) else Text(legend)
        self._message = message
        self._version += 1
        self._cache = None
        self.refresh()

    @property
    def figure(self) -> Figure | None:
        """The current figure function (None when showing a message)."""
        return self._figure

    def render(self) -> RenderableType:
        w, h = self.size.width, self.size.height
        if self._figure is None or w < 20 or h < 6:
            msg = self._message if self._figure is None else "(too small for a chart: widen the terminal)"
            return Text(msg, style="dim")
        key = (w, h, self._version)
        if self._cache is not None and self._cache[0] == key:
            return self._cache[1]
        import plotext as plt

        legend_lines = max(1, len(self._legend.wrap(self.app.console, w)))
        plt.clear_figure()
        # plotext clips figures to the terminal size it read when first imported (COLUMNS/LINES
        # or 80×24 without a tty); the widget knows its own size, so no clipping
        plt.limit_size(False, False)
        plt.theme("clear")
        plt.plotsize(w, max(h - legend_lines, 4))
        try:
            self._figure(plt)
            drawn = plt.build()
        except Exception as exc:  # noqa: BLE001 - a chart must never take the app down
            drawn = f"(chart unavailable: {type(exc).__name__}: {exc})"
        finally:
            plt.clear_figure()
        out = Group(Text.from_ansi(drawn, no_wrap=True, end=""), self._legend)
        self._cache = (key, out)
        return out
