"""Transforms of y: log, square root and reciprocal (one family; choosing among them from the
data costs one parameter)."""

from __future__ import annotations

from typing import TYPE_CHECKING

from ...stats.transforms import IDENTITY, LOG, RECIPROCAL, SQRT
from .base import Offer, Skip, cost

if TYPE_CHECKING:
    from ..tree import Node, RemedyTree


def response_open(node: Node) -> bool:
    """y can still be transformed: it is untransformed and not yet weighted."""
    return node.spec.response == IDENTITY and node.spec.weights is None


class ResponseTransforms:
    """log y, √y, 1/y — each where y's values allow it."""

    name = "transform of y"
    answers = "response"

    def propose(self, tree: RemedyTree, node: Node) -> list[Offer | Skip]:
        st, sp = tree.study, node.spec
        if not response_open(node):
            if sp.response != IDENTITY:
                return [Skip("response transform", f"the response is already transformed ({sp.response.short('y')})")]
            return [Skip("response transform", "weights were estimated for the untransformed response; "
                         "transform first, then weight")]
        out: list[Offer | Skip] = []
        for t, label in ((LOG, "log y"), (SQRT, "√y"), (RECIPROCAL, "1/y")):
            prob = st.domain_problem(t, "y")
            if prob:
                out.append(Skip(label, prob))
            else:
                child = sp.with_(response=t)
                out.append(Offer(label, child, cost(st, sp, child)))
        return out
