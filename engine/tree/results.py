"""Typed, frozen records of the tree: what a move learnt on the way (``MoveDetail``) and everything
reported about one node (``NodeSummary``), each with the JSON shape of ``grow --json``."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

from ..checks.results import LackOfFit, NestedTest
from ..numfmt import fmt_num, p_clause
from ..stats.results import Coefficient, Criteria, SideTest

if TYPE_CHECKING:
    from ..stats.variance import VarianceTrend
    from .boxcox import BoxCoxProfile
    from .powers import PowerSearch

__all__ = ["MoveDetail", "NodeSummary", "NO_PARENT"]

NO_PARENT = "the root has no parent"
"""The root's ``nested`` reason in JSON."""


@dataclass(frozen=True, slots=True)
class MoveDetail:
    """What the move into a node estimated on the way (at most one of these is set)."""

    boxcox: BoxCoxProfile | None = None
    """The Box–Cox profile of λ behind a 'Box–Cox y' move."""
    box_tidwell: PowerSearch | None = None
    """The Box–Tidwell search behind an 'x^α' move."""
    variance: VarianceTrend | None = None
    """The power-of-mean variance fit behind a 'weights' move."""

    def to_dict(self) -> dict:
        """The node's extra JSON entries: ``boxcox``, ``variance_function``, ``box_tidwell``."""
        out: dict = {}
        if self.boxcox is not None:
            out["boxcox"] = self.boxcox.as_json()
        if self.variance is not None:
            out["variance_function"] = self.variance.as_json()
        if self.box_tidwell is not None:
            ps = self.box_tidwell
            out["box_tidwell"] = {"alpha_hat": ps.alpha_hat, "low": ps.low, "high": ps.high, "chosen": ps.chosen,
                                  "estimated": ps.estimated, "p_alpha_is_1": ps.p_alpha1}
        return out

    def summary(self) -> str:
        """The estimate in one line of plain text ('' when the move estimated nothing)."""
        parts = []
        if self.boxcox is not None:
            b = self.boxcox
            parts.append(f"Box–Cox λ̂ = {fmt_num(b.lam_hat, 4)}, 95% interval ({fmt_num(b.low, 3)}, "
                         f"{fmt_num(b.high, 3)}); λ used = {fmt_num(b.chosen, 3)}"
                         + (" (estimated: counts as a parameter)" if b.estimated else ""))
        if self.box_tidwell is not None:
            t = self.box_tidwell
            parts.append(f"Box–Tidwell α̂ = {fmt_num(t.alpha_hat, 4)}, 95% interval ({fmt_num(t.low, 3)}, "
                         f"{fmt_num(t.high, 3)}); α used = {fmt_num(t.chosen, 3)}; test of α = 1: {p_clause(t.p_alpha1)}")
        if self.variance is not None:
            v = self.variance
            parts.append(f"variance ∝ mean^(2θ): θ̂ = {fmt_num(v.theta_hat, 3)}, θ used = {fmt_num(v.chosen, 3)}; "
                         f"test of θ = 0: {p_clause(v.p)}")
        return "; ".join(parts)


@dataclass(frozen=True, slots=True)
class NodeSummary:
    """Everything ``grow --json`` says about one node, typed (scores are None when it failed)."""

    id: str
    parent: str | None
    move: str
    depth: int
    label: str
    formula: str
    spec: dict
    """``ModelSpec.as_json()``."""
    children: tuple[str, ...]
    pruned: tuple[tuple[str, str], ...]
    """(move, reason) of moves that could not apply."""
    also_from: tuple[tuple[str, str], ...]
    """(node id, move) of other paths to the same model."""
    error: str | None = None
    """Why the node could not be scored (then every score below is None)."""
    k: int | None = None
    coefficients: tuple[Coefficient, ...] = ()
    sigma: float | None = None
    lack_of_fit: LackOfFit | None = None
    lack_of_fit_pure: LackOfFit | None = None
    passes: bool | None = None
    """Candidate at the tree's α (see ``RemedyTree.passes``)."""
    nested: NestedTest | None = None
    """Against the parent (None for the root)."""
    chosen_from_data: tuple[str, ...] = ()
    criteria: Criteria | None = None
    delta_aicc: float | None = None
    """AICc minus the lowest AICc in the tree."""
    press: float | None = None
    press_note: str | None = None
    max_studentized: float | None = None
    spread: SideTest | None = None
    max_deviation: float | None = None
    deviation_note: str | None = None
    warnings: tuple[str, ...] = ()
    detail: MoveDetail = MoveDetail()

    @property
    def scored(self) -> bool:
        """True when the node has scores."""
        return self.criteria is not None

    def to_dict(self) -> dict:
        """The stable JSON shape of a node (documented in the README)."""
        out: dict = {
            "id": self.id, "parent": self.parent, "move": self.move, "depth": self.depth, "label": self.label,
            "formula": self.formula, "spec": self.spec, "children": list(self.children),
            "pruned": [{"move": m, "reason": r} for m, r in self.pruned],
            "also_reached_from": [{"node": i, "move": m} for i, m in self.also_from],
        }
        if not self.scored:
            out.update(k=None, error=self.error, lack_of_fit={"testable": False, "reason": self.error})
            return out
        assert self.lack_of_fit is not None and self.lack_of_fit_pure is not None and self.spread is not None
        assert self.criteria is not None
        out.update(
            k=self.k,
            coefficients={c.name: {"estimate": c.estimate, "se": c.se, "p": c.p} for c in self.coefficients},
            sigma=self.sigma,
            lack_of_fit=self.lack_of_fit.to_dict(),
            lack_of_fit_pure=self.lack_of_fit_pure.to_dict(),
            passes=self.passes,
            nested=self.nested.to_dict() if self.nested is not None else {"reason": NO_PARENT},
            chosen_from_data=list(self.chosen_from_data),
            criteria={**self.criteria.as_json(), "delta_aicc": self.delta_aicc},
            press=self.press,
            press_note=self.press_note,
            max_studentized_residual=self.max_studentized,
            spread=self.spread.as_json(),
            max_deviation_from_line=self.max_deviation,
            deviation_note=self.deviation_note,
            warnings=list(self.warnings),
        )
        out.update(self.detail.to_dict())
        return out

    def summary(self) -> str:
        """One line of plain text: id, model, k, lack of fit, nested test, AICc and ΔAICc."""
        head = f"{self.id} {self.label}"
        if not self.scored:
            return f"{head}: not scored — {self.error}"
        assert self.lack_of_fit is not None and self.criteria is not None
        lof = self.lack_of_fit
        lof_text = f"lack of fit {p_clause(lof.p)}" if lof.testable else "lack of fit untestable"
        nested = f"; nested {p_clause(self.nested.p)}" if self.nested is not None and self.nested.testable else ""
        d = "" if self.delta_aicc is None or not math.isfinite(self.delta_aicc) else f", ΔAICc {fmt_num(self.delta_aicc, 3)}"
        return f"{head}: k {self.k}; {lof_text}{nested}; AICc {fmt_num(self.criteria.aicc, 6)}{d}"
