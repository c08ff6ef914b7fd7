"""Box–Cox transform of y: λ from the profile likelihood of the node's own regressors (a round
value inside the interval when one is there; either way λ costs one parameter)."""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from ...errors import BendwiseError
from ...stats.groups import GroupStats
from ...stats.rows import Rows
from ...stats.transforms import IDENTITY, Transform, boxcox
from ..boxcox import profile_boxcox
from ..results import MoveDetail
from ..scoring import build_design, model_frame
from .base import Offer, Skip, cost, interval_text
from .response import response_open

if TYPE_CHECKING:
    from ..tree import Node, RemedyTree

LABEL = "Box–Cox y"


class BoxCox:
    """y^λ with λ profiled on the node's design."""

    name = "Box–Cox transform of y"
    answers = "response"

    def propose(self, tree: RemedyTree, node: Node) -> list[Offer | Skip]:
        st, sp = tree.study, node.spec
        if not response_open(node):
            return []  # the transforms of y said why
        prob = st.domain_problem(Transform("boxcox", 0.5), "y")
        if prob:
            return [Skip(LABEL, prob)]
        try:
            prof = _profile(st, sp)
        except (BendwiseError, ValueError, RuntimeError, FloatingPointError, np.linalg.LinAlgError) as exc:
            return [Skip(LABEL, f"the profile cannot be computed here ({exc})"
                         if not isinstance(exc, BendwiseError) else str(exc))]
        interval = f"λ̂ = {prof.lam_hat:.3g}, 95% interval {interval_text(prof.low, prof.high)}"
        t = boxcox(prof.chosen)
        if t == IDENTITY:
            return [Skip(LABEL, f"no transform needed: λ = 1 lies inside ({interval})")]
        label = f"Box–Cox y (λ = {prof.chosen:.3g}{', estimated' if prof.estimated else ''}; {interval})"
        child = sp.with_(response=t, response_estimated=prof.estimated)
        return [Offer(label, child, cost(st, sp, child), MoveDetail(boxcox=prof))]


def _profile(st, sp):
    fr = model_frame(st, sp)
    design, _ = build_design(st, sp, fr)
    codes, c = st.group_codes(fr.by)

    def provider(lams: np.ndarray, fr=fr) -> list[GroupStats]:
        return st.boxcox_stats(lams, fr.by, fr.bases, fr.bases_key)

    rows = st.rows()
    if isinstance(rows, Rows):
        return profile_boxcox(rows.y, codes, c, design, weights=st.weights, bases=fr.bases, grid_provider=provider,
                              centred_log=st.centred_log_y())
    return profile_boxcox(None, codes, c, design, grid_provider=provider, n=st.n, sum_log_y=st.sum_log_y())
