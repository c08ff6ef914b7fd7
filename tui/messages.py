"""Messages the workers post back to the UI thread, named in the past tense.

Chain: TableLoaded (start screen) → StudyBuilt → NodeScored… → TreeGrown; NodeExpanded after
best-first growth of one node; ChartsComputed after a selection. Payloads are engine values
(frozen results, node ids, JSON dicts) computed in the worker, so the UI thread only formats.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from textual.message import Message

if TYPE_CHECKING:
    from bendwise.engine.stats.study import Study
    from bendwise.engine.tree.tree import Node, RemedyTree, Suggestion

__all__ = [
    "TreeSummary",
    "TableLoaded",
    "StudyBuilt",
    "LoadFailed",
    "ScoringProgressed",
    "NodeScored",
    "TreeGrown",
    "GrowthFailed",
    "ChartsComputed",
]


@dataclass(slots=True)
class TreeSummary:
    """A consistent picture of the tree, taken in the worker while it held the tree lock.

    After it is posted only the UI thread touches it (adding nodes as they are scored).
    """

    tree: RemedyTree
    """The engine tree (read on the UI thread only through ids listed here)."""
    nodes: dict[str, Node]
    """Every node by id."""
    json: dict[str, dict]
    """``tree.node_json`` of every node (passes, ΔAICc and nested tests at this α)."""
    children: dict[str, tuple[str, ...]]
    """Child ids per node in creation order."""
    suggestion: Suggestion | None
    """``tree.suggest(rule)`` (None while the first growth runs)."""
    rule: str
    """Suggestion rule."""
    alpha: float
    """Level of the lack-of-fit verdicts."""
    check: Any = None
    """``engine.check`` of the straight line at this α (a CheckResult), or None."""
    complete: bool = True
    """False when growth was cancelled part-way."""
    errors: dict[str, str] = field(default_factory=dict)
    """Node id → why growing it stopped (shown in its detail)."""

    @classmethod
    def take(cls, tree: RemedyTree, rule: str, check: Any = None, complete: bool = True) -> TreeSummary:
        """Snapshot the tree (call in the worker that owns the tree lock)."""
        nodes = dict(tree.nodes)
        return cls(
            tree=tree,
            nodes=nodes,
            json={nid: tree.node_json(n) for nid, n in nodes.items()},
            children={nid: tuple(n.children) for nid, n in nodes.items()},
            suggestion=tree.suggest(rule),
            rule=rule,
            alpha=tree.alpha,
            check=check,
            complete=complete,
        )


class TableLoaded(Message):
    """The table was read; its columns are described (start screen)."""

    def __init__(self, frame: Any, columns: tuple, previews: dict) -> None:
        super().__init__()
        self.frame = frame
        self.columns = columns
        self.previews = previews


class StudyBuilt(Message):
    """Response, predictor and covariates were chosen and cleaned into a Study."""

    def __init__(self, study: Study) -> None:
        super().__init__()
        self.study = study


class LoadFailed(Message):
    """Reading the table or building the study was refused by the engine (one line)."""

    def __init__(self, error: str) -> None:
        super().__init__()
        self.error = error


class ScoringProgressed(Message):
    """Progress of the running expansion (later messages replace earlier ones)."""

    def __init__(self, done: int | None, total: int | None, label: str, scored: int) -> None:
        super().__init__()
        self.done = done
        self.total = total
        self.label = label
        self.scored = scored

    def can_replace(self, message: Message) -> bool:
        return isinstance(message, ScoringProgressed)


class NodeScored(Message):
    """One more node was scored while the tree grows (shown at once); the root carries the tree."""

    def __init__(self, node: Node, json: dict, tree: RemedyTree | None = None) -> None:
        super().__init__()
        self.node = node
        self.json = json
        self.tree = tree


class TreeGrown(Message):
    """Growth (breadth-first, best-first or an α/rule change) finished or was cancelled."""

    def __init__(self, summary: TreeSummary, new_ids: tuple[str, ...] = (), focus: str | None = None) -> None:
        super().__init__()
        self.summary = summary
        self.new_ids = new_ids
        self.focus = focus


class GrowthFailed(Message):
    """Growing, scoring or judging stopped on an error (one line in words)."""

    def __init__(self, error: str, node_id: str | None = None) -> None:
        super().__init__()
        self.error = error
        self.node_id = node_id
        """The node being grown when it failed (None: the first growth or a judgement)."""


def failure_line(exc: BaseException) -> str:
    """One line for an error in a worker: the engine's own words, or the kind of failure."""
    from bendwise.engine.errors import BendwiseError

    text = " ".join(str(exc).split()) or type(exc).__name__
    if isinstance(exc, BendwiseError):
        return text
    return f"internal error ({type(exc).__name__}: {text[:200]}); the tree so far is kept"


class ChartsComputed(Message):
    """Chart data of one node are ready."""

    def __init__(self, node_id: str, residuals: Any, curve: Any, error: str | None = None) -> None:
        super().__init__()
        self.node_id = node_id
        self.residuals = residuals
        self.curve = curve
        self.error = error
