"""One more power of x (a quadratic, then a cubic; bendwise stops at degree 3)."""

from __future__ import annotations

from typing import TYPE_CHECKING

from .base import Offer, Skip, cost

if TYPE_CHECKING:
    from ..tree import Node, RemedyTree

MAX_DEGREE = 3
"""Highest polynomial degree the tree builds."""


class Degree:
    """+ x², + x³."""

    name = "degree of x"
    answers = "shape"

    def propose(self, tree: RemedyTree, node: Node) -> list[Offer | Skip]:
        st, sp = tree.study, node.spec
        nd = sp.degree + 1
        if nd > MAX_DEGREE:
            return [Skip(f"degree {nd}", f"bendwise stops at degree {MAX_DEGREE}: higher degrees chase noise")]
        if nd > st.c - 2:
            return [Skip(f"degree {nd}", f"{st.c} levels of x: degree {nd} would leave no degree of freedom for lack of fit")]
        child = sp.with_(degree=nd)
        return [Offer(f"+ {'x²' if nd == 2 else 'x³'}", child, cost(st, sp, child))]
