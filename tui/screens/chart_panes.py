"""The main screen's charts: residuals by level, fitted curve, Box–Cox profile.

Chart data cost a pass over the rows, so they are computed only for a visible chart, once the
cursor rests, and kept per node (scores never change).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from textual.widgets import TabbedContent

from ..messages import ChartsComputed
from ..widgets.charts import Markers, boxcox_figure, curve_figure, residual_figure
from ..widgets.plot import PlotView
from ..widgets.remedy_tree import RemedyTreeView

if TYPE_CHECKING:
    from textual.screen import Screen
    from textual.timer import Timer

    from ..messages import TreeSummary

    _Base = Screen
else:
    _Base = object

__all__ = ["ChartPanes"]


class ChartPanes(_Base):
    """Mixin for MainScreen (which provides the panes, the board and the chart worker)."""

    board: TreeSummary | None
    markers: Markers
    _charts: dict[str, ChartsComputed]
    _chart_timer: Timer | None

    if TYPE_CHECKING:

        def _current(self) -> str | None: ...

    def _show_charts(self, nid: str) -> None:
        """Box–Cox profile at once (its data are in the node); the other charts on request."""
        assert self.board is not None
        prof = self.board.nodes[nid].detail.boxcox
        box = self.query_one("#boxcox", PlotView)
        if prof is not None:
            box.show(*boxcox_figure(prof, self.markers))
        else:
            box.show(None, message=f"{nid} is not a Box–Cox node: its profile is shown on nodes made by the "
                     "'Box–Cox y' move")
        self._request_charts(nid)

    # handlers by name (on_…): Textual's @on only registers methods of MessagePump classes
    def on_charts_computed(self, event: ChartsComputed) -> None:
        self._charts[event.node_id] = event
        if self.query_one(RemedyTreeView).highlighted_id == event.node_id:
            self._draw_charts(event)

    def _charts_visible(self) -> bool:
        if self.has_class("-wide"):
            return True
        return self.query_one("#views", TabbedContent).active in ("tab-residuals", "tab-curve")

    def _request_charts(self, nid: str) -> None:
        """Draw cached chart data at once; compute new data only for a visible chart, and only once
        the cursor rests (each computation is a pass over the rows)."""
        cached = self._charts.get(nid)
        if cached is not None:
            self._draw_charts(cached)
            return
        for pid in ("#residuals", "#curve", "#residuals-wide", "#curve-wide"):
            self.query_one(pid, PlotView).show(None, message=f"drawing {nid}…")
        if self._chart_timer is not None:
            self._chart_timer.stop()
        if self._charts_visible():
            self._chart_timer = self.set_timer(0.12, lambda: self._charts_for_cursor(nid))

    def _charts_for_cursor(self, nid: str) -> None:
        if self._current() == nid and nid not in self._charts:
            self._compute_charts(nid)  # type: ignore[attr-defined]  # TreeWork's worker

    def on_tabbed_content_tab_activated(self, event: TabbedContent.TabActivated) -> None:
        nid = self._current()
        if nid is not None and self.board is not None and nid in self.board.nodes:
            self._request_charts(nid)

    def _draw_charts(self, ev: ChartsComputed) -> None:
        st = self.board.tree.study if self.board is not None else None
        for rid, cid in (("#residuals", "#curve"), ("#residuals-wide", "#curve-wide")):
            if ev.residuals is None or st is None:
                self.query_one(rid, PlotView).show(None, message=ev.error or "no chart")
                self.query_one(cid, PlotView).show(None, message=ev.error or "no chart")
                continue
            self.query_one(rid, PlotView).show(*residual_figure(ev.residuals, st.x_name, self.markers))
            self.query_one(cid, PlotView).show(*curve_figure(ev.curve, st.x_name, st.y_name, self.markers))
