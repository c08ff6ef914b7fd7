"""Grow the tree of candidate remedies, score every node, and suggest one with reasons.

A child is its parent plus one move: a response transform (log, √, 1/y, Box–Cox λ̂ with
regressors), a predictor transform (log, √, 1/x, Box–Tidwell power), the next polynomial
degree, an admitted covariate, an x×covariate interaction, or weights from a power-of-mean
variance function. Moves that cannot apply are pruned with a reason that stays visible.
The same model reached by two paths is one node.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from ..cautions import POST_SEARCH_CAUTION
from ..checks.lack_of_fit import nested_test
from ..checks.results import NestedTest
from ..checks.runs import run_factor
from ..errors import BendwiseError, UsageError
from ..stats.study import Study
from ..stats.transforms import IDENTITY, Transform
from ..stats.variance import VarianceTrend, variance_trend
from .model_spec import ModelSpec
from .moves import MAX_DEGREE, MOVES, Offer
from .results import MoveDetail, NodeSummary
from .runs_node import NodeRuns, apply_runs
from .scoring import NodeScore, score_spec
from .suggestion import RULES, Suggestion, SuggestionPolicy
from .suggestion import suggest as _suggest

__all__ = ["Node", "RemedyTree", "Suggestion", "RULES", "grow", "POST_SEARCH_CAUTION", "MAX_DEGREE"]




ProgressFn = Callable[[int, int, str], None]


CancelFn = Callable[[], bool]


@dataclass(slots=True)
class Node:
    """One candidate in the tree (its scores are frozen; links are filled as the tree grows)."""

    id: str
    """'root', then 'n1', 'n2', … in creation order."""
    parent: str | None
    """Parent id (None for the root)."""
    move: str
    """The move from the parent, in words."""
    spec: ModelSpec
    """The model."""
    depth: int
    """Moves from the root."""
    score: NodeScore | None = None
    """Scores (None when scoring failed: see ``error``)."""
    error: str | None = None
    """Why the node could not be scored."""
    nested: NestedTest | None = None
    """Nested F against the parent, or the reason there is none."""
    children: list[str] = field(default_factory=list)
    """Child ids in creation order."""
    pruned: list[tuple[str, str]] = field(default_factory=list)
    """(move, reason) for moves that could not apply here."""
    also_from: list[tuple[str, str]] = field(default_factory=list)
    """(node id, move) of other paths that reach the same model."""
    expanded: bool = False
    """True once its moves were generated."""
    detail: MoveDetail = field(default_factory=MoveDetail)
    """Move details (Box–Cox profile, Box–Tidwell search, variance fit)."""
    runs: NodeRuns | None = None
    """With a runs column: the node refitted with a random run intercept (engine.tree.runs_node)."""
    runs_error: str | None = None
    """Why the run model of this node could not be fitted."""


def _nested(parent: Node, child: Node) -> NestedTest:
    kind = "nested F"
    ps, cs = parent.spec, child.spec
    if ps.response != cs.response:
        return NestedTest(False, f"different response scale ({ps.response.short('y')} vs {cs.response.short('y')}): "
                         "compare AICc, not F", kind)
    if ps.weights != cs.weights:
        return NestedTest(False, "different weights: compare AICc, not F", kind)
    if ps.predictor != cs.predictor:
        return NestedTest(False, "not nested: the predictor transform changes the x columns", kind)
    if parent.score is None or child.score is None:
        return NestedTest(False, "a model could not be scored", kind)
    pf, cf = parent.score.fit, child.score.fit
    return nested_test(pf.sse, pf.df_resid, cf.sse, cf.df_resid, kind, approximate=cs.weights is not None)


class RemedyTree:
    """The candidate tree on one study; deterministic order, cached and deduplicated."""

    def __init__(self, study: Study, *, alpha: float = 0.05, allowable_deviation: float | None = None,
                 runs: str | None = None, run_slopes: bool = False) -> None:
        if not 0 < alpha < 1:
            raise UsageError(f"alpha {alpha!r} must lie strictly between 0 and 1, e.g. 0.05")
        if allowable_deviation is not None and not allowable_deviation > 0:
            raise UsageError(f"allowable deviation {allowable_deviation!r} must be > 0 (in y units)")
        self.study = study
        self.alpha = alpha
        self.allowable_deviation = allowable_deviation
        self.runs = None if runs is None else run_factor(study, runs)
        """The runs column as a factor (random intercept in every node), or None."""
        if run_slopes and runs is None:
            raise UsageError("--run-slopes needs --runs COL (the column naming the runs)")
        self.run_slopes = run_slopes
        """Random run slopes too (the straight line only; other nodes are refused with a reason)."""
        self.nodes: dict[str, Node] = {}
        self._by_spec: dict[ModelSpec, str] = {}
        self._aside: dict[ModelSpec, NodeScore | None] = {}
        self._variances: dict[Transform | str, VarianceTrend] = {}
        self._counter = 0
        self._root_line: np.ndarray | None = None
        root = Node("root", None, "start: straight line", ModelSpec(), 0)
        self._add(root)
        self._score(root)
        self._root_line = None if root.score is None else np.asarray(root.score.level_fitted_y)

    # ---- building --------------------------------------------------------------------
    def _add(self, node: Node) -> None:
        self.nodes[node.id] = node
        self._by_spec[node.spec] = node.id

    def _score(self, node: Node) -> None:
        try:
            node.score = score_spec(self.study, node.spec, root_line=self._root_line)
        except BendwiseError as exc:
            node.error = str(exc)
        if self.runs is not None and node.score is not None:
            apply_runs(self.study, node, self.runs, self.run_slopes)
        if node.parent is not None:
            node.nested = _nested(self.nodes[node.parent], node)

    @property
    def root(self) -> Node:
        """The straight line."""
        return self.nodes["root"]

    def _moves(self, node: Node) -> tuple[list[Offer], list[tuple[str, str]]]:
        """The offers of every registered move family (``engine.tree.moves.MOVES``) for ``node``,
        and (move, reason) for the moves that do not apply."""
        offers: list[Offer] = []
        pruned: list[tuple[str, str]] = []
        for family in MOVES:
            for item in family.propose(self, node):
                if isinstance(item, Offer):
                    offers.append(item)
                else:
                    pruned.append((item.label, item.reason))
        return offers, pruned

    def expand(self, node_id: str, progress: ProgressFn | None = None, cancel: CancelFn | None = None) -> list[str]:
        """Generate and score the children of one node (best-first growth); returns new ids."""
        node = self.nodes[node_id]
        if node.expanded:
            return []
        moves, pruned = self._moves(node)
        node.pruned = pruned
        new: list[str] = []
        for i, offer in enumerate(moves):
            move, spec, detail = offer.label, offer.spec, offer.detail
            if cancel is not None and cancel():
                return new
            if spec == node.spec:
                node.pruned.append((move, "gives the same model"))
                continue
            hit = self._by_spec.get(spec)
            if hit is not None:
                if self.nodes[hit].parent != node_id:  # made before a cancelled pass: not a second path
                    self.nodes[hit].also_from.append((node_id, move))
                continue
            self._counter += 1
            child = Node(f"n{self._counter}", node_id, move, spec, node.depth + 1, detail=detail)
            self._add(child)
            node.children.append(child.id)
            self._score(child)
            new.append(child.id)
            if progress is not None:
                progress(i + 1, len(moves), child.spec.label())
        node.expanded = True
        return new

    def grow(self, depth: int = 2, progress: ProgressFn | None = None, cancel: CancelFn | None = None) -> None:
        """Breadth-first growth to ``depth`` moves from the root."""
        if depth < 0:
            raise UsageError(f"depth {depth} must be ≥ 0")
        frontier = ["root"]
        for _ in range(depth):
            nxt: list[str] = []
            for nid in frontier:
                if cancel is not None and cancel():
                    return
                if self.nodes[nid].score is None:
                    continue
                nxt += self.expand(nid, progress, cancel)
            frontier = nxt

    # ---- judging -----------------------------------------------------------------------
    def scored(self) -> list[Node]:
        """Nodes with scores, in creation order."""
        return [n for n in self.nodes.values() if n.score is not None]

    def best_aicc(self) -> float | None:
        """Lowest AICc among scored nodes."""
        vals = [n.score.criteria.aicc for n in self.scored() if n.score.criteria.aicc is not None]  # type: ignore[union-attr]
        return min(vals) if vals else None

    def passes(self, node: Node, alpha: float | None = None) -> bool:
        """Candidate for the suggestion: passes lack of fit at α, or is untestable and fails nothing else."""
        a = self.alpha if alpha is None else alpha
        s = node.score
        if s is None:
            return False
        verdict = s.lack_of_fit.passes(a)
        if verdict is None:
            return not s.fit.aliased and math.isfinite(s.fit.sigma)
        return verdict

    def sort_key(self, rule: str) -> Callable[[Node], tuple]:
        """Ordering of nodes under a rule (missing values last)."""
        if rule not in RULES:
            raise UsageError(f"unknown rule {rule!r}; choose one of {', '.join(RULES)}")
        inf = math.inf

        def key(n: Node) -> tuple:
            s = n.score
            if s is None:
                return (inf, inf, n.id)
            aicc = s.criteria.aicc if s.criteria.aicc is not None else inf
            if rule == "aicc":
                return (aicc, s.k, _order(n.id))
            if rule == "bic":
                return (s.criteria.bic if s.criteria.bic is not None else inf, s.k, _order(n.id))
            if rule == "simplest":
                return (s.k, aicc, _order(n.id))
            return (s.press if s.press is not None else inf, s.k, _order(n.id))

        return key

    def suggest(self, rule: str = "aicc", alpha: float | None = None,
                policy: SuggestionPolicy | str = "default") -> Suggestion:
        """Pick a node by ``rule`` among the candidates the evidence allows (engine.suggestion)."""
        return _suggest(self, rule, alpha, policy)

    # ---- evidence on the straight line (engine.suggestion weighs it) -----------------
    def _scored_spec(self, spec: ModelSpec) -> NodeScore | None:
        """The score of ``spec`` (a node of the tree, or scored aside and cached); None on error."""
        hit = self._by_spec.get(spec)
        if hit is not None:
            return self.nodes[hit].score
        if spec not in self._aside:
            try:
                self._aside[spec] = score_spec(self.study, spec, root_line=self._root_line)
            except BendwiseError:
                self._aside[spec] = None
        return self._aside[spec]

    def curvature_test(self) -> NestedTest:
        """The straight line against line + x² (nested F; Mandel's test without the 99% level)."""
        kind = "curvature (line + x²)"
        root = self.root.score
        if root is None:
            return NestedTest(False, self.root.error or "the straight line could not be scored", kind)
        if self.study.c < 3:
            return NestedTest(False, f"needs at least 3 levels of x ({self.study.c} here)", kind)
        quad = self._scored_spec(ModelSpec(degree=2))
        if quad is None:
            return NestedTest(False, "the quadratic could not be fitted", kind)
        return nested_test(root.fit.sse, root.fit.df_resid, quad.fit.sse, quad.fit.df_resid, kind,
                        floor=quad.fit.rounding)

    def covariate_test(self, name: str) -> NestedTest:
        """Line + covariate against the line (nested F)."""
        kind = "nested F"
        root = self.root.score
        other = self._scored_spec(ModelSpec(covariates=(name,)))
        if root is None or other is None:
            return NestedTest(False, "a model could not be scored", kind)
        return nested_test(root.fit.sse, root.fit.df_resid, other.fit.sse, other.fit.df_resid, kind,
                        floor=other.fit.rounding)

    def variance(self, response: Transform) -> VarianceTrend:
        """The power-of-mean variance function of the replicates on one response scale (cached)."""
        hit = self._variances.get(response)
        if hit is None:
            if self.study.weights is not None:
                hit = VarianceTrend(False, f"weights were given (column {self.study.weights_name!r}); "
                                    "bendwise does not estimate others on top")
            else:
                try:
                    z, _ = self.study.transformed(response)
                    st = self.study.group_stats(z, ("z", response.key()))
                except BendwiseError as exc:
                    hit = VarianceTrend(False, str(exc))
                else:
                    hit = variance_trend(st.count, st.mean, st.ss)
            self._variances[response] = hit
        return hit

    def variance_of(self, node: Node, alpha: float | None = None) -> VarianceTrend:
        """The variance function for weights on ``node``: from the node's residuals (pure error plus
        each level's departure from its fit) when the node fits (passes lack of fit at α) and its
        groups are the x levels; else from the replicates alone, which a wrong mean cannot blur
        (cached per node and α)."""
        a = self.alpha if alpha is None else alpha
        key = f"node {node.id} {a!r}"
        hit = self._variances.get(key)
        if hit is None:
            base = self.variance(node.spec.response)
            s = node.score
            by_level = not node.spec.covariates and not self.study.approximate_groups
            fits = s is not None and s.lack_of_fit.passes(a) is True
            if s is None or not (fits and by_level) or not base.available and "weights were given" in (base.reason or ""):
                hit = base
            else:
                z, _ = self.study.transformed(node.spec.response)
                st = self.study.group_stats(z, ("z", node.spec.response.key()))
                # the fit's groups may split x levels by categories it does not use: one value per level
                cats = tuple(c.name for c in self.study.covariates if c.kind == "categorical")
                fitted = np.empty(self.study.c)
                fitted[self.study.group_parent(cats)] = np.asarray(s.fit.group_fitted)
                hit = variance_trend(st.count, st.mean, st.ss, fitted=fitted, rank=s.fit.rank)
            self._variances[key] = hit
        return hit

    def spread_evidence(self, residuals: bool = True, alpha: float | None = None) -> VarianceTrend:
        """The trend of spread with the mean for the straight line: from its residuals when it fits
        (``variance_of``; default) or from the replicates alone."""
        return self.variance_of(self.root, alpha) if residuals else self.variance(IDENTITY)

    def path(self, node_id: str) -> list[Node]:
        """Nodes from the root to ``node_id``."""
        out = []
        cur: str | None = node_id
        while cur is not None:
            out.append(self.nodes[cur])
            cur = self.nodes[cur].parent
        return out[::-1]

    def node_summary(self, node: Node) -> NodeSummary:
        """Everything reported about a node, typed (scores None when it failed)."""
        st = self.study
        kinds = {c.name: c.kind for c in st.covariates}
        head = NodeSummary(
            id=node.id, parent=node.parent, move=node.move, depth=node.depth,
            label=node.spec.label(st.y_name, st.x_name), formula=node.spec.formula(st.y_name, st.x_name, kinds),
            spec=node.spec.as_json(), children=tuple(node.children), pruned=tuple(node.pruned),
            also_from=tuple(node.also_from), error=node.error, detail=node.detail,
        )
        s = node.score
        if s is None:
            return head
        best = self.best_aicc()
        return dataclasses.replace(
            head, k=s.k, coefficients=s.fit.coefficients, sigma=s.fit.sigma, lack_of_fit=s.lack_of_fit,
            lack_of_fit_pure=s.lack_of_fit_pure, passes=self.passes(node), nested=node.nested,
            chosen_from_data=tuple(node.spec.data_choices(st.y_name, st.x_name)), criteria=s.criteria,
            delta_aicc=(s.criteria.aicc - best) if (best is not None and s.criteria.aicc is not None) else None,
            press=s.press, press_note=s.press_note, max_studentized=s.max_studentized, spread=s.spread,
            max_deviation=s.max_deviation, deviation_note=s.deviation_note, warnings=tuple(s.warnings),
        )

    def node_json(self, node: Node) -> dict:
        """The stable JSON shape of a node (documented in the README): ``node_summary(node).to_dict()``."""
        out = self.node_summary(node).to_dict()
        if self.runs is not None:
            out["runs"] = None if node.runs is None else node.runs.as_json()
            if node.runs is None:
                out["runs_error"] = node.runs_error
        return out

    def as_json(self, rule: str = "aicc") -> dict:
        """``{"suggested", "reason", "rule", "alpha", "caution", "nodes"}``."""
        sug = self.suggest(rule)
        return {
            "suggested": sug.node,
            "reason": sug.reason,
            "rule": rule,
            "alpha": self.alpha,
            "evidence": sug.to_dict()["evidence"],
            "caution": POST_SEARCH_CAUTION,
            "nodes": [self.node_json(n) for n in self.nodes.values()],
        }


def _order(node_id: str) -> int:
    return 0 if node_id == "root" else int(node_id[1:])


def grow(study: Study, *, depth: int = 2, alpha: float = 0.05, allowable_deviation: float | None = None,
         progress: ProgressFn | None = None, cancel: CancelFn | None = None, runs: str | None = None) -> RemedyTree:
    """Build the remedy tree breadth-first to ``depth`` (``runs``: column of a random run intercept)."""
    tree = RemedyTree(study, alpha=alpha, allowable_deviation=allowable_deviation, runs=runs)
    tree.grow(depth, progress, cancel)
    return tree
