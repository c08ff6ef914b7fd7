"""A power of x by Box–Tidwell: offered only when the power differs from 1 at the tree's α."""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from ...errors import BendwiseError
from ...stats.transforms import IDENTITY, power
from ..powers import box_tidwell
from ..results import MoveDetail
from .base import Offer, Skip, cost, interval_text
from .predictor import predictor_open

if TYPE_CHECKING:
    from ..tree import Node, RemedyTree

LABEL = "power of x (Box–Tidwell)"


class BoxTidwell:
    """x^α with α from the Box–Tidwell search on a straight line in x."""

    name = "power of x"
    answers = "shape"

    def propose(self, tree: RemedyTree, node: Node) -> list[Offer | Skip]:
        st, sp = tree.study, node.spec
        if not predictor_open(node):
            return []  # the transforms of x said why
        if sp.degree != 1:
            return [Skip(LABEL, "only for a straight line in x (degree 1)")]
        if st.approximate_groups:
            return [Skip(LABEL, "not available when settings are grouped by a tolerance")]
        if st.x_min <= 0:
            return [Skip(LABEL, f"a power of x needs x > 0; {st.x_name!r} goes down to {st.x_min:g}")]
        try:
            ps = box_tidwell(st, sp)
        except (BendwiseError, ValueError, ZeroDivisionError, FloatingPointError, RuntimeError,
                np.linalg.LinAlgError) as exc:
            return [Skip(LABEL, f"did not converge ({exc})")]
        t = power(ps.chosen)
        iv = (f"α̂ = {ps.alpha_hat:.3g}, 95% interval {interval_text(ps.low, ps.high)}, "
              f"test of α = 1 p = {ps.p_alpha1:.3g}")
        if t == IDENTITY or ps.p_alpha1 >= tree.alpha:
            return [Skip(LABEL, f"no evidence the power differs from 1 ({iv})")]
        label = f"x^α (α = {ps.chosen:.3g}{', estimated' if ps.estimated else ''}; {iv})"
        child = sp.with_(predictor=t, predictor_estimated=ps.estimated)
        return [Offer(label, child, cost(st, sp, child), MoveDetail(box_tidwell=ps))]
