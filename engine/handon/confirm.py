"""Confirm a handed-on model on an independent run: no search, so the p-values are honest.

A model chosen by searching a tree is tested again on data that played no part in the search:

* **form** — the frozen form (the same transforms, powers, degree, covariates, interactions and
  weighting rule) is refitted to the new run, and its lack of fit is tested exactly as ``grow``
  tests a node (the shape in x against the same model with x as a factor; pure error). Nothing
  was chosen from these data, so the p-value is free of the search.
* **transfer** — do the new data follow the exported curve itself (coefficients fixed)? With
  d = √w·(g(y) − ĝ) per row (ĝ the exported curve, w its weights), the mean departure d̄_j of
  every setting of the new run (C settings: x levels × the model's categories) is tested against
  0 by a Wald statistic F = d̄′S⁻¹d̄ / C on (C, n − C) degrees of freedom, where
  S = s²·diag(1/n_j) + X̄VX̄′: s² the new run's pure error (so the test does not lean on the old
  σ), and X̄VX̄′ the exported curve's own uncertainty at those settings (V its coefficient
  covariance), so a curve estimated from few points is not called "moved" for its own
  estimation error. Without that second part (V = 0) it is the plain F of the level means. The largest
  departure of a setting's mean y from the curve (Duan's smearing mean for a transformed
  response, as ``apply`` gives) is reported in y units, and with an allowable deviation D each
  setting is judged against it.

Verdict: ``confirmed`` (both pass at α, and every setting within D when D is given), ``form
holds, curve moved``, ``form rejected``, or ``untestable`` with the reason.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from ..cautions import CAUTION
from ..checks.results import LackOfFit
from ..errors import SpecError, UsageError
from ..numfmt import fmt_num, p_clause
from ..stats.transforms import Transform
from ..tree.model_spec import ModelSpec, WeightRule

if TYPE_CHECKING:
    import pandas as pd

    from ..stats.study import Study
    from .specfile import HandedModel

__all__ = ["FormTest", "TransferTest", "Confirmation", "confirm", "model_spec_from_doc", "study_columns",
           "group_route_problem", "VERDICTS"]

VERDICTS = ("confirmed", "form holds, curve moved", "form rejected", "untestable")


@dataclass(frozen=True, slots=True)
class FormTest:
    """The lack-of-fit test of the frozen form, refitted to the new run."""

    testable: bool
    """False when the new run cannot test the form (see ``reason``)."""
    f: float | None = None
    """F ratio."""
    df_lack: int | None = None
    """Lack-of-fit degrees of freedom."""
    df_pure: int | None = None
    """Pure-error degrees of freedom."""
    p: float | None = None
    """Upper-tail p-value."""
    reason: str | None = None
    """Why it cannot be tested, or which comparison was made."""

    def to_dict(self) -> dict[str, Any]:
        """JSON shape: ``{testable, f, df_lack, df_pure, p, reason}``."""
        return {"testable": self.testable, "f": self.f, "df_lack": self.df_lack, "df_pure": self.df_pure,
                "p": self.p, "reason": self.reason}


@dataclass(frozen=True, slots=True)
class TransferTest:
    """Do the new settings' means follow the exported curve (coefficients fixed)?"""

    testable: bool
    """False when the new run cannot test it (see ``reason``)."""
    f: float | None = None
    """F ratio of the settings' mean departures against the new pure error."""
    df1: int | None = None
    """Settings of the new run (C)."""
    df2: int | None = None
    """Pure-error degrees of freedom of the new run (n − C)."""
    p: float | None = None
    """Upper-tail p-value."""
    max_deviation: float | None = None
    """Largest |mean y − curve| over the settings, in y units."""
    max_deviation_at: str | None = None
    """The setting where it occurs."""
    within_allowable: bool | None = None
    """Every setting within the allowable deviation (None when none was given)."""
    reason: str | None = None
    """Why it cannot be tested."""

    def to_dict(self) -> dict[str, Any]:
        """JSON shape: ``{f, df1, df2, p, max_deviation, within_allowable}`` (+ testable, at, reason)."""
        return {"testable": self.testable, "f": self.f, "df1": self.df1, "df2": self.df2, "p": self.p,
                "max_deviation": self.max_deviation, "max_deviation_at": self.max_deviation_at,
                "within_allowable": self.within_allowable, "reason": self.reason}


@dataclass(frozen=True, slots=True)
class Confirmation:
    """The outcome of ``bendwise confirm``."""

    source: str
    """The new run's file."""
    node: str
    """The exported node's id and label."""
    n: int
    """Rows of the new run used."""
    levels: int
    """Settings of x in the new run."""
    alpha: float
    """Level of both tests."""
    allowable_deviation: float | None
    """Allowable departure of a setting from the curve, in y units (None: not judged)."""
    form: FormTest
    """Lack of fit of the frozen form, refitted."""
    transfer: TransferTest
    """The new data against the exported curve."""
    verdict: str
    """One of VERDICTS (``untestable`` followed by its reason in ``reason``)."""
    reason: str
    """The verdict in words."""
    dropped: tuple[str, ...] = ()
    """Cleaning lines of the new run."""

    @property
    def confirmed(self) -> bool:
        """True only for ``confirmed``."""
        return self.verdict == "confirmed"

    def to_dict(self) -> dict[str, Any]:
        """The JSON object of ``confirm --json``."""
        return {"source": self.source, "node": self.node, "n": self.n, "levels": self.levels, "alpha": self.alpha,
                "allowable_deviation": self.allowable_deviation, "form": self.form.to_dict(),
                "transfer": self.transfer.to_dict(), "verdict": self.verdict, "reason": self.reason,
                "dropped": list(self.dropped), "caution": CAUTION}

    def summary(self) -> list[str]:
        """Plain-text lines for the command line."""
        out = [f"bendwise confirm · {self.node} · new run {self.source}: {self.n} rows at {self.levels} settings",
               "", f"Verdict: {self.verdict.upper()} — {self.reason}", ""]
        f = self.form
        if f.testable:
            out.append(f"  form (refitted, lack of fit)   F = {fmt_num(f.f, 4)} on {f.df_lack} and {f.df_pure} df, "
                       f"{p_clause(f.p)}   [{f.reason}]")
        else:
            out.append(f"  form (refitted, lack of fit)   not testable — {f.reason}")
        t = self.transfer
        if t.testable:
            out.append(f"  transfer (exported curve)      F = {fmt_num(t.f, 4)} on {t.df1} and {t.df2} df, {p_clause(t.p)}")
        else:
            out.append(f"  transfer (exported curve)      not testable — {t.reason}")
        if t.max_deviation is not None:
            judge = ""
            if self.allowable_deviation is not None:
                judge = (f"; allowable {self.allowable_deviation:g}: "
                         f"{'every setting within' if t.within_allowable else 'beyond it'}")
            out.append(f"  largest departure from the curve: {fmt_num(t.max_deviation, 4)} (at {t.max_deviation_at}){judge}")
        if self.dropped:
            out.append(f"  rows dropped: {'; '.join(self.dropped)}")
        out += ["", "No search ran on these data: these p-values are not optimistic.", CAUTION]
        return out


def model_spec_from_doc(doc: dict[str, Any], model: HandedModel) -> ModelSpec:
    """The frozen form of an exported node: transforms, degree, covariates, interactions, weights."""
    m = doc.get("model") or {}
    try:
        degree = int(m.get("degree", max((t.power for t in model.terms if t.kind == "tpow"), default=1)))
    except (TypeError, ValueError):
        raise SpecError("model.degree must be a whole number") from None
    if not 1 <= degree <= 10:
        raise SpecError(f"model.degree {degree} must lie between 1 and 10")
    inter = m.get("interactions") or []
    if not isinstance(inter, list) or not all(isinstance(v, str) for v in inter):
        raise SpecError("model.interactions must be a list of covariate names")
    names = tuple(c.name for c in model.covariates)
    if any(v not in names for v in inter):
        raise SpecError("model.interactions names a covariate that model.covariates does not declare")
    weights = None
    if model.weight_theta is not None:
        weights = WeightRule("power-of-mean", float(model.weight_theta), True)
    resp = model.response
    resp = resp.canonical()
    return ModelSpec(response=resp, predictor=_predictor(model.predictor), degree=degree,
                     covariates=tuple(sorted(names)), interactions=tuple(sorted(inter)), weights=weights)


def _predictor(t: Transform) -> Transform:
    return t.canonical()


def confirm(doc: dict[str, Any], model: HandedModel, frame: pd.DataFrame | None = None, *, alpha: float = 0.05,
            allowable_deviation: float | None = None, source: str = "", study: Study | None = None) -> Confirmation:
    """Test an exported model on a new run (module text).

    The new run is ``frame`` (read in memory), or ``study``: one already built over the run by any
    engine (:func:`study_columns` names the columns it needs). A study whose rows stay in the
    files (DuckDB, Spark) is tested from its group totals, see :func:`_transfer_groups`."""
    if not 0 < alpha < 1:
        raise UsageError(f"alpha {alpha!r} must lie strictly between 0 and 1, e.g. 0.05")
    if allowable_deviation is not None and not allowable_deviation > 0:
        raise UsageError(f"allowable deviation {allowable_deviation!r} must be > 0 (in y units)")
    from ..stats.rows import NoRows
    from ..tree.scoring import score_spec

    spec = model_spec_from_doc(doc, model)
    if study is None:
        if frame is None:
            raise UsageError("confirm needs the new run: a table or a study built over it")
        from ..stats.study import make_study

        study = make_study(frame, source=source, **study_columns(model))
    grouped = isinstance(study.rows(), NoRows)
    if grouped:
        _need_group_route(model)
    _check_categories(study, model)
    score = score_spec(study, spec)
    form = _form(score.lack_of_fit)
    transfer = (_transfer_groups if grouped else _transfer)(study, model, allowable_deviation)
    verdict, reason = _verdict(form, transfer, alpha, allowable_deviation)
    node = doc.get("node") or {}
    label = f"{node.get('id', '?')} {node.get('label', '')}".strip()
    return Confirmation(study.source, label, study.n, study.c, alpha, allowable_deviation, form, transfer,
                        verdict, reason, tuple(study.report.lines()))


def study_columns(model: HandedModel) -> dict[str, Any]:
    """The columns a study of the new run needs: y, x, covariates and weights as the model names them
    (keyword arguments of ``make_study`` and of the SQL engines' study builders)."""
    return {"y": model.response_name, "x": model.predictor_name, "covariates": [c.name for c in model.covariates],
            "weights": model.user_weights}


def group_route_problem(model: HandedModel) -> str | None:
    """Why a run read through DuckDB or Spark cannot test ``model`` (None: it can). Such a run is
    tested from per-setting totals; that is exact while the curve and its weight are one value per
    setting (x and categories), not when a numeric covariate or a weights column varies row by row."""
    nums = [c.name for c in model.covariates if c.kind == "numeric"]
    if nums:
        return (f"the model uses the numeric covariate {nums[0]!r}, which moves the curve within a setting: "
                "testing it against the curve needs every row; use --engine memory")
    if model.user_weights is not None:
        return (f"the model was fitted with the weights column {model.user_weights!r}, which weighs each row: "
                "testing it needs every row; use --engine memory")
    return None


def _need_group_route(model: HandedModel) -> None:
    problem = group_route_problem(model)
    if problem:
        raise UsageError(problem)


def _check_categories(study, model: HandedModel) -> None:
    """A categorical covariate of the model must keep its categories (new ones have no coefficient)."""
    for cov in model.covariates:
        if cov.kind != "categorical":
            continue
        seen = set(study.covariate(cov.name).levels)
        new = sorted(seen - set(cov.levels))
        if new:
            raise UsageError(f"covariate {cov.name!r} has category {new[0]!r} in the new run, which the model never "
                             f"saw ({', '.join(cov.levels)}); a run with new categories needs a model without "
                             f"{cov.name!r} (or its run handling)")


def _form(lof: LackOfFit) -> FormTest:
    if not lof.testable:
        return FormTest(False, reason=lof.reason)
    return FormTest(True, lof.f, lof.df_lack, lof.df_pure, lof.p, reason=lof.kind)


def _transfer(study, model: HandedModel, allowable: float | None) -> TransferTest:
    """The transfer test from the rows of an in-memory study."""
    from ..tree.scoring import predict_terms
    from .predict import predict_forward, term_matrix, weight_at

    covs: dict[str, np.ndarray] = {}
    for cov in model.covariates:
        c = study.covariate(cov.name)
        covs[cov.name] = (np.asarray(c.levels, dtype=object)[c.values].astype(str) if c.kind == "categorical"
                          else np.asarray(c.values, dtype=float))
    x, y = study.x, study.y
    problem = study.domain_problem(model.predictor, "x") or study.domain_problem(model.response, "y")
    if problem:
        return TransferTest(False, reason=problem)
    with np.errstate(all="ignore"):
        t = np.asarray(model.predictor.forward(x), dtype=float)
        zhat = predict_terms(model.terms, model.beta, t, covs)
        z = np.asarray(model.response.forward(y), dtype=float)
        w = weight_at(model, zhat, study.weights)
        d = np.sqrt(w) * (z - zhat)
    if not np.isfinite(d).all():
        return TransferTest(False, reason="the exported curve or its weights are undefined at some new rows")
    cats = tuple(c.name for c in model.covariates if c.kind == "categorical")
    codes, c = study.group_codes(cats)
    cnt = np.bincount(codes, minlength=c).astype(float)
    mean = np.bincount(codes, weights=d, minlength=c) / cnt
    ss_pure = float(np.bincount(codes, weights=(d - mean[codes]) ** 2, minlength=c).sum())
    # the largest departure in y units, against the curve as apply gives it (smearing mean)
    pred = predict_forward(model, x, covs, user_w=study.weights)
    with np.errstate(all="ignore"):
        gap = np.bincount(codes, weights=y - np.nan_to_num(pred.fit, nan=np.inf), minlength=c) / cnt
    # the curve's own uncertainty at each setting: mean design row of the setting, times √w
    xr = term_matrix(model.terms, t, covs) * np.sqrt(w)[:, None]
    xbar = np.column_stack([np.bincount(codes, weights=xr[:, k], minlength=c) / cnt for k in range(xr.shape[1])])
    return _judge(model, _Departures(mean, ss_pure, cnt, gap, xbar, _setting_labels(study, cats)), study.n,
                  allowable)


@dataclass(frozen=True, slots=True)
class _Departures:
    """Per setting of the new run: what the transfer test judges."""

    mean: np.ndarray
    """Mean departure √w·(g(y) − ĝ)."""
    ss_pure: float
    """Sum over settings of the squared departures about their setting's mean."""
    count: np.ndarray
    """Rows per setting."""
    gap: np.ndarray
    """Mean y − the curve (smearing mean), in y units."""
    xbar: np.ndarray
    """Mean design row times √w (C × p)."""
    labels: list[str]
    """The settings in words."""


def _judge(model: HandedModel, dep: _Departures, n: int, allowable: float | None) -> TransferTest:
    """The Wald F of the settings' mean departures, the largest gap and the allowable deviation."""
    from ..stats.dist import f_sf

    c, gap, labels = dep.count.size, dep.gap, dep.labels
    where = int(np.argmax(np.where(np.isfinite(gap), np.abs(gap), -1.0)))
    max_dev = float(abs(gap[where])) if np.isfinite(gap).any() else None
    within = None if allowable is None or max_dev is None else bool(np.all(np.abs(gap) <= allowable))
    if n - c <= 0 or not dep.ss_pure > 0:
        why = ("no setting was measured more than once in the new run: the pure error that judges the "
               "departures needs replicates" if n - c <= 0 else "the new run's replicates agree exactly (pure error 0)")
        return TransferTest(False, max_deviation=max_dev, max_deviation_at=labels[where], within_allowable=within,
                            reason=why)
    s2 = dep.ss_pure / (n - c)
    cov = np.diag(s2 / dep.count) + dep.xbar @ model.cov @ dep.xbar.T
    try:
        sol = np.linalg.solve(cov, dep.mean)
    except np.linalg.LinAlgError:
        return TransferTest(False, max_deviation=max_dev, max_deviation_at=labels[where], within_allowable=within,
                            reason="the departures' covariance is singular")
    f = float(dep.mean @ sol) / c
    return TransferTest(True, f, c, n - c, f_sf(f, c, n - c), max_dev, labels[where], within)


def _transfer_groups(study: Study, model: HandedModel, allowable: float | None) -> TransferTest:
    """:func:`_transfer` from per-setting totals (a study whose rows stay in the files).

    Within a setting (x value × the model's categories) the curve ĝ, its weight w and its
    smearing mean are single numbers, so the mean departure is √w·(mean g(y) − ĝ), its pure
    sum of squares w·Σ(g(y) − mean g(y))², and the mean gap in y units mean y − curve: the
    group means and sums of squares of g(y) and y that the engine's scans give."""
    from ..tree.scoring import predict_terms
    from .predict import predict_forward, term_matrix, weight_at

    problem = study.domain_problem(model.predictor, "x") or study.domain_problem(model.response, "y")
    if problem:
        return TransferTest(False, reason=problem)
    cats = tuple(c.name for c in model.covariates if c.kind == "categorical")
    x, covs, labels = _setting_points(study, cats)
    zst = study.group_stats(None, ("z", model.response.canonical().key()), by=cats)
    yst = study.group_stats(None, ("z", Transform("identity").key()), by=cats)
    with np.errstate(all="ignore"):
        t = np.asarray(model.predictor.forward(x), dtype=float)
        zhat = predict_terms(model.terms, model.beta, t, covs)
        w = weight_at(model, zhat, None)
        mean = np.sqrt(w) * (_group_mean(zst) - zhat)
        ss_pure = float((w * np.asarray(zst.ss, dtype=float)).sum())
    if not (np.isfinite(mean).all() and np.isfinite(ss_pure)):
        return TransferTest(False, reason="the exported curve or its weights are undefined at some new rows")
    pred = predict_forward(model, x, covs)
    with np.errstate(all="ignore"):
        gap = _group_mean(yst) - np.nan_to_num(pred.fit, nan=np.inf)
    xbar = term_matrix(model.terms, t, covs) * np.sqrt(w)[:, None]
    dep = _Departures(mean, ss_pure, np.asarray(zst.count, dtype=float), gap, xbar, labels)
    return _judge(model, dep, study.n, allowable)


def _group_mean(st) -> np.ndarray:
    """A group mean to the precision the scans keep (``mean_lo`` holds what rounding took off)."""
    mean = np.asarray(st.mean, dtype=float)
    return mean if st.mean_lo is None else mean + np.asarray(st.mean_lo, dtype=float)


def _setting_points(study: Study, cats: tuple[str, ...]) -> tuple[np.ndarray, dict[str, np.ndarray], list[str]]:
    """Per setting of a grouped study (in the order of ``group_codes``): its x, its category labels
    and its label text. Units are the study's finest groups (x value × categories)."""
    codes, c = study.group_codes(cats)
    first = np.unique(codes, return_index=True)[1][:c]  # the first unit of every setting
    x = np.asarray(study.x_level_values, dtype=float)[study.x_codes[first]]
    covs: dict[str, np.ndarray] = {}
    for name in cats:
        cov = study.covariate(name)
        covs[name] = np.asarray(cov.levels, dtype=object)[cov.values[first]].astype(str)
    labels = [", ".join([f"{study.x_name} = {x[g]:g}", *(f"{name} = {covs[name][g]}" for name in cats)])
              for g in range(c)]
    return x, covs, labels


def _setting_labels(study, cats: tuple[str, ...]) -> list[str]:
    codes, c = study.group_codes(cats)
    out = [""] * c
    xs = study.x
    for g in range(c):
        i = int(np.flatnonzero(codes == g)[0])
        parts = [f"{study.x_name} = {xs[i]:g}"]
        for name in cats:
            cov = study.covariate(name)
            parts.append(f"{name} = {cov.levels[cov.values[i]]}")
        out[g] = ", ".join(parts)
    return out


def _verdict(form: FormTest, transfer: TransferTest, alpha: float, allowable: float | None) -> tuple[str, str]:
    if not form.testable:
        return "untestable", f"the form cannot be tested on this run: {form.reason}"
    if form.p is not None and form.p < alpha:
        return "form rejected", (f"the frozen form does not fit the new run (lack of fit {p_clause(form.p)} < α = "
                                 f"{alpha:g}): search again on more data, or look for what changed")
    if not transfer.testable:
        return "untestable", f"the form holds ({p_clause(form.p)}), but the curve cannot be tested: {transfer.reason}"
    moved = transfer.p is not None and transfer.p < alpha
    beyond = transfer.within_allowable is False
    if moved or beyond:
        why = []
        if moved:
            why.append(f"the settings depart from the exported curve ({p_clause(transfer.p)} < α = {alpha:g})")
        if beyond:
            why.append(f"a setting lies {transfer.max_deviation:.4g} from it, beyond the allowable {allowable:g}")
        return "form holds, curve moved", (f"the form fits ({p_clause(form.p)}), but " + " and ".join(why)
                                           + ": refit the coefficients on this run before using them")
    return "confirmed", (f"the form fits the new run ({p_clause(form.p)}) and the new settings follow the exported "
                         f"curve ({p_clause(transfer.p)})"
                         + (f", every one within {allowable:g}" if allowable is not None else ""))
