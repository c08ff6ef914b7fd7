"""How sure is the suggestion? Selection stability by resampling the data, design kept.

The data are resampled N times *keeping the design*: every row keeps its setting (its x, its
categories, its numeric covariates and weight) and receives a new response

    y*_i = μ_i + s_i · r*_i,

a residual bootstrap of a fixed design (Efron & Tibshirani, *An Introduction to the Bootstrap*,
1993, ch. 9 [from memory]): the settings are the analyst's, not sampled. s_i is the spread of row
i's x level — the root mean square there of the residuals of the suggested model's x-as-a-factor
version (x as a factor plus the node's covariates), inflated by √(n/(n − p)) for the degrees
of freedom that fit used — and r* is drawn with replacement from all rows' residuals divided by
their own level's spread. Each level keeps its own spread without a variance model, so a spread
that grows with the level stays in every resample, and no level collapses to identical
replicates (drawing a level's own 2–3 rows with replacement does that one time in nine and fakes
zero pure error). Two alternatives were tried and dropped: a wild bootstrap (each row's own
residual times a random weight) blurred the level spreads so much that strong spread evidence
(p ≈ 1e-4 on the demo) was found in only a few resamples; standardizing by a fitted power of the
mean carried that model's misfit at the lowest level into every resample.

The mean μ is the suggested model's fit (the line when nothing is suggested) plus its departures
from that x-as-a-factor version shrunk by the positive-part James–Stein factor
κ = √max(0, 1 − (p_full − p_model)·σ̂²/SS_dep): departures no larger than noise vanish, a clear lack
of fit stays (James & Stein 1961; Efron & Morris 1973 [from memory]). Resampling around the raw
level means instead adds the data's own noise to every resample as lack of fit, so even a clear
quadratic loses to a cubic, or fails lack of fit, in a quarter of resamples at 10 levels.

The same tree is grown on each resample (same depth, α and rule) and the node it suggests is
counted (Efron 2014, JASA 109:991 judges a selection the same way [from memory]). A resample's
winner is matched to the original tree by its form: the same named transforms (log, √, 1/·), a
Box–Cox or Box–Tidwell power of the same kind (the resample reads its own λ or α), the same
degree, covariates and interactions, and weights or none (θ again read afresh). Shares sum to 1
over the original nodes plus ``none`` (no node qualified) and ``other`` (a form the original
tree does not hold; ``other_forms`` names them).

Large tables: each resample is drawn from a seeded stratified sample of at most ``MAX_ROWS``
rows, and the result says so.
"""

from __future__ import annotations

import time
from collections import Counter
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from ..errors import UsageError
from ..stats.rows import Rows
from .model_spec import ModelSpec

if TYPE_CHECKING:
    from ..stats.study import Study
    from .tree import RemedyTree

__all__ = ["Stability", "selection_stability", "form_key", "shares_table", "MAX_ROWS", "SCHEME"]

MAX_ROWS = 20_000
"""Above this many rows each resample is drawn from a seeded stratified sample of this size."""
SCHEME = ("residual bootstrap of the design: every row keeps its x and covariates and gets the suggested "
          "model's fit plus its shrunken departures from x as a factor, plus a residual drawn from all rows, "
          "each standardized by its own level's spread and rescaled to the receiving level's")
NONE, OTHER = "none", "other"


@dataclass(frozen=True, slots=True)
class Stability:
    """How often each node wins the suggestion over resamples of the replicates."""

    resamples: int
    """Resamples completed (fewer than asked when cancelled)."""
    seed: int
    """Seed of the resampling."""
    scheme: str
    """How the data were resampled, in words."""
    rule: str
    """Suggestion rule applied to every resample."""
    shares: dict[str, float]
    """Node id (or 'none', 'other') → share of resamples it won; sums to 1."""
    suggested: str | None
    """The suggestion on the data themselves."""
    sample_note: str | None = None
    """Set when resamples were drawn from a sample of the rows."""
    other_forms: dict[str, float] = field(default_factory=dict)
    """Label → share of the winners the original tree does not hold (they make up 'other')."""
    seconds: float = field(default=0.0, compare=False)
    """Time taken."""

    def share(self, node_id: str) -> float:
        """Share of one node (0 when it never won)."""
        return self.shares.get(node_id, 0.0)

    def ranked(self) -> list[tuple[str, float]]:
        """(id, share) by share, largest first."""
        return sorted(self.shares.items(), key=lambda kv: (-kv[1], kv[0]))

    def reading(self) -> str:
        """One line a reviewer can quote."""
        if not self.resamples:
            return "no resample completed"
        ranked = [(k, v) for k, v in self.ranked() if v > 0]
        sug = self.suggested or NONE
        mine = self.share(sug)
        rival = next(((k, v) for k, v in ranked if k != sug), None)
        what = "the straight line" if sug == "root" else ("no suggestion" if sug == NONE else f"the suggestion {sug}")
        text = f"{what} wins {100 * mine:.0f} % of {self.resamples} resamples"
        if rival is not None:
            name = {"none": "no suggestion", "other": "a form not in this tree"}.get(rival[0], rival[0])
            text += f"; its runner-up {name} wins {100 * rival[1]:.0f} %"
        return text

    def to_dict(self) -> dict[str, Any]:
        """``{resamples, seed, scheme, rule, shares, suggested, sample_note}``."""
        return {"resamples": self.resamples, "seed": self.seed, "scheme": self.scheme, "rule": self.rule,
                "shares": dict(self.ranked()), "suggested": self.suggested, "sample_note": self.sample_note,
                "other_forms": dict(sorted(self.other_forms.items(), key=lambda kv: (-kv[1], kv[0])))}


def _kind_key(t) -> tuple:
    # named transforms match exactly; a Box–Cox λ or Box–Tidwell α is a power read from the data,
    # which a resample reads afresh: any such power matches any other of its kind
    return t.key() if t.is_named else (t.kind, "power from the data")


def form_key(spec: ModelSpec) -> tuple:
    """What a resample's winner must share with an original node to count as the same form."""
    return (_kind_key(spec.response), _kind_key(spec.predictor), spec.degree, spec.covariates, spec.interactions,
            spec.weights is not None)


def _strata(study: Study) -> tuple[np.ndarray, int]:
    """Cells that a row sample keeps: x level × categories."""
    cats = tuple(c.name for c in study.covariates if c.kind == "categorical")
    return study.group_codes(cats)


def _stratified_sample(codes: np.ndarray, c: int, limit: int, rng: np.random.Generator) -> np.ndarray:
    """Row indices: at most ``limit`` rows, proportional per group, each group keeping ≥ 2 rows
    where it has them."""
    counts = np.bincount(codes, minlength=c)
    share = np.maximum(np.minimum(counts, 2), np.floor(counts * (limit / codes.size)).astype(int))
    order = np.argsort(codes, kind="stable")
    starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
    picked = [rng.choice(order[starts[g]:starts[g] + counts[g]], size=int(share[g]), replace=False)
              for g in range(c) if counts[g]]
    return np.sort(np.concatenate(picked))


@dataclass(frozen=True, slots=True, eq=False)
class _Generator:
    """What every resample needs: the world's mean and spread per row, and the residual pool."""

    fitted: np.ndarray
    scale: np.ndarray
    pool: np.ndarray

    def draw(self, rng: np.random.Generator) -> np.ndarray:
        return self.fitted + self.scale * self.pool[rng.integers(0, self.pool.size, self.fitted.size)]


def _generator(study: Study, model_fit: np.ndarray | None = None, model_rank: int = 0,
               covariates: tuple[str, ...] | None = None) -> _Generator:
    """The resampling world: its mean and spread per row, and the pool of standardized residuals.

    Residuals are those of x-as-a-factor plus ``covariates`` (the suggested node's; all of the
    study's when None); each x level's spread is their root
    mean square there (inflated by √(n/(n − p)) for the degrees of freedom that fit used; the
    pooled value where a level has no replicate); the pool holds every residual divided by its
    level's spread. The mean is the suggested model's fit ``model_fit`` plus its departures from
    x-as-a-factor shrunk by κ = √max(0, 1 − (p_full − p_model)·σ̂²/SS_dep) (positive-part
    James–Stein): departures no larger than noise vanish, clear lack of fit is kept."""
    n = study.n
    cols = [(study.x_codes == g).astype(float) for g in range(study.c)]
    for cov in study.covariates:
        if covariates is not None and cov.name not in covariates:
            continue
        if cov.kind == "categorical":
            cols += [(cov.values == j).astype(float) for j in range(1, len(cov.levels))]
        else:
            v = np.asarray(cov.values, dtype=float)
            cols.append((v - v.mean()) / (np.ptp(v) or 1.0))
    sw = np.ones(n) if study.weights is None else np.sqrt(study.weights)
    design = np.column_stack(cols) * sw[:, None]
    q, r = np.linalg.qr(design)
    keep = np.abs(np.diag(r)) > 1e-10 * np.abs(np.diag(r)).max()
    q = q[:, keep]
    fitted = (q @ (q.T @ (study.y * sw))) / sw
    p_full = int(keep.sum())
    e = (study.y - fitted) * sw
    if n <= p_full or not np.any(e):
        raise UsageError("stability needs replicated settings: every row is fitted exactly by x as a factor "
                         "(no residual to resample)")
    inflate = np.sqrt(n / (n - p_full))
    codes = study.x_codes
    cnt = np.bincount(codes, minlength=study.c).astype(float)
    ss = np.bincount(codes, weights=e * e, minlength=study.c)
    pooled = float(np.sqrt(ss.sum() / n)) * inflate
    level = np.where((cnt > 1) & (ss > 0), np.sqrt(ss / np.maximum(cnt, 1)) * inflate, pooled)
    scale = level[codes] / sw
    pool = (e * inflate / level[codes])[(cnt[codes] > 1) & (ss[codes] > 0)]
    pool = pool - pool.mean()
    pool = pool / (float(np.sqrt(np.mean(pool**2))) or 1.0)
    world = fitted
    if model_fit is not None and np.isfinite(model_fit).all():
        dep = fitted - model_fit
        ss_dep = float(np.sum((sw * dep) ** 2))
        if ss_dep > 0 and p_full > model_rank:
            noise = (p_full - model_rank) * float(np.sum(e * e)) / (n - p_full)
            kappa = float(np.sqrt(max(0.0, 1.0 - noise / ss_dep)))
            world = model_fit + kappa * dep
        else:
            world = model_fit
    return _Generator(world, scale, pool)


def _model_fit(tree: RemedyTree, node_id: str | None, study: Study) -> tuple[np.ndarray | None, int]:
    """The suggested node's fit at the study's rows on the original y scale (median back-transform)."""
    from .scoring import predict_terms

    node = tree.nodes.get(node_id or "root")
    if node is None or node.score is None:
        return None, 0
    s = node.score
    covs = {}
    for cov in study.covariates:
        covs[cov.name] = (np.asarray(cov.levels, dtype=object)[cov.values].astype(str) if cov.kind == "categorical"
                          else np.asarray(cov.values, dtype=float))
    beta = np.array([0.0 if c.name in s.fit.aliased else c.estimate for c in s.fit.coefficients])
    with np.errstate(all="ignore"):
        t = np.asarray(node.spec.predictor.forward(study.x), dtype=float)
        z = predict_terms(s.terms, beta, t, covs)
        y = np.asarray(node.spec.response.inverse(z), dtype=float)
    return (y if np.isfinite(y).all() else None), s.fit.rank


def _identity():
    from ..stats.transforms import IDENTITY

    return IDENTITY


def _resampled(study: Study, y: np.ndarray) -> Study:
    """The study with a new response (same rows, settings, covariates and weights)."""
    from ..read.cleaning import CleaningReport
    from ..stats.study import Study as StudyClass

    report = CleaningReport(study.source, study.n, study.n, ())
    return StudyClass(source=study.source, report=report, y_name=study.y_name, x_name=study.x_name,
                      y=y, x=study.x, covariates=study.covariates, weights=study.weights,
                      weights_name=study.weights_name, tolerance=study.tolerance,
                      tolerance_text=study.tolerance_text)


def _subset(study: Study, rows: np.ndarray) -> Study:
    """The study restricted to some rows."""
    from dataclasses import replace as dc_replace

    from ..read.cleaning import CleaningReport
    from ..stats.study import Study as StudyClass

    covs = tuple(dc_replace(c, values=c.values[rows]) for c in study.covariates)
    report = CleaningReport(study.source, int(rows.size), int(rows.size), ())
    return StudyClass(source=study.source, report=report, y_name=study.y_name, x_name=study.x_name,
                      y=study.y[rows], x=study.x[rows], covariates=covs,
                      weights=None if study.weights is None else study.weights[rows],
                      weights_name=study.weights_name, tolerance=study.tolerance,
                      tolerance_text=study.tolerance_text)


def _rows_study(study: Study) -> tuple[Study, str | None]:
    """The study itself when its rows are in memory, else one built from a seeded sample."""
    if isinstance(study.rows(), Rows):
        return study, None
    import pandas as pd

    from ..stats.study import make_study

    sample = study.row_sample(MAX_ROWS)
    frame = pd.DataFrame({study.y_name: sample.y, study.x_name: sample.x, **sample.covariates})
    if sample.weights is not None and study.weights_name is not None:  # the user's weights go along
        frame[study.weights_name] = sample.weights
    base = make_study(frame, y=study.y_name, x=study.x_name, covariates=[c.name for c in study.covariates],
                      weights=study.weights_name if sample.weights is not None else None,
                      tolerance=study.tolerance_text, source=study.source)
    note = (f"the rows are read through the SQL engine: resamples are drawn from a seeded random sample of "
            f"{base.n:,} of its {study.n:,} rows")
    return base, note


def selection_stability(tree: RemedyTree, resamples: int, *, depth: int, seed: int = 0, rule: str = "aicc",
                        progress: Callable[[int, int], None] | None = None,
                        cancel: Callable[[], bool] | None = None) -> Stability:
    """Grow the same tree on ``resamples`` resamples of the replicates and count the winners."""
    from .tree import RemedyTree as Tree

    if not 1 <= resamples <= 100_000:
        raise UsageError(f"stability needs between 1 and 100000 resamples, not {resamples}")
    if seed < 0:
        raise UsageError(f"seed {seed} must be ≥ 0")
    start = time.perf_counter()
    base, note = _rows_study(tree.study)
    rng = np.random.default_rng([seed, 0x5EED])
    if base.n > MAX_ROWS:
        codes, c = _strata(base)
        rows = _stratified_sample(codes, c, MAX_ROWS, rng)
        note = (note + "; " if note else "") + (f"resamples are drawn from a seeded stratified sample of "
                                                f"{rows.size:,} of the {base.n:,} rows")
        base = _subset(base, rows)
    sug = tree.suggest(rule)
    fit, rank = _model_fit(tree, sug.node, base)
    node = tree.nodes[sug.node or "root"]
    gen = _generator(base, model_fit=fit, model_rank=rank, covariates=node.spec.covariates)
    by_form = {form_key(n.spec): n.id for n in tree.nodes.values()}
    counts: Counter[str] = Counter()
    others: Counter[str] = Counter()
    done = 0
    for i in range(resamples):
        if cancel is not None and cancel():
            break
        y_new = gen.draw(rng)
        try:
            t = Tree(_resampled(base, y_new), alpha=tree.alpha, allowable_deviation=tree.allowable_deviation)
            t.grow(depth)
            won = t.suggest(rule).node
        except Exception as exc:  # noqa: BLE001 - a resample the engine refuses counts as no suggestion
            from ..errors import BendwiseError

            if not isinstance(exc, BendwiseError | ValueError | FloatingPointError | np.linalg.LinAlgError):
                raise
            won = None
        if won is None:
            counts[NONE] += 1
        else:
            hit = by_form.get(form_key(t.nodes[won].spec), OTHER)
            counts[hit] += 1
            if hit == OTHER:
                others[t.nodes[won].spec.label(base.y_name, base.x_name)] += 1
        done += 1
        if progress is not None:
            progress(i + 1, resamples)
    shares = {k: v / done for k, v in counts.items()} if done else {}
    return Stability(done, seed, SCHEME, rule, shares, sug.node, sample_note=note,
                     other_forms={k: v / done for k, v in others.items()}, seconds=time.perf_counter() - start)


def shares_table(stab: Stability, tree: RemedyTree, top: int = 5) -> list[tuple[str, str, float]]:
    """(id, label, share) of the ``top`` most frequent winners, for reports."""
    out = []
    for nid, share in stab.ranked()[:top]:
        if nid in tree.nodes:
            label = tree.nodes[nid].spec.label(tree.study.y_name, tree.study.x_name)
        elif nid == OTHER:
            top3 = sorted(stab.other_forms.items(), key=lambda kv: (-kv[1], kv[0]))[:3]
            label = "not in this tree: " + ", ".join(lab for lab, _ in top3)
        else:
            label = "no node qualified"
        out.append((nid, label, share))
    return out

