"""What the workers hand back to the UI thread.

Messages live in the class that sends them (``StartScreen.TableLoaded``, ``TreeGrower.Grown``,
``ChartMaker.Ready`` …). Here: ``TreeSummary``, the picture of the tree they pass around
(engine values computed in the worker, so the UI thread only formats), and ``failure_line``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from bendwise.engine.tree.tree import Node, RemedyTree, Suggestion

__all__ = [
    "TreeSummary",
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
    stability: Any = None
    """Selection stability (an engine ``Stability``) measured on this very tree, α and rule; a new
    picture of the tree starts without one, so shares never outlive the tree they belong to."""
    stability_asked: int = 0
    """Resamples asked for (more than ``stability.resamples`` when the run was stopped)."""

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


def failure_line(exc: BaseException) -> str:
    """One line for an error in a worker: the engine's own words, or the kind of failure."""
    from bendwise.engine.errors import BendwiseError

    text = " ".join(str(exc).split()) or type(exc).__name__
    if isinstance(exc, BendwiseError):
        return text
    return f"internal error ({type(exc).__name__}: {text[:200]}); the tree so far is kept"


