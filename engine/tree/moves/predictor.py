"""Transforms of x: log, square root and reciprocal (one family; the choice costs one parameter)."""

from __future__ import annotations

from typing import TYPE_CHECKING

from ...stats.transforms import IDENTITY, LOG, RECIPROCAL, SQRT
from .base import Offer, Skip, cost

if TYPE_CHECKING:
    from ..tree import Node, RemedyTree


def predictor_open(node: Node) -> bool:
    """x can still be transformed: untransformed and no interaction with x yet."""
    return node.spec.predictor == IDENTITY and not node.spec.interactions


class PredictorTransforms:
    """log x, √x, 1/x — each where x's values allow it."""

    name = "transform of x"
    answers = "shape"

    def propose(self, tree: RemedyTree, node: Node) -> list[Offer | Skip]:
        st, sp = tree.study, node.spec
        if not predictor_open(node):
            if sp.predictor != IDENTITY:
                return [Skip("predictor transform", f"the predictor is already transformed ({sp.predictor.short('x')})")]
            return [Skip("predictor transform", "this model has interactions with x; transform x before adding them")]
        out: list[Offer | Skip] = []
        for t, label in ((LOG, "log x"), (SQRT, "√x"), (RECIPROCAL, "1/x")):
            prob = st.domain_problem(t, "x")
            if prob:
                out.append(Skip(label, prob))
            else:
                child = sp.with_(predictor=t)
                out.append(Offer(label, child, cost(st, sp, child)))
        return out
