"""The honest suggestion: a remedy only when the data demand it.

A search over dozens of candidates always finds one that beats the straight line by chance. The
rule bendwise applies (documented in the README with its measured error rates):

1. **Evidence first.** Each kind of departure from the line has one test, on the straight line:
   *shape* — the lack-of-fit test of the line (where it cannot run: the 1-df curvature test, the
   line against line + x²; where neither can, no evidence); *spread* — the likelihood-ratio test
   of a trend of spread with the mean (``engine.variance``; needs 3 replicates at most levels);
   *each admitted covariate* — its nested F test against the line. Holm's procedure over these
   tests at α decides which kinds of evidence are established, so that under a straight line
   with constant spread and no covariate effect a remedy is suggested with probability at most
   α (Holm 1979, Scand J Statist 6:65).
2. **Only moves that answer established evidence.** Shape opens transforms of y or x, the Box–Cox
   and Box–Tidwell powers and higher degrees; spread opens weights and transforms of y; a
   covariate opens itself and its interaction with x. A node is a candidate when every move on
   its path is open and it passes lack of fit at α (or cannot be tested and fails nothing else).
   The straight line is always a candidate.
3. **Every choice made from the data is paid for.** A transform of y or of x chosen among
   alternatives (log, √, 1/·, a Box–Cox λ or Box–Tidwell α, snapped to a round value or not) and
   the weights' power θ count one parameter each in AICc (``ModelSpec.extra_params``).
4. **Then the criterion.** By rule ``aicc`` the simplest candidate within 2 AICc of the best wins
   (fewest parameters, then fewest moves); ``bic``, ``simplest`` and ``press`` rank the same
   candidates their own way.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

from ..errors import UsageError
from ..numfmt import fmt_num, fmt_p, p_clause
from .model_spec import ModelSpec

if TYPE_CHECKING:
    from .tree import Node, RemedyTree

__all__ = ["Evidence", "Suggestion", "SuggestionPolicy", "SUGGESTION_POLICIES", "suggest", "weigh_evidence",
           "move_family", "RULES", "published_rates"]

RULES = ("aicc", "bic", "simplest", "press")
SHAPE, SPREAD = "shape", "spread"


@dataclass(frozen=True, slots=True)
class SuggestionPolicy:
    """How the suggestion guards against choosing noise (the default is the documented rule)."""

    gate: str = "holm"
    """'holm' (evidence tests with Holm's procedure at α), 'alpha' (each test at α, no
    multiplicity control) or 'none' (every node is a candidate)."""
    margin: float = 2.0
    """A richer node must lower AICc by more than this to be preferred."""
    spread_increasing: bool = True
    """Spread evidence is a spread growing with the mean (one-sided test); False: either way."""
    line_yields: bool = True
    """Once evidence is established, the straight line is a candidate only when no remedy that
    answers the evidence passes lack of fit (False: the line competes as any other node)."""
    spread_from_residuals: bool = True
    """Read the spread trend from the straight line's residuals when the line passes lack of fit
    (False: always from the replicates alone)."""


SUGGESTION_POLICIES: dict[str, SuggestionPolicy] = {
    "default": SuggestionPolicy("holm", 2.0),
    "no-gate": SuggestionPolicy("none", 2.0),
    "no-gate-margin-4": SuggestionPolicy("none", 4.0),
    "gate-each-at-alpha": SuggestionPolicy("alpha", 2.0),
    "holm-two-sided-spread": SuggestionPolicy("holm", 2.0, False),
    "holm-line-competes": SuggestionPolicy("holm", 2.0, True, False),
    "holm-spread-from-replicates": SuggestionPolicy("holm", 2.0, True, True, False),
}
"""The documented rule and the alternatives measured beside it (bench/suggestion_rates.py)."""


@dataclass(frozen=True, slots=True)
class Evidence:
    """One kind of departure from the straight line and the test that looks for it."""

    family: str
    """'shape', 'spread' or 'covariate:NAME'."""
    test: str
    """The test used, in words."""
    p: float | None
    """Its p-value (None when it cannot be run)."""
    threshold: float | None
    """The level p had to reach under the multiplicity rule (None when not compared)."""
    established: bool
    """True when the evidence opens this family's moves."""
    reason: str | None = None
    """Why the test cannot be run, or a note."""

    def to_dict(self) -> dict:
        """JSON description."""
        return {"family": self.family, "test": self.test, "p": self.p, "threshold": self.threshold,
                "established": self.established, "reason": self.reason}

    as_json = to_dict

    def summary(self) -> str:
        """One line: family, test, p against its threshold, and whether it opens moves."""
        if self.p is None:
            return f"{self.family}: {self.test} — not run ({self.reason or 'no reason given'})"
        bar = "" if self.threshold is None else f" (needed < {fmt_num(self.threshold, 3)})"
        word = "established" if self.established else "not established"
        return f"{self.family}: {self.test}, {p_clause(self.p)}{bar} — {word}"


@dataclass(frozen=True, slots=True)
class Suggestion:
    """The suggested node and why."""

    node: str | None
    """Node id, or None when no node qualifies."""
    rule: str
    """Rule used."""
    reason: str
    """The reason in words."""
    evidence: tuple[Evidence, ...] = ()
    """The evidence weighed before any remedy was considered."""

    def to_dict(self) -> dict:
        """``{"suggested", "reason", "rule", "evidence"}`` as in ``grow --json``."""
        return {"suggested": self.node, "reason": self.reason, "rule": self.rule,
                "evidence": [e.to_dict() for e in self.evidence]}

    def summary(self) -> str:
        """Plain text: the suggested node (or none) and why, then one line per evidence test."""
        lines = [f"{self.node or 'none'} — {self.reason}"]
        lines += [f"  {e.summary()}" for e in self.evidence]
        return "\n".join(lines)


def move_family(parent: ModelSpec, child: ModelSpec) -> str:
    """Which kind of evidence a move answers: 'response' (shape or spread), 'shape', 'spread'
    or 'covariate:NAME'."""
    if child.response != parent.response:
        return "response"
    if child.predictor != parent.predictor or child.degree != parent.degree:
        return SHAPE
    if child.weights != parent.weights:
        return SPREAD
    added = (set(child.covariates) - set(parent.covariates)) | (set(child.interactions) - set(parent.interactions))
    if added:
        return "covariate:" + sorted(added)[0]
    return SHAPE


def _shape_test(tree: RemedyTree) -> tuple[str, float | None, str | None]:
    """(test name, p, reason) of the shape evidence on the straight line."""
    root = tree.root.score
    if root is None:
        return "lack of fit of the straight line", None, tree.root.error
    lof = root.lack_of_fit
    if lof.testable:
        name = "lack of fit of the straight line" + (" (approximate)" if lof.approximate else "")
        return name, lof.p, None
    curv = tree.curvature_test()
    if curv.testable:
        return ("curvature: straight line against line + x² (lack of fit untestable: "
                f"{lof.reason})"), curv.p, None
    return "lack of fit of the straight line", None, f"{lof.reason}; the 1-df curvature test cannot run either"


def weigh_evidence(tree: RemedyTree, alpha: float, policy: SuggestionPolicy) -> tuple[Evidence, ...]:
    """The evidence tests on the straight line and which of them are established."""
    tests: list[tuple[str, str, float | None, str | None]] = []
    name, p, why = _shape_test(tree)
    tests.append((SHAPE, name, p, why))
    trend = tree.spread_evidence(residuals=policy.spread_from_residuals, alpha=alpha)
    if trend.available and policy.spread_increasing:
        source = ("the line's residuals" if policy.spread_from_residuals and tree.passes(tree.root, alpha)
                  and tree.root.score is not None and tree.root.score.lack_of_fit.testable else "the replicates")
        tests.append((SPREAD, f"spread growing with the mean ({source}; likelihood ratio, θ = 0 against θ > 0)",
                      trend.p_increasing, None))
    elif trend.available:
        tests.append((SPREAD, "trend of spread with the mean (likelihood ratio, θ = 0)", trend.p, None))
    else:
        tests.append((SPREAD, "trend of spread with the mean", None, trend.reason))
    runs = getattr(tree, "runs", None)
    for cov in tree.study.covariates:
        if runs is not None and cov.name == runs.name:
            continue  # a random intercept, never a fixed covariate move
        t = tree.covariate_test(cov.name)
        tests.append((f"covariate:{cov.name}", f"nested F: line + {cov.name} against the line",
                      t.p if t.testable else None, None if t.testable else t.reason))
    if policy.gate == "none":
        return tuple(Evidence(f, n, p, None, True, r) for f, n, p, r in tests)
    usable = sorted((p, i) for i, (_, _, p, _) in enumerate(tests) if p is not None and math.isfinite(p))
    thresholds: dict[int, float] = {}
    established: set[int] = set()
    m = len(usable)
    if policy.gate == "alpha":
        for p, i in usable:
            thresholds[i] = alpha
            if p < alpha:
                established.add(i)
    else:  # Holm: the j-th smallest p (from 0) must fall below α/(m − j), stopping at the first miss
        stopped = False
        for j, (p, i) in enumerate(usable):
            thresholds[i] = alpha / (m - j)
            if not stopped and p < thresholds[i]:
                established.add(i)
            else:
                stopped = True
    return tuple(Evidence(f, n, p, thresholds.get(i), i in established, r)
                 for i, (f, n, p, r) in enumerate(tests))


def _open(family: str, open_families: set[str]) -> bool:
    if family == "response":
        return SHAPE in open_families or SPREAD in open_families
    return family in open_families


def eligible(tree: RemedyTree, node: Node, open_families: set[str]) -> bool:
    """True when every move on the node's path answers established evidence."""
    cur = node
    while cur.parent is not None:
        parent = tree.nodes[cur.parent]
        if not _open(move_family(parent.spec, cur.spec), open_families):
            return False
        cur = parent
    return True


def _aicc(node: Node) -> float | None:
    s = node.score
    return None if s is None else s.criteria.aicc


def _order(node_id: str) -> int:
    return 0 if node_id == "root" else int(node_id[1:])


def suggest(tree: RemedyTree, rule: str = "aicc", alpha: float | None = None,
            policy: SuggestionPolicy | str = "default") -> Suggestion:
    """Pick a node by ``rule`` among the candidates that the evidence allows (module text)."""
    if rule not in RULES:
        raise UsageError(f"unknown rule {rule!r}; choose one of {', '.join(RULES)}")
    if isinstance(policy, str):
        if policy not in SUGGESTION_POLICIES:
            raise UsageError(f"unknown suggestion policy {policy!r}; choose one of {', '.join(SUGGESTION_POLICIES)}")
        policy = SUGGESTION_POLICIES[policy]
    a = tree.alpha if alpha is None else alpha
    evidence = weigh_evidence(tree, a, policy)
    open_families = {e.family for e in evidence if e.established}
    scored = tree.scored()
    cands = [n for n in scored if tree.passes(n, a) and eligible(tree, n, open_families)]
    if open_families and policy.line_yields and policy.gate != "none" and any(n.id != "root" for n in cands):
        cands = [n for n in cands if n.id != "root"]
    key = tree.sort_key(rule)
    if not cands:
        return Suggestion(None, rule, _no_candidate_reason(tree, rule, a, evidence), evidence)
    if rule == "aicc":
        with_aicc = [n for n in cands if _aicc(n) is not None]
        if not with_aicc:
            chosen = min(cands, key=lambda n: (n.score.k, n.depth, _order(n.id)))  # type: ignore[union-attr]
        else:
            best = min(_aicc(n) for n in with_aicc)  # type: ignore[type-var]
            close = [n for n in with_aicc if _aicc(n) <= best + policy.margin]  # type: ignore[operator]
            # fewer parameters first, then fewer moves from the straight line, then AICc
            chosen = min(close, key=lambda n: (n.score.k, n.depth, _aicc(n), _order(n.id)))  # type: ignore[union-attr]
    elif rule == "press":
        with_press = [n for n in cands if n.score.press is not None]  # type: ignore[union-attr]
        if not with_press:
            return Suggestion(None, rule, "PRESS is unavailable for these candidates (large table); use another rule",
                              evidence)
        chosen = min(with_press, key=key)
    else:
        chosen = min(cands, key=key)
    return Suggestion(chosen.id, rule, _reason(tree, chosen, rule, a, evidence, policy), evidence)


def _evidence_words(evidence: tuple[Evidence, ...]) -> str:
    shown = []
    for e in evidence:
        if e.p is None:
            continue
        fam = e.family.replace("covariate:", "")
        mark = "<" if e.established else "≥"
        shown.append(f"{fam} p = {fmt_p(e.p)} {mark} {e.threshold:.3g}" if e.threshold is not None
                     else f"{fam} p = {fmt_p(e.p)}")
    return "; ".join(shown)


def _no_candidate_reason(tree: RemedyTree, rule: str, alpha: float, evidence: tuple[Evidence, ...]) -> str:
    line_passes = tree.passes(tree.root, alpha)
    opened = [e for e in evidence if e.established]
    if not line_passes and not opened:
        shape = evidence[0]
        return (f"the straight line fails lack of fit at α = {alpha:g} (p = {fmt_p(shape.p)}), but with "
                f"{sum(e.p is not None for e in evidence)} kinds of evidence weighed (Holm) that is not enough "
                f"to justify a remedy ({_evidence_words(evidence)}). Measure more replicates (bendwise plan) "
                "and look at the candidates yourself.")
    fails = sorted(tree.scored(), key=tree.sort_key(rule))
    near = fails[0].spec.label(tree.study.y_name, tree.study.x_name) if fails else "—"
    return (f"no candidate passes lack of fit at α = {alpha:g}; the best by {rule} is {near}, which still "
            "fails. Look for a missing variable, or grow further.")


def _reason(tree: RemedyTree, node: Node, rule: str, alpha: float, evidence: tuple[Evidence, ...],
            policy: SuggestionPolicy) -> str:
    s = node.score
    assert s is not None
    lab = node.spec.label(tree.study.y_name, tree.study.x_name)
    lof = s.lack_of_fit
    part = f"passes lack of fit (p = {fmt_p(lof.p)})" if lof.testable else f"lack of fit untestable ({lof.reason})"
    shown = _evidence_words(evidence)
    if node.id == "root":
        if not any(e.established for e in evidence):
            if evidence and evidence[0].p is None:
                return (f"the straight line is kept: lack of fit cannot be tested here ({evidence[0].reason}), "
                        "so no remedy is suggested without evidence. bendwise plan tells which levels and "
                        "replicates make the test possible")
            return (f"the straight line {part}; no evidence calls for a remedy"
                    + (f" ({shown})" if shown else ""))
        return (f"the straight line {part}; no remedy improves AICc by more than {policy.margin:g} "
                "once every choice made from the data is counted")
    root = tree.root.score
    rs = f"{lab}: {part}"
    if root is not None and s.criteria.aicc is not None and root.criteria.aicc is not None:
        d = root.criteria.aicc - s.criteria.aicc
        rs += f", AICc {abs(d):.1f} {'below' if d >= 0 else 'above'} the straight line"
    opened = ", ".join(e.family.replace("covariate:", "covariate ") for e in evidence if e.established)
    if opened:
        rs += f"; evidence: {opened} ({shown})"
    if rule == "aicc":
        rs += (f"; the simplest candidate within {policy.margin:g} AICc of the best (k = {s.k}: each transform "
               "or weight chosen from the data counts as a parameter)")
    elif rule == "bic":
        bic = "undefined: exact fits" if s.criteria.bic is None else f"{s.criteria.bic:.1f}"
        rs += f"; lowest BIC ({bic}) among the candidates"
    elif rule == "simplest":
        rs += f"; fewest parameters (k = {s.k}) among the candidates"
    else:
        rs += f"; lowest PRESS ({s.press:.4g}) among the candidates"
    dev = tree.allowable_deviation
    if dev is not None and s.max_deviation is not None:
        rs += (f"; its largest departure from the line is {s.max_deviation:.4g} (allowable {dev:g}: "
               f"{'within' if s.max_deviation <= dev else 'beyond'} it)")
    return rs



def published_rates() -> dict:
    """The rule's error rates as last measured by ``bench/suggestion_rates.py`` (the README's
    table): ``{script, sets, depth, alpha, seed, rule, cells: [{design, truth, measure, rate,
    low, high, n}]}``. Reports quote them beside every suggestion."""
    import json
    from pathlib import Path

    return json.loads((Path(__file__).resolve().parent / "suggestion_rates.json").read_text(encoding="utf-8"))
