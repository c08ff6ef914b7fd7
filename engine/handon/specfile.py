"""Read a handed-on model spec back, treating it as data, never as code.

A spec written by someone else is checked field by field in plain Python (the JSON Schema in
``engine/handon/schema/spec-v1.json`` describes the same shape for other tools; bendwise does not need
the jsonschema package at run time). The model is rebuilt only from structured fields — the
transforms, the raw-basis terms and their coefficients — and the formula text a spec carries is
never evaluated.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import SpecError
from ..stats.transforms import PARAMETRIC_KINDS, Transform
from ..tree.scoring import Term

__all__ = [
    "SCHEMA_VERSION",
    "SCHEMA_MAJOR",
    "HandedCovariate",
    "HandedModel",
    "validate_spec",
    "model_from_spec",
    "load_spec",
    "schema_path",
]

SCHEMA_VERSION = "1.0"
"""Version written by this bendwise; readers accept any 1.x (extra fields are ignored)."""
SCHEMA_MAJOR = 1

RESPONSE_KINDS = ("identity", "log", "sqrt", "reciprocal", "boxcox")
PREDICTOR_KINDS = ("identity", "log", "sqrt", "reciprocal", "power")
TERM_KINDS = ("const", "tpow", "cat", "num", "tcat", "tnum")
MAX_POWER = 10
MAX_NAME = 1000


def schema_path() -> Path:
    """Path of the JSON Schema shipped with the engine."""
    return Path(__file__).resolve().parent / "schema" / "spec-v1.json"


@dataclass(frozen=True, slots=True)
class HandedCovariate:
    """A covariate of a handed-on model."""

    name: str
    """Column name in the data."""
    kind: str
    """'numeric' or 'categorical'."""
    levels: tuple[str, ...] = ()
    """Categories in code order (the first is the reference); empty for numeric."""


@dataclass(frozen=True, slots=True, eq=False)
class HandedModel:
    """Everything ``apply`` needs, rebuilt from the structured fields of a spec."""

    schema_version: str
    """Version string of the spec read."""
    response_name: str
    """Response column."""
    predictor_name: str
    """Predictor column."""
    response: Transform
    """Transform g of the response (the model is for z = g(y))."""
    predictor: Transform
    """Transform h of the predictor (terms are powers of t = h(x))."""
    terms: tuple[Term, ...]
    """Raw-basis terms in coefficient order."""
    beta: np.ndarray
    """Raw-basis coefficients."""
    cov: np.ndarray
    """Covariance of the coefficients."""
    sigma: float
    """Residual SD on the fitted scale (per unit weight)."""
    df_resid: int
    """Residual degrees of freedom."""
    n: int
    """Rows the model was fitted to."""
    covariates: tuple[HandedCovariate, ...]
    """Covariates the terms use."""
    weight_theta: float | None
    """θ of the power-of-mean weights (None: no estimated weights)."""
    weight_normaliser: float
    """Geometric mean of the level weights |m|^(−2θ) at fitting time (weights were divided by it)."""
    user_weights: str | None
    """Column of user weights at fitting time (None: none)."""
    x_min: float
    """Smallest calibrated x."""
    x_max: float
    """Largest calibrated x."""
    y_sign: int
    """+1 when the calibration responses were positive (or mixed), −1 when all negative."""
    residuals: np.ndarray
    """Smearing sample: √w·(z − ẑ) on the fitted scale."""

    @property
    def is_line(self) -> bool:
        """True for y = b0 + b1·x with no transform, no covariate and no estimated weights."""
        kinds = sorted((t.kind, t.power) for t in self.terms)
        return (
            self.response.is_identity
            and self.predictor.is_identity
            and kinds == [("const", 0), ("tpow", 1)]
            and self.weight_theta is None
        )

    def covariate(self, name: str) -> HandedCovariate:
        """The covariate called ``name``."""
        for c in self.covariates:
            if c.name == name:
                return c
        raise SpecError(f"the spec uses covariate {name!r} in a term but does not declare it")


# ----- structural checks ----------------------------------------------------------------

def _fail(where: str, problem: str) -> SpecError:
    return SpecError(f"spec field {where} {problem}; export the model again with bendwise export")


def _obj(doc: Any, key: str, where: str) -> dict:
    if not isinstance(doc, dict) or key not in doc:
        raise _fail(f"{where}.{key}".lstrip("."), "is missing")
    v = doc[key]
    if not isinstance(v, dict):
        raise _fail(f"{where}.{key}".lstrip("."), f"must be an object, not {type(v).__name__}")
    return v


def _num(v: Any, where: str, *, positive: bool = False, allow_none: bool = False) -> float | None:
    if v is None and allow_none:
        return None
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        raise _fail(where, f"must be a number, not {type(v).__name__} {_show(v)}")
    f = float(v)
    if not math.isfinite(f):
        raise _fail(where, "must be a finite number")
    if positive and not f > 0:
        raise _fail(where, f"must be > 0 (got {f:g})")
    return f


def _int(v: Any, where: str, lo: int = 0, hi: int | None = None) -> int:
    if isinstance(v, float) and v.is_integer():
        v = int(v)  # JSON does not tell 16 from 16.0
    if isinstance(v, bool) or not isinstance(v, int):
        raise _fail(where, f"must be a whole number, not {type(v).__name__} {_show(v)}")
    if v < lo or (hi is not None and v > hi):
        raise _fail(where, f"is {v}, outside {lo}…{hi if hi is not None else '∞'}")
    return v


def _str(v: Any, where: str, *, allow_none: bool = False, choices: tuple[str, ...] | None = None) -> str | None:
    if v is None and allow_none:
        return None
    if not isinstance(v, str) or not v or len(v) > MAX_NAME:
        raise _fail(where, f"must be a non-empty text of at most {MAX_NAME} characters, not {_show(v)}")
    if choices is not None and v not in choices:
        raise _fail(where, f"is {v!r}; expected one of {', '.join(choices)}")
    return v


def _bool(v: Any, where: str) -> bool:
    if not isinstance(v, bool):
        raise _fail(where, f"must be true or false, not {_show(v)}")
    return v


def _list(v: Any, where: str, min_len: int = 0) -> list:
    if not isinstance(v, list):
        raise _fail(where, f"must be a list, not {type(v).__name__}")
    if len(v) < min_len:
        raise _fail(where, f"must hold at least {min_len} item(s)")
    return v


def _show(v: Any) -> str:
    text = repr(v)
    return text if len(text) <= 40 else text[:37] + "…"


def _check_version(doc: Any) -> str:
    if not isinstance(doc, dict):
        raise SpecError("the spec must be a JSON object; export the model again with bendwise export")
    v = doc.get("schema_version")
    if not isinstance(v, str):
        raise SpecError("the spec has no schema_version text; is it a bendwise model spec? Export it with "
                        "bendwise export")
    parts = v.split(".")
    if len(parts) != 2 or not all(p.isdigit() for p in parts):
        raise SpecError(f"schema_version {_show(v)} is not of the form MAJOR.MINOR; export the model again")
    major = int(parts[0])
    if major != SCHEMA_MAJOR:
        newer = "newer" if major > SCHEMA_MAJOR else "older"
        raise SpecError(f"schema_version {v} is from a {newer} major version; this bendwise reads "
                        f"{SCHEMA_MAJOR}.x — use a matching bendwise or export the model again")
    return v


def _transform(block: dict, where: str, kinds: tuple[str, ...]) -> Transform:
    tr = _obj(block, "transform", where)
    kind = _str(tr.get("kind"), f"{where}.transform.kind", choices=kinds)
    param = tr.get("param")
    p = _num(param, f"{where}.transform.param") if kind in PARAMETRIC_KINDS else param
    try:
        return Transform.from_parts(str(kind), p)
    except ValueError as exc:
        raise _fail(f"{where}.transform.param", str(exc)) from None


PSD_TOL = 1e-8
"""Smallest eigenvalue allowed for the correlation form of a covariance: rounding makes a valid
one dip at most about 1e-15 below 0; anything below −1e-8 is not a covariance."""


def _check_psd(cov: np.ndarray) -> None:
    """A coefficient covariance must be positive semi-definite: its correlation form (so that
    coefficients on very different scales weigh alike) has no eigenvalue below −PSD_TOL, and a
    coefficient with variance 0 covaries with nothing."""
    sd = np.sqrt(np.diag(cov))
    zero = sd == 0
    if zero.any() and (cov[zero, :] != 0).any():
        raise _fail("fit.covariance", "gives a coefficient variance 0 but a non-zero covariance, so it is not a "
                    "covariance matrix (not positive semi-definite)")
    keep = ~zero
    if keep.sum() < 1:
        return
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        corr = cov[np.ix_(keep, keep)] / np.outer(sd[keep], sd[keep])
    if not np.isfinite(corr).all():
        raise _fail("fit.covariance", "holds values too large to use")
    low = float(np.linalg.eigvalsh((corr + corr.T) / 2.0).min())
    if low < -PSD_TOL:
        raise _fail("fit.covariance", f"is not positive semi-definite (its correlation form has the eigenvalue "
                    f"{low:.3g}), so it is not a covariance matrix")


def validate_spec(doc: Any) -> HandedModel:
    """Check a parsed spec structurally and rebuild its model; raise :class:`SpecError` if unusable.

    Only the fields prediction needs are checked strictly; unknown extra fields are ignored so
    newer minor versions stay readable.
    """
    version = _check_version(doc)
    model = _obj(doc, "model", "")
    resp = _obj(model, "response", "model")
    pred = _obj(model, "predictor", "model")
    y_name = _str(resp.get("column"), "model.response.column")
    x_name = _str(pred.get("column"), "model.predictor.column")
    response = _transform(resp, "model.response", RESPONSE_KINDS)
    predictor = _transform(pred, "model.predictor", PREDICTOR_KINDS)
    covs = _covariates(model, y_name, x_name)  # type: ignore[arg-type]
    terms = _terms(model, {c.name: c for c in covs})
    theta, normaliser, user_w = _weights(model)
    fit = _obj(doc, "fit", "")
    beta, cov_m = _coefficients(fit, len(terms))
    sigma = _num(fit.get("sigma"), "fit.sigma", positive=True)
    assert sigma is not None
    if not math.isfinite(sigma * sigma):
        raise _fail("fit.sigma", f"is {sigma:g}: its square overflows, so it cannot be a residual SD")
    df = _int(fit.get("df_resid"), "fit.df_resid", 1)
    n = _int(fit.get("n"), "fit.n", 2)
    x_min, x_max, y_max = _calibration(doc)
    return HandedModel(
        schema_version=version,
        response_name=y_name,  # type: ignore[arg-type]
        predictor_name=x_name,  # type: ignore[arg-type]
        response=response,
        predictor=predictor,
        terms=tuple(terms),
        beta=beta,
        cov=cov_m,
        sigma=float(sigma),  # type: ignore[arg-type]
        df_resid=df,
        n=n,
        covariates=tuple(covs),
        weight_theta=theta,
        weight_normaliser=float(normaliser),
        user_weights=user_w,
        x_min=x_min,
        x_max=x_max,
        y_sign=-1 if y_max < 0 else 1,
        residuals=_training_residuals(doc),
    )


def _covariates(model: dict, y_name: str, x_name: str) -> list[HandedCovariate]:
    """model.covariates: names used once, a kind, and (categorical) at least 2 distinct categories."""
    covs: list[HandedCovariate] = []
    for i, c in enumerate(_list(model.get("covariates"), "model.covariates")):
        w = f"model.covariates[{i}]"
        if not isinstance(c, dict):
            raise _fail(w, "must be an object")
        name = _str(c.get("name"), f"{w}.name")
        kind = _str(c.get("kind"), f"{w}.kind", choices=("numeric", "categorical"))
        levels: tuple[str, ...] = ()
        if kind == "categorical":
            raw = _list(c.get("levels"), f"{w}.levels", min_len=2)
            levels = tuple(_str(v, f"{w}.levels[{j}]") for j, v in enumerate(raw))  # type: ignore[misc]
            if len(set(levels)) != len(levels):
                raise _fail(f"{w}.levels", "repeats a category")
        if name in (y_name, x_name) or any(o.name == name for o in covs):
            raise _fail(f"{w}.name", f"{name!r} is used twice")
        covs.append(HandedCovariate(name, kind, levels))  # type: ignore[arg-type]
    return covs


def _terms(model: dict, known: dict[str, HandedCovariate]) -> list[Term]:
    """model.terms: each term's kind, power, covariate and level agree with the covariates; no repeats."""
    terms: list[Term] = []
    for i, t in enumerate(_list(model.get("terms"), "model.terms", min_len=1)):
        w = f"model.terms[{i}]"
        if not isinstance(t, dict):
            raise _fail(w, "must be an object")
        kind = _str(t.get("kind"), f"{w}.kind", choices=TERM_KINDS)
        power = _int(t.get("power", 0), f"{w}.power", 0, MAX_POWER)
        cov = _str(t.get("covariate"), f"{w}.covariate", allow_none=True)
        level = _str(t.get("level"), f"{w}.level", allow_none=True)
        if kind == "const" and (power or cov or level):
            raise _fail(w, "is a constant and takes no power, covariate or level")
        if kind == "tpow" and (power < 1 or cov or level):
            raise _fail(w, "is a power of x: power ≥ 1 and no covariate")
        if kind in ("cat", "num", "tcat", "tnum"):
            if cov not in known:
                raise _fail(f"{w}.covariate", f"{_show(cov)} is not among model.covariates")
            want = "categorical" if kind in ("cat", "tcat") else "numeric"
            if known[cov].kind != want:
                raise _fail(f"{w}.covariate", f"{cov!r} is {known[cov].kind}, but a {kind} term needs {want}")
            if want == "categorical" and (level not in known[cov].levels[1:]):
                raise _fail(f"{w}.level", f"{_show(level)} is not a non-reference category of {cov!r}")
            if want == "numeric" and level is not None:
                raise _fail(f"{w}.level", "must be null for a numeric covariate")
        terms.append(Term(kind, power, cov, level))  # type: ignore[arg-type]
    if len(set(terms)) != len(terms):
        raise _fail("model.terms", "repeats a term")

    return terms


def _weights(model: dict) -> tuple[float | None, float, str | None]:
    """model.weights: (θ of the power-of-mean rule or None, its normaliser, the user's weights column)."""
    wt = _obj(model, "weights", "model")
    rule = _str(wt.get("rule"), "model.weights.rule", choices=("none", "power-of-mean"))
    theta = None
    normaliser = 1.0
    if rule == "power-of-mean":
        theta = _num(wt.get("theta"), "model.weights.theta")
        normaliser = _num(wt.get("normaliser"), "model.weights.normaliser", positive=True)  # type: ignore[assignment]
    user_w = _str(wt.get("user_column"), "model.weights.user_column", allow_none=True)

    return theta, normaliser, user_w  # type: ignore[return-value]


def _coefficients(fit: dict, p: int) -> tuple[np.ndarray, np.ndarray]:
    """fit.coefficients (one per term) and fit.covariance (p×p, symmetric, positive semi-definite)."""
    coefs = _list(fit.get("coefficients"), "fit.coefficients", min_len=1)
    if len(coefs) != p:
        raise _fail("fit.coefficients", f"holds {len(coefs)} coefficient(s) for {p} term(s)")
    beta = np.empty(p)
    for i, c in enumerate(coefs):
        if not isinstance(c, dict):
            raise _fail(f"fit.coefficients[{i}]", "must be an object")
        beta[i] = _num(c.get("estimate"), f"fit.coefficients[{i}].estimate")  # type: ignore[assignment]
    rows = _list(fit.get("covariance"), "fit.covariance")
    if len(rows) != p:
        raise _fail("fit.covariance", f"must be {p}×{p}")
    cov_m = np.empty((p, p))
    for i, r in enumerate(rows):
        r = _list(r, f"fit.covariance[{i}]")
        if len(r) != p:
            raise _fail(f"fit.covariance[{i}]", f"must hold {p} numbers")
        for j, v in enumerate(r):
            cov_m[i, j] = _num(v, f"fit.covariance[{i}][{j}]")  # type: ignore[assignment]
    diag = np.diag(cov_m)
    with np.errstate(over="ignore", invalid="ignore"):
        asym = np.abs(cov_m - cov_m.T) > 1e-8 * np.sqrt(np.outer(diag, diag))
    if (diag < 0).any() or asym.any():
        raise _fail("fit.covariance", "is not a symmetric matrix with a non-negative diagonal")
    _check_psd(cov_m)
    return beta, cov_m


def _calibration(doc: Any) -> tuple[float, float, float]:
    """calibration: (x_min, x_max, y_max), with x_min below x_max."""
    cal = _obj(doc, "calibration", "")
    x_min = _num(cal.get("x_min"), "calibration.x_min")
    x_max = _num(cal.get("x_max"), "calibration.x_max")
    y_min = _num(cal.get("y_min"), "calibration.y_min")
    y_max = _num(cal.get("y_max"), "calibration.y_max")
    assert x_min is not None and x_max is not None and y_min is not None and y_max is not None
    if not x_min < x_max:
        raise _fail("calibration.x_min", f"({x_min:g}) must be below calibration.x_max ({x_max:g})")

    return x_min, x_max, y_max


def _training_residuals(doc: Any) -> np.ndarray:
    """training.residuals: at least 2 finite numbers (for the smearing mean)."""
    tr = _obj(doc, "training", "")
    res_raw = _list(tr.get("residuals"), "training.residuals", min_len=2)
    try:
        residuals = np.array(res_raw, dtype=float)
    except (TypeError, ValueError):
        raise _fail("training.residuals", "must be a list of numbers") from None
    if residuals.ndim != 1 or any(isinstance(v, bool) or not isinstance(v, (int, float)) for v in res_raw) \
            or not np.isfinite(residuals).all():
        raise _fail("training.residuals", "must be a list of finite numbers")

    return residuals


def model_from_spec(doc: Any) -> HandedModel:
    """Alias of :func:`validate_spec` for readers who already hold the parsed JSON."""
    return validate_spec(doc)


def load_spec(path: str | Path) -> tuple[dict, HandedModel]:
    """Read, parse and check a spec file; returns (document, model)."""
    p = Path(path)
    if not p.exists():
        raise SpecError(f"spec file not found: {p}; give the spec.json written by bendwise export")
    if p.is_dir():
        cand = p / "spec.json"
        if not cand.is_file():
            raise SpecError(f"{p} is a folder without spec.json; give the spec file written by bendwise export")
        p = cand
    try:
        text = p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise SpecError(f"cannot read spec {p}: {type(exc).__name__}; check the file") from None
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise SpecError(f"spec {p} is not valid JSON (line {exc.lineno}, column {exc.colno}: {exc.msg}); "
                        "export the model again") from None
    except RecursionError:
        raise SpecError(f"spec {p} is nested too deeply to be a bendwise spec; export the model again") from None
    return doc, validate_spec(doc)
