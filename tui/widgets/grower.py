"""TreeGrower: the widget that owns the remedy tree's growth and every engine call that changes it.

It holds the tree lock, runs growth, best-first expansion and α/rule judgements in thread
workers that *return* what they made (a ``Growth``), and turns each result into one of its own
messages (``Grown``, ``Failed``) once the worker's state changes. Progress and freshly scored
nodes arrive as messages while the worker runs. ``busy`` and ``cancelling`` are reactives the
screen watches.
"""

from __future__ import annotations

import threading
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from textual import on, work
from textual.message import Message
from textual.reactive import reactive
from textual.widget import Widget
from textual.worker import Worker, WorkerState, get_current_worker

from ..messages import TreeSummary, failure_line
from ..reading import DataRequest, build_study

if TYPE_CHECKING:
    from bendwise.engine.stats.study import Study
    from bendwise.engine.tree.tree import Node, RemedyTree

__all__ = ["TreeGrower", "Growth"]


@dataclass(frozen=True, slots=True)
class Growth:
    """What one worker made: a new picture of the tree and/or the error that stopped it."""

    summary: TreeSummary | None
    new_ids: tuple[str, ...] = ()
    focus: str | None = None
    error: str | None = None
    node_id: str | None = None
    """The node being grown when ``error`` happened (None: first growth or a judgement)."""


class TreeGrower(Widget):
    """Invisible owner of the engine tree: start, expand, rejudge, cancel."""

    DEFAULT_CSS = "TreeGrower { display: none; }"

    busy: reactive[bool] = reactive(False)
    """True while a worker holds the tree."""
    cancelling: reactive[bool] = reactive(False)
    """True between Esc and the end of the running worker."""

    class StudyBuilt(Message):
        """The table was read and cleaned into a Study."""

        def __init__(self, study: Study) -> None:
            super().__init__()
            self.study = study

    class Progressed(Message):
        """Progress of the running worker (later messages replace earlier ones)."""

        def __init__(self, done: int | None, total: int | None, label: str, scored: int) -> None:
            super().__init__()
            self.done, self.total, self.label, self.scored = done, total, label, scored

        def can_replace(self, message: Message) -> bool:
            return isinstance(message, TreeGrower.Progressed)

    class NodeScored(Message):
        """One more node was scored during the first growth; the root carries the tree."""

        def __init__(self, node: Node, json: dict, tree: RemedyTree | None = None) -> None:
            super().__init__()
            self.node, self.json, self.tree = node, json, tree

    class Grown(Message):
        """Growth, expansion or a judgement finished (or was cancelled: ``summary.complete``)."""

        def __init__(self, summary: TreeSummary, new_ids: tuple[str, ...] = (), focus: str | None = None) -> None:
            super().__init__()
            self.summary, self.new_ids, self.focus = summary, new_ids, focus

    class Failed(Message):
        """A worker stopped on an error (one line in words)."""

        def __init__(self, error: str, node_id: str | None = None) -> None:
            super().__init__()
            self.error, self.node_id = error, node_id

    class _Settled(Message):
        """A cancelled worker's result: Textual drops the return value of a cancelled worker."""

        def __init__(self, growth: Growth) -> None:
            super().__init__()
            self.growth = growth

    def __init__(self, request: DataRequest, study: Study | None, depth: int, *, id: str | None = None) -> None:
        super().__init__(id=id)
        self.request = request
        self.study = study
        self.depth = depth
        self._lock = threading.Lock()

    # ---- what the screen asks -------------------------------------------------------------
    def start(self, alpha: float, rule: str) -> None:
        """Read the table (when needed) and grow the tree breadth-first."""
        self.busy = True
        self._grow(alpha, rule)

    def expand_node(self, board: TreeSummary, nid: str) -> None:
        """Grow one node best-first."""
        self.busy = True
        self._expand(board, nid)

    def rejudge(self, board: TreeSummary, alpha: float, rule: str) -> None:
        """Judge every node again at a new α, or suggest by another rule."""
        self.busy = True
        self._rejudge(board, alpha, rule)

    def measure_stability(self, board: TreeSummary, resamples: int, seed: int) -> None:
        """Regrow the tree on ``resamples`` resamples and count how often each node is suggested."""
        self.busy = True
        self._stability(board, resamples, seed)

    def cancel(self) -> None:
        """Stop growing after the current step (nodes scored so far stay)."""
        if self.busy:
            self.cancelling = True
            self.workers.cancel_group(self, "tree")

    # ---- results ----------------------------------------------------------------------------
    def on_worker_state_changed(self, event: Worker.StateChanged) -> None:
        """A worker's return value becomes Grown/Failed; an uncaught error still frees the keys."""
        if event.worker.group != "tree":
            return
        if event.state == WorkerState.SUCCESS and isinstance(event.worker.result, Growth):
            self._finish(event.worker.result)
        elif event.state == WorkerState.ERROR:
            self._finish(Growth(None, error=f"internal error ({event.worker.error!r:.200}); the tree so far is kept"))

    @on(_Settled)
    def _settled(self, event: _Settled) -> None:
        event.stop()
        self._finish(event.growth)

    def _finish(self, growth: Growth) -> None:
        self.busy = False
        self.cancelling = False
        if growth.summary is not None:
            self.post_message(self.Grown(growth.summary, growth.new_ids, growth.focus))
        if growth.error is not None:
            self.post_message(self.Failed(growth.error, growth.node_id))

    def _done(self, growth: Growth) -> Growth:
        """Return ``growth``; a cancelled worker posts it instead (its return value is dropped)."""
        if get_current_worker().is_cancelled:
            self.post_message(self._Settled(growth))
        return growth

    @contextmanager
    def _scans_reported(self, study: Any) -> Iterator[None]:
        """While a worker holds the tree, a study that scans files (the SQL engine) reports each
        scan in the progress row."""
        if study is None or not hasattr(study, "progress"):
            yield
            return
        before = study.progress

        def say(text: str) -> None:
            if text:
                self.post_message(self.Progressed(None, None, text, 0))

        study.progress = say
        try:
            yield
        finally:
            study.progress = before

    def _progress_text(self, text: str) -> None:
        """An engine's progress line (Spark's task counts while it builds the study), from any
        thread, to the status row: ``post_message`` is thread-safe; empty texts are skipped."""
        if text:
            self.post_message(self.Progressed(None, None, text, 0))

    # ---- workers ----------------------------------------------------------------------------
    @work(thread=True, exclusive=True, exit_on_error=False, group="tree")
    def _grow(self, alpha: float, rule: str) -> Growth:
        from bendwise.engine import check
        from bendwise.engine.tree.tree import RemedyTree

        worker = get_current_worker()
        say = self.post_message
        with self._lock, self._scans_reported(self.study):
            try:
                study = self.study
                if study is None:
                    say(self.Progressed(None, None, f"reading {self.request.source}", 0))
                    study = self.study = build_study(self.request, progress=self._progress_text)
                    say(self.StudyBuilt(study))
                say(self.Progressed(None, None, "scoring the straight line", 0))
                tree = RemedyTree(study, alpha=alpha, runs=self.request.runs)
                say(self.NodeScored(tree.root, tree.node_json(tree.root), tree=tree))
                count = [1]

                def progress(done: int, total: int, label: str) -> None:
                    node = tree.nodes[next(reversed(tree.nodes))]  # the child just scored
                    count[0] += 1
                    say(self.NodeScored(node, tree.node_json(node)))
                    say(self.Progressed(done, total, f"{count[0]} models · {label}", count[0]))

                tree.grow(self.depth, progress, lambda: worker.is_cancelled)
                say(self.Progressed(None, None, "checking the straight line", count[0]))
                chk = check(study, alpha=alpha)
                summary = TreeSummary.take(tree, rule, chk, complete=not worker.is_cancelled)
            except Exception as exc:  # noqa: BLE001 - any failure becomes one line; the keys keep working
                return self._done(Growth(None, error=failure_line(exc)))
        return self._done(Growth(summary))

    @work(thread=True, exclusive=True, exit_on_error=False, group="tree")
    def _expand(self, board: TreeSummary, nid: str) -> Growth:
        worker = get_current_worker()
        tree = board.tree
        with self._lock, self._scans_reported(tree.study):
            count = [0]

            def progress(done: int, total: int, label: str) -> None:
                count[0] += 1
                self.post_message(self.Progressed(done, total, f"{nid}: {count[0]} new · {label}", count[0]))

            self.post_message(self.Progressed(None, None, f"finding the moves from {nid}", 0))
            try:
                new = tree.expand(nid, progress, lambda: worker.is_cancelled)
                summary = TreeSummary.take(tree, board.rule, board.check, complete=not worker.is_cancelled)
            except Exception as exc:  # noqa: BLE001 - one line in the status row and the node
                kept = None
                try:  # keep the models scored before the failure
                    kept = TreeSummary.take(tree, board.rule, board.check, complete=True)
                    kept.errors.update(board.errors)
                except Exception:  # noqa: BLE001, S110 - the failure itself is reported
                    pass
                return self._done(Growth(kept, error=failure_line(exc), node_id=nid))
        return self._done(Growth(summary, tuple(new), focus=nid))

    @work(thread=True, exclusive=True, exit_on_error=False, group="tree")
    def _rejudge(self, board: TreeSummary, alpha: float, rule: str) -> Growth:
        from bendwise.engine import check

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
                return self._done(Growth(None, error=failure_line(exc)))
        return self._done(Growth(summary))

    @work(thread=True, exclusive=True, exit_on_error=False, group="tree")
    def _stability(self, board: TreeSummary, resamples: int, seed: int) -> Growth:
        """The same computation as ``grow --stability N --seed S`` (engine.tree.stability), with
        progress per resample; a stopped run keeps the resamples done (the board says how many)."""
        from bendwise.engine.tree.stability import selection_stability

        worker = get_current_worker()
        tree = board.tree

        def tick(done: int, total: int) -> None:
            self.post_message(self.Progressed(done, total, f"stability {done}/{total} resamples", 0))

        with self._lock:
            self.post_message(self.Progressed(0, resamples, f"stability 0/{resamples} resamples", 0))
            try:
                stab = selection_stability(tree, resamples, depth=self.depth, seed=seed, rule=board.rule,
                                           progress=tick, cancel=lambda: worker.is_cancelled)
                summary = TreeSummary.take(tree, board.rule, board.check, complete=board.complete)
            except Exception as exc:  # noqa: BLE001 - one line in the status row
                return self._done(Growth(None, error=f"stability not measured: {failure_line(exc)}"))
        summary.errors.update(board.errors)
        summary.stability, summary.stability_asked = stab, resamples
        return self._done(Growth(summary))
