"""The interface every move family implements, and what a family hands back to the tree.

A move family looks at one node and answers, for each move it knows: an :class:`Offer` (the label
the tree shows, the child's spec, what was estimated on the way, and the parameters the move costs)
or a :class:`Skip` (the label and the reason it does not apply). The tree knows moves only through
this interface and the list in ``engine.tree.moves.MOVES``: a new family is one module there.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Protocol

from ..model_spec import ModelSpec
from ..results import MoveDetail

if TYPE_CHECKING:
    from ...stats.study import Study
    from ..tree import Node, RemedyTree

__all__ = ["MoveFamily", "Offer", "Skip", "coefficients", "cost", "interval_text"]


@dataclass(frozen=True)
class Offer:
    """A move that applies: the child model it makes."""

    label: str
    """What the tree shows for the move (e.g. 'log y', '+ x²', 'weights ∝ mean^(−2θ), θ = 0.5 (…)')."""
    spec: ModelSpec
    """The child's model."""
    cost: int
    """Parameters the move adds to k: coefficients plus every value chosen from the data."""
    detail: MoveDetail = field(default_factory=MoveDetail)
    """What was estimated on the way (a Box–Cox profile, a Box–Tidwell search, a variance fit)."""


@dataclass(frozen=True)
class Skip:
    """A move that does not apply to this node, and why (shown under the node)."""

    label: str
    reason: str


class MoveFamily(Protocol):
    """One family of moves (e.g. transforms of y)."""

    name: str
    """The family's name in words."""
    answers: str
    """Which established departure the family answers: 'response' (shape or spread), 'shape',
    'spread' or 'covariate' (the suggestion admits a move only for established evidence)."""

    def propose(self, tree: RemedyTree, node: Node) -> list[Offer | Skip]:
        """The family's moves from ``node``, in the order the tree adds them."""
        ...


def coefficients(study: Study, spec: ModelSpec) -> int:
    """Columns of the model's design before any aliasing: intercept, powers of x, one per numeric
    covariate or per non-reference category, and the same for each interaction with x."""
    dims = {c.name: (1 if c.kind == "numeric" else max(len(c.levels) - 1, 0)) for c in study.covariates}
    return 1 + spec.degree + sum(dims.get(n, 0) for n in spec.covariates) + sum(dims.get(n, 0) for n in spec.interactions)


def cost(study: Study, parent: ModelSpec, child: ModelSpec) -> int:
    """Parameters a move from ``parent`` to ``child`` adds to k (the honest count: coefficients plus
    each transform or weight power chosen from the data, ``ModelSpec.extra_params``)."""
    return (coefficients(study, child) - coefficients(study, parent)) + (child.extra_params - parent.extra_params)


def interval_text(lo: float | None, hi: float | None) -> str:
    """An interval for a move's label, open ends as ∞."""
    a = "−∞" if lo is None else f"{lo:.3g}"
    b = "∞" if hi is None else f"{hi:.3g}"
    return f"({a}, {b})"
