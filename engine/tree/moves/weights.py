"""Power-of-mean weights, offered when the node's residuals (or the replicates) show the spread
following the mean at the tree's α; θ costs one parameter."""

from __future__ import annotations

from typing import TYPE_CHECKING

from ...numfmt import fmt_p
from ..model_spec import WeightRule
from ..results import MoveDetail
from .base import Offer, Skip, cost, interval_text

if TYPE_CHECKING:
    from ..tree import Node, RemedyTree


class Weights:
    """weights ∝ mean^(−2θ)."""

    name = "weights"
    answers = "spread"

    def propose(self, tree: RemedyTree, node: Node) -> list[Offer | Skip]:
        sp = node.spec
        if sp.weights is not None:
            return [Skip("weights", "already weighted")]
        if node.score is None:
            return []
        vt = tree.variance_of(node)
        if not vt.available:
            return [Skip("weights", vt.reason or "")]
        iv = (f"θ̂ = {vt.theta_hat:.3g}, 95% interval {interval_text(vt.low, vt.high)}, "
              f"test of θ = 0 p = {fmt_p(vt.p)}")
        if vt.p >= tree.alpha or vt.chosen == 0:
            return [Skip("weights", f"no evidence that the spread follows the mean ({iv})")]
        how = "a round value inside the interval" if vt.snapped else "estimated"
        child = sp.with_(weights=WeightRule("power-of-mean", vt.chosen, not vt.snapped))
        label = f"weights ∝ mean^(−2θ), θ = {vt.chosen:.3g} ({how}; {iv}; θ counts as a parameter)"
        return [Offer(label, child, cost(tree.study, sp, child), MoveDetail(variance=vt))]
