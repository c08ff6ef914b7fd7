"""The main screen's workers: every call into the engine that grows, scores or draws.

Each runs in a thread, holds the screen's tree lock while it touches the tree, checks the
worker's cancel flag between nodes, and ends by posting a past-tense message.
"""

from __future__ import annotations

import threading
from collections.abc import Iterator
from contextlib import contextmanager
from typing import TYPE_CHECKING

from textual import work
from textual.worker import get_current_worker

from ..messages import (
    ChartsComputed,
    GrowthFailed,
    NodeScored,
    ScoringProgressed,
    StudyBuilt,
    TreeGrown,
    TreeSummary,
    failure_line,
)
from .data import DataRequest, build_study

if TYPE_CHECKING:
    from bendwise.engine.stats.study import Study
    from textual.message import Message

__all__ = ["TreeWork"]


class TreeWork:
    """Mixin for MainScreen (it provides post_message, request, study, depth, alpha, rule, board)."""

    request: DataRequest
    study: Study | None
    depth: int
    alpha: float
    rule: str
    board: TreeSummary | None
    _lock: threading.Lock

    if TYPE_CHECKING:

        def post_message(self, message: Message) -> bool: ...

    @contextmanager
    def _scans_reported(self) -> Iterator[None]:
        """While a worker holds the tree, a study that scans files (the SQL engine) reports each
        scan in the status row."""
        study = self.study
        if study is None or not hasattr(study, "progress"):
            yield
            return
        before = study.progress

        def say(text: str) -> None:
            if text:
                self.post_message(ScoringProgressed(None, None, text, 0))

        study.progress = say
        try:
            yield
        finally:
            study.progress = before

    @work(thread=True, exclusive=True, exit_on_error=False, group="tree")
    def _grow(self) -> None:
        from bendwise.engine import check
        from bendwise.engine.tree.tree import RemedyTree

        worker = get_current_worker()
        with self._lock, self._scans_reported():
            try:
                study = self.study
                if study is None:
                    self.post_message(ScoringProgressed(None, None, f"reading {self.request.source}", 0))
                    study = build_study(self.request)
                    self.post_message(StudyBuilt(study))
                self.post_message(ScoringProgressed(None, None, "scoring the straight line", 0))
                tree = RemedyTree(study, alpha=self.alpha)
                self.post_message(NodeScored(tree.root, tree.node_json(tree.root), tree=tree))
                count = [1]

                def progress(done: int, total: int, label: str) -> None:
                    nid = next(reversed(tree.nodes))  # the child just scored
                    node = tree.nodes[nid]
                    count[0] += 1
                    self.post_message(NodeScored(node, tree.node_json(node)))
                    self.post_message(ScoringProgressed(done, total, f"{count[0]} models · {label}", count[0]))

                tree.grow(self.depth, progress, lambda: worker.is_cancelled)
                self.post_message(ScoringProgressed(None, None, "checking the straight line", count[0]))
                chk = check(study, alpha=self.alpha)
                summary = TreeSummary.take(tree, self.rule, chk, complete=not worker.is_cancelled)
            except Exception as exc:  # noqa: BLE001 - any failure becomes one line; the keys keep working
                self.post_message(GrowthFailed(failure_line(exc)))
                return
        self.post_message(TreeGrown(summary))

    @work(thread=True, exclusive=True, exit_on_error=False, group="tree")
    def _expand(self, nid: str) -> None:
        worker = get_current_worker()
        board = self.board
        assert board is not None
        tree = board.tree
        with self._lock, self._scans_reported():
            count = [0]

            def progress(done: int, total: int, label: str) -> None:
                count[0] += 1
                self.post_message(ScoringProgressed(done, total, f"{nid}: {count[0]} new · {label}", count[0]))

            self.post_message(ScoringProgressed(None, None, f"finding the moves from {nid}", 0))
            try:
                new = tree.expand(nid, progress, lambda: worker.is_cancelled)
                summary = TreeSummary.take(tree, self.rule, board.check, complete=not worker.is_cancelled)
            except Exception as exc:  # noqa: BLE001 - one line in the status row and the node
                try:  # keep the models scored before the failure
                    summary = TreeSummary.take(tree, self.rule, board.check, complete=True)
                    summary.errors.update(board.errors)
                    self.post_message(TreeGrown(summary, (), focus=None))
                except Exception:  # noqa: BLE001, S110 - the failure itself is reported next
                    pass
                self.post_message(GrowthFailed(failure_line(exc), nid))
                return
        self.post_message(TreeGrown(summary, tuple(new), focus=nid))

    @work(thread=True, exclusive=True, exit_on_error=False, group="tree")
    def _rejudge(self, alpha: float, rule: str) -> None:
        from bendwise.engine import check

        board = self.board
        assert board is not None
        tree = board.tree
        with self._lock:
            before = tree.alpha
            try:
                chk = board.check
                if alpha != tree.alpha or chk is None:
                    tree.alpha = alpha
                    chk = check(tree.study, alpha=alpha)
                summary = TreeSummary.take(tree, rule, chk, complete=board.complete)
            except Exception as exc:  # noqa: BLE001
                tree.alpha = before
                self.post_message(GrowthFailed(failure_line(exc)))
                return
        self.post_message(TreeGrown(summary))

    @work(thread=True, exclusive=True, exit_on_error=False, group="charts")
    def _compute_charts(self, nid: str) -> None:
        import numpy as np
        from bendwise.engine.errors import BendwiseError
        from bendwise.engine.handon.chart_data import curve_chart, residual_chart

        board = self.board
        if board is None or nid not in board.nodes:
            return
        node = board.nodes[nid]
        worker = get_current_worker()
        if node.score is None:
            self.post_message(ChartsComputed(nid, None, None, error=f"{nid} was not scored: {node.error}"))
            return
        try:
            res = residual_chart(board.tree.study, node.score)
            cur = curve_chart(board.tree.study, node.score)
        except (BendwiseError, ValueError, FloatingPointError, np.linalg.LinAlgError) as exc:
            self.post_message(ChartsComputed(nid, None, None, error=f"chart unavailable: {exc}"))
            return
        if not worker.is_cancelled:
            self.post_message(ChartsComputed(nid, res, cur))
