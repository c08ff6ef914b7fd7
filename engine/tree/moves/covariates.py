"""Admitted covariates: each one added, then its interaction with x."""

from __future__ import annotations

from typing import TYPE_CHECKING

from .base import Offer, Skip, cost

if TYPE_CHECKING:
    from ..tree import Node, RemedyTree


class AddCovariate:
    """+ NAME for every admitted covariate the node does not have."""

    name = "covariate"
    answers = "covariate"

    def propose(self, tree: RemedyTree, node: Node) -> list[Offer | Skip]:
        st, sp = tree.study, node.spec
        out: list[Offer | Skip] = []
        runs = getattr(tree, "runs", None)
        for cov in st.covariates:
            if runs is not None and cov.name == runs.name:
                out.append(Skip(f"+ {cov.name}", "it is the runs column: runs enter as a random intercept, "
                                "not as a fixed covariate"))
            elif cov.name not in sp.covariates:
                child = sp.with_(covariates=sp.covariates + (cov.name,))
                out.append(Offer(f"+ {cov.name}", child, cost(st, sp, child)))
        return out


class Interaction:
    """+ x:NAME for every covariate in the node without its interaction."""

    name = "interaction with x"
    answers = "covariate"

    def propose(self, tree: RemedyTree, node: Node) -> list[Offer | Skip]:
        st, sp = tree.study, node.spec
        out: list[Offer | Skip] = []
        for name in sp.covariates:
            if name in sp.interactions:
                continue
            if st.approximate_groups:
                out.append(Skip(f"+ x:{name}", "not available when settings are grouped by a tolerance"))
            else:
                child = sp.with_(interactions=sp.interactions + (name,))
                out.append(Offer(f"+ x:{name}", child, cost(st, sp, child)))
        return out
