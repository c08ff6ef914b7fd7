"""Transforms of the response and of the predictor, with their domains and Jacobians.

The log-likelihood of the original y after fitting z = g(y) is ℓ_y = ℓ_z + Σ log|g′(y)|
(docs/METHODS.md; Box & Cox 1964), so each transform knows ``log_abs_derivative``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["Transform", "IDENTITY", "LOG", "SQRT", "RECIPROCAL", "boxcox", "power", "canonical_response"]

# Round Box–Cox λ values inside the interval are preferred in this order of plainness.
PARAMETRIC_KINDS = ("boxcox", "power")
"""Kinds whose ``param`` carries a value."""

CONVENTIONAL_LAMBDAS = (1.0, 0.0, 0.5, -1.0, 2.0, -0.5, 1 / 3, -2.0)


@dataclass(frozen=True, slots=True)
class Transform:
    """A named monotone transform; ``param`` is λ (Box–Cox) or α (power)."""

    kind: str
    """'identity', 'log', 'sqrt', 'reciprocal', 'boxcox' or 'power'."""
    param: float | None = None
    """λ for Box–Cox, α for power; None otherwise."""

    # ---- values ----------------------------------------------------------------------
    def forward(self, v: np.ndarray) -> np.ndarray:
        """g(v)."""
        k = self.kind
        if k == "identity":
            return v
        if k == "log":
            return np.log(v)
        if k == "sqrt":
            return np.sqrt(v)
        if k == "reciprocal":
            return 1.0 / v
        if k == "boxcox":
            lam = float(self.param)  # type: ignore[arg-type]
            return np.log(v) if lam == 0 else np.expm1(lam * np.log(v)) / lam
        if k == "power":
            return np.power(v, float(self.param))  # type: ignore[arg-type]
        raise ValueError(k)

    def inverse(self, z: np.ndarray) -> np.ndarray:
        """g⁻¹(z); NaN where z is outside the transform's range."""
        k = self.kind
        z = np.asarray(z, dtype=float)
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            if k == "identity":
                return z
            if k == "log":
                return np.exp(z)
            if k == "sqrt":
                return np.where(z >= 0, z * z, np.nan)
            if k == "reciprocal":
                return np.where(z != 0, 1.0 / z, np.nan)
            if k == "boxcox":
                lam = float(self.param)  # type: ignore[arg-type]
                if lam == 0:
                    return np.exp(z)
                base = 1.0 + lam * z
                return np.where(base > 0, np.exp(np.log(np.where(base > 0, base, 1.0)) / lam), np.nan)
            if k == "power":
                a = float(self.param)  # type: ignore[arg-type]
                return np.where(z > 0, np.power(np.where(z > 0, z, 1.0), 1.0 / a), np.nan)
        raise ValueError(k)

    @property
    def of_log(self) -> bool:
        """True when g is a function of log v (log, Box–Cox): :meth:`from_log` applies."""
        return self.kind in ("log", "boxcox")

    def from_log(self, log_v: np.ndarray) -> tuple[np.ndarray, float] | None:
        """(g(v), Σ log|g′(v)|) from log v, for the kinds that are functions of log v (log, Box–Cox),
        with the same operations as :meth:`forward` and :meth:`log_abs_derivative`; None for others."""
        if self.kind == "log":
            return log_v, float(np.sum(-log_v))
        if self.kind == "boxcox":
            lam = float(self.param)  # type: ignore[arg-type]
            z = log_v if lam == 0 else np.expm1(lam * log_v) / lam
            return z, float(np.sum((lam - 1.0) * log_v))
        return None

    def monotone_over(self, lo: float, hi: float) -> bool:
        """True when g is monotone (and defined) on [lo, hi]: then it keeps or reverses the order
        of values, so medians map through it."""
        k = self.kind
        if k == "identity":
            return True
        if k == "reciprocal":
            return lo > 0 or hi < 0
        return lo > 0  # log, √, Box–Cox and powers: defined and monotone for positive values

    def log_abs_derivative(self, v: np.ndarray) -> np.ndarray:
        """log|g′(v)| per value (the Jacobian term of the likelihood)."""
        k = self.kind
        if k == "identity":
            return np.zeros_like(v, dtype=float)
        if k == "log":
            return -np.log(v)
        if k == "sqrt":
            return -np.log(2.0 * np.sqrt(v))
        if k == "reciprocal":
            return -2.0 * np.log(np.abs(v))
        if k == "boxcox":
            return (float(self.param) - 1.0) * np.log(v)  # type: ignore[arg-type]
        if k == "power":
            a = float(self.param)  # type: ignore[arg-type]
            return math.log(abs(a)) + (a - 1.0) * np.log(v)
        raise ValueError(k)

    def domain_problem(self, v: np.ndarray, column: str, role: str) -> str | None:
        """None when every value is in the domain; else a sentence naming the rows."""
        k = self.kind
        if k == "identity":
            return None
        if k == "sqrt" and role == "x":
            bad = v < 0
            need = f"√{role} needs {role} ≥ 0"
        elif k in {"log", "boxcox", "sqrt"} or (k == "power" and not float(self.param).is_integer()):  # type: ignore[arg-type]
            bad = v <= 0
            need = f"{self.short(role)} needs {role} > 0"
        elif k == "reciprocal":
            bad = v == 0
            need = f"1/{role} needs {role} ≠ 0"
        else:
            return None
        if not bad.any():
            if k == "reciprocal" and (v > 0).any() and (v < 0).any():
                return f"1/{role} needs {role} of one sign; {column!r} has both positive and negative values"
            return None
        rows = np.flatnonzero(bad)
        shown = ", ".join(str(int(r) + 1) for r in rows[:5]) + (", …" if rows.size > 5 else "")
        what = "are 0" if k == "reciprocal" else ("are negative" if k == "sqrt" and role == "x" else f"have {role} ≤ 0")
        return f"{need}: {rows.size} row(s) of {column!r} {what} (rows {shown} of those used)"

    # ---- labels ----------------------------------------------------------------------
    def short(self, var: str) -> str:
        """Label of g(var): 'log y', '√x', '1/y', 'bc(y; λ=-0.75)', 'x^0.37'."""
        k = self.kind
        if k == "identity":
            return var
        if k == "log":
            return f"log {var}"
        if k == "sqrt":
            return f"√{var}"
        if k == "reciprocal":
            return f"1/{var}"
        if k == "boxcox":
            return f"bc({var}; λ={_num(self.param)})"
        if k == "power":
            return f"{var}^{_num(self.param)}"
        raise ValueError(k)

    def formula(self, col: str) -> str:
        """A statsmodels/patsy expression for g(col) on the original column."""
        k = self.kind
        if k == "identity":
            return col
        if k == "log":
            return f"np.log({col})"
        if k == "sqrt":
            return f"np.sqrt({col})"
        if k == "reciprocal":
            return f"I(1 / {col})"
        if k == "boxcox":
            lam = float(self.param)  # type: ignore[arg-type]
            return f"I(({col} ** {lam!r} - 1) / {lam!r})"
        if k == "power":
            return f"I({col} ** {float(self.param)!r})"  # type: ignore[arg-type]
        raise ValueError(k)

    # ---- what callers ask instead of comparing kinds -----------------------------------
    @property
    def is_identity(self) -> bool:
        """No transform."""
        return self.kind == "identity"

    @property
    def is_log(self) -> bool:
        """log, or Box–Cox at λ = 0 (the same function)."""
        return self.kind == "log" or (self.kind == "boxcox" and self.param == 0)

    @property
    def is_named(self) -> bool:
        """One of the fixed transforms (identity, log, √, 1/·), not a power read from the data."""
        return self.kind in ("identity", "log", "sqrt", "reciprocal")

    @property
    def decreasing(self) -> bool:
        """g decreases on its domain (1/v, v^α with α < 0)."""
        return self.kind == "reciprocal" or (self.kind == "power" and float(self.param) < 0)  # type: ignore[arg-type]

    @property
    def has_parameter(self) -> bool:
        """Box–Cox λ or power α (a value in ``param``)."""
        return self.kind in PARAMETRIC_KINDS

    def canonical(self) -> Transform:
        """The one representative of equal functions (``canonical_response`` for Box–Cox λ,
        ``power`` for x^α), so specs read back compare equal to the tree's."""
        if self.kind == "boxcox":
            return canonical_response(self)
        if self.kind == "power":
            return power(float(self.param))  # type: ignore[arg-type]
        return self

    def sql(self, col: str = "y") -> str:
        """Standard-SQL expression of g(col) (``col`` is already a quoted identifier or expression)."""
        k = self.kind
        if k == "identity":
            return col
        if k == "log":
            return f"LN({col})"
        if k == "sqrt":
            return f"SQRT({col})"
        if k == "reciprocal":
            return f"(1.0 / {col})"
        if k == "boxcox":
            lam = float(self.param)  # type: ignore[arg-type]
            return f"LN({col})" if lam == 0 else f"((EXP({lam!r} * LN({col})) - 1.0) / {lam!r})"
        raise ValueError(f"transform {self.kind} has no SQL form")

    def count_problem(self, role: str, column: str, n: int, le0: int, eq0: int, lt0: int) -> str | None:
        """``domain_problem`` from counts of values ≤ 0, = 0 and < 0 (what an SQL scan returns)."""
        k = self.kind
        if k == "identity":
            return None
        if k == "sqrt" and role == "x":
            return f"√x needs x ≥ 0: {lt0} row(s) of {column!r} are negative" if lt0 else None
        if k == "reciprocal":
            if eq0:
                return f"1/{role} needs {role} ≠ 0: {eq0} row(s) of {column!r} are 0"
            if lt0 and lt0 < n:
                return f"1/{role} needs {role} of one sign; {column!r} has both positive and negative values"
            return None
        if k == "power" and float(self.param).is_integer():  # type: ignore[arg-type]
            return None
        if le0:
            return f"{self.short(role)} needs {role} > 0: {le0} row(s) of {column!r} have {role} ≤ 0"
        return None

    def beyond_words(self, var: str = "y") -> str:
        """Where a value of g without a back-transform lies, in words."""
        if self.kind == "reciprocal":
            return f"past the pole of 1/{var} (1/{var} = 0, where {var} is infinite)"
        if self.kind == "sqrt":
            return f"below 0, which √{var} never is"
        if self.kind == "boxcox":
            lam = float(self.param)  # type: ignore[arg-type]
            side = "below" if lam > 0 else "above"
            return f"{side} {-1.0 / lam:.6g}, which {self.short(var)} never is"
        return f"outside the range of {self.short(var)}"

    @classmethod
    def from_parts(cls, kind: str, param: float | None) -> Transform:
        """A transform from its JSON parts (already type-checked): ValueError with the reason when
        the parameter does not fit the kind."""
        if kind in PARAMETRIC_KINDS:
            if param is None:
                raise ValueError("needs a number")
            if not -10 <= param <= 10:
                raise ValueError(f"is {param:g}; expected a power between −10 and 10")
            if kind == "power" and param == 0:
                raise ValueError("is 0; a power of 0 is written as the log transform")
            return cls(kind, float(param))
        if param is not None:
            raise ValueError(f"must be null for {kind}")
        return cls(kind)

    def key(self) -> tuple:
        """Hashable identity used in caches."""
        return (self.kind, self.param)

    def as_json(self) -> dict:
        """JSON description."""
        return {"kind": self.kind, "param": self.param}


def _num(v: float | None) -> str:
    if v is None:
        return ""
    for val, text in ((1 / 3, "1/3"), (-1 / 3, "-1/3")):
        if abs(v - val) < 1e-9:
            return text
    return f"{v:.4g}"


IDENTITY = Transform("identity")
LOG = Transform("log")
SQRT = Transform("sqrt")
RECIPROCAL = Transform("reciprocal")


def boxcox(lam: float) -> Transform:
    """Box–Cox λ, canonicalised: λ = 0 is log, ½ is √y, −1 is 1/y, 1 is identity (all up to an affine map)."""
    lam = round(float(lam), 4)
    return canonical_response(Transform("boxcox", lam))


def canonical_response(t: Transform) -> Transform:
    """The plainest transform that gives the same model (affine maps of z change nothing)."""
    if t.kind != "boxcox":
        return t
    lam = float(t.param)  # type: ignore[arg-type]
    if lam == 0:
        return LOG
    if lam == 0.5:
        return SQRT
    if lam == -1:
        return RECIPROCAL
    if lam == 1:
        return IDENTITY
    return t


def power(alpha: float) -> Transform:
    """x^α, canonicalised: 1 is identity, 0 is log, ½ is √x, −1 is 1/x."""
    a = round(float(alpha), 4)
    if a == 1:
        return IDENTITY
    if a == 0:
        return LOG
    if a == 0.5:
        return SQRT
    if a == -1:
        return RECIPROCAL
    return Transform("power", a)
