"""ChartMaker: computes a node's chart data (residuals by level, fitted curve) in a worker.

Chart data cost a pass over the rows, so they are computed only when asked for a visible chart,
once the cursor rests, and kept per node (scores never change). The worker returns the data;
``on_worker_state_changed`` turns them into a ``Ready`` message for the screen to draw.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from textual import work
from textual.message import Message
from textual.widget import Widget
from textual.worker import Worker, WorkerState

if TYPE_CHECKING:
    from textual.timer import Timer

    from ..messages import TreeSummary

__all__ = ["ChartMaker", "ChartData"]


@dataclass(frozen=True, slots=True)
class ChartData:
    """Chart data of one node, or why there are none."""

    node_id: str
    residuals: Any
    curve: Any
    error: str | None = None


class ChartMaker(Widget):
    """Invisible keeper of chart data per node."""

    DEFAULT_CSS = "ChartMaker { display: none; }"
    REST = 0.12
    """Seconds the cursor must rest on a node before its chart data are computed."""

    class Ready(Message):
        """Chart data of one node are ready (computed now or kept from before)."""

        def __init__(self, data: ChartData) -> None:
            super().__init__()
            self.data = data

    def __init__(self, *, id: str | None = None) -> None:
        super().__init__(id=id)
        self._kept: dict[str, ChartData] = {}
        self._timer: Timer | None = None

    def kept(self, nid: str) -> ChartData | None:
        """Data computed before for ``nid`` (None: not yet)."""
        return self._kept.get(nid)

    def request(self, board: TreeSummary, nid: str) -> None:
        """Compute ``nid``'s chart data once the cursor has rested on it."""
        if self._timer is not None:
            self._timer.stop()
        self._timer = self.set_timer(self.REST, lambda: self._compute(board, nid))

    def on_worker_state_changed(self, event: Worker.StateChanged) -> None:
        if event.worker.group == "charts" and event.state == WorkerState.SUCCESS:
            data = event.worker.result
            if isinstance(data, ChartData):
                self._kept[data.node_id] = data
                self.post_message(self.Ready(data))

    @work(thread=True, exclusive=True, exit_on_error=False, group="charts")
    def _compute(self, board: TreeSummary, nid: str) -> ChartData | None:
        import numpy as np
        from bendwise.engine.errors import BendwiseError
        from bendwise.engine.handon.chart_data import curve_chart, residual_chart

        if nid in self._kept or nid not in board.nodes:
            return None
        node = board.nodes[nid]
        if node.score is None:
            return ChartData(nid, None, None, error=f"{nid} was not scored: {node.error}")
        try:
            res = residual_chart(board.tree.study, node.score)
            cur = curve_chart(board.tree.study, node.score)
        except (BendwiseError, ValueError, FloatingPointError, np.linalg.LinAlgError) as exc:
            return ChartData(nid, None, None, error=f"chart unavailable: {exc}")
        return ChartData(nid, res, cur)
