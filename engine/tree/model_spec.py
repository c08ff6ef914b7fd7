"""ModelSpec: one candidate model, canonical and hashable (the same model reached by two
paths is one spec)."""

from __future__ import annotations

import re
from dataclasses import dataclass, replace

from ..stats.design import power_label
from ..stats.transforms import IDENTITY, Transform

__all__ = ["ModelSpec", "WeightRule", "quote_name"]


@dataclass(frozen=True, slots=True)
class WeightRule:
    """Weights from a variance function fitted to the level spreads: Var ∝ mean^(2θ)."""

    kind: str
    """'power-of-mean' (the only rule so far)."""
    theta: float
    """θ in Var(y) = σ² · mean^(2θ); weights are mean^(−2θ) per level."""
    estimated: bool = True
    """False when a round θ (½, 1, 1½, 2, …) inside the interval of θ̂ is used instead of θ̂ (θ
    counts as an estimated parameter either way)."""

    def describe(self) -> str:
        """Human description."""
        how = "estimated from level spreads" if self.estimated else "a conventional value consistent with the level spreads"
        return f"w ∝ mean^(−2θ), θ = {self.theta:.3g} ({how}; approximate)"

    def as_json(self) -> dict:
        """JSON description."""
        return {"kind": self.kind, "theta": self.theta, "estimated": self.estimated, "approximate": True}


@dataclass(frozen=True, slots=True)
class ModelSpec:
    """A candidate: g(y) ~ poly(h(x), degree) + covariates + h(x)×covariates, weighted or not.

    Categorical covariates use treatment coding; the reference level is the first category in
    sorted order. Interactions are with the linear term of h(x) only.
    """

    response: Transform = IDENTITY
    """Transform of y."""
    predictor: Transform = IDENTITY
    """Transform of x."""
    degree: int = 1
    """Polynomial degree in the transformed predictor."""
    covariates: tuple[str, ...] = ()
    """Admitted covariates in the model (sorted)."""
    interactions: tuple[str, ...] = ()
    """Covariates that interact with h(x) (sorted; each also in ``covariates``)."""
    weights: WeightRule | None = None
    """Weighting rule estimated by bendwise (user weights belong to the study)."""
    response_estimated: bool = False
    """True when the Box–Cox λ̂ itself is used rather than a round value inside its interval
    (either way the transform counts as one parameter: see ``extra_params``)."""
    predictor_estimated: bool = False
    """True when the Box–Tidwell α̂ itself is used rather than a round value (either way the
    transform counts as one parameter)."""

    def with_(self, **changes) -> ModelSpec:
        """Copy with changes, kept canonical."""
        new = replace(self, **changes)
        return replace(
            new,
            covariates=tuple(sorted(set(new.covariates))),
            interactions=tuple(sorted(set(new.interactions))),
        )

    @property
    def extra_params(self) -> int:
        """Parameters chosen from the data beyond the coefficients and σ: one for a transform of y
        (log, √, 1/y or a Box–Cox λ — chosen among alternatives, so it counts whether λ was snapped
        to a round value or not), one for a transform of x (log, √, 1/x or a Box–Tidwell α), and
        one for the power θ of estimated weights."""
        return int(self.response != IDENTITY) + int(self.predictor != IDENTITY) + int(self.weights is not None)

    def data_choices(self, y: str = "y", x: str = "x") -> tuple[str, ...]:
        """The choices made from the data that ``extra_params`` counts, in words."""
        out = []
        if self.response != IDENTITY:
            out.append(f"the transform of y ({self.response.short(y)})")
        if self.predictor != IDENTITY:
            out.append(f"the transform of x ({self.predictor.short(x)})")
        if self.weights is not None:
            out.append(f"the weights' power (θ = {self.weights.theta:.3g})")
        return tuple(out)

    def label(self, y: str = "y", x: str = "x") -> str:
        """Short label, e.g. 'log y ~ x + x²  + day'."""
        t = self.predictor.short(x)
        tt = f"({t})" if not self.predictor.is_identity else t
        terms = [t] + [power_label(tt, k) for k in range(2, self.degree + 1)]
        terms += list(self.covariates)
        terms += [f"{t}:{c}" for c in self.interactions]
        lhs = self.response.short(y)
        out = f"{lhs} ~ {' + '.join(terms)}"
        if self.weights is not None:
            out += f"  [w: θ={self.weights.theta:.2g}]"
        return out

    def formula(self, y: str, x: str, kinds: dict[str, str]) -> str:
        """statsmodels formula on the original columns (weights are passed separately)."""
        qy, qx = quote_name(y), quote_name(x)
        lhs = self.response.formula(qy)
        tx = self.predictor.formula(qx)
        terms = [tx]
        base = tx if self.predictor.is_identity else f"({tx[2:-1] if tx.startswith('I(') else tx})"
        for k in range(2, self.degree + 1):
            terms.append(f"I({base} ** {k})")

        def cov_term(c: str) -> str:
            q = quote_name(c)
            return f"C({q})" if kinds.get(c) == "categorical" else q

        terms += [cov_term(c) for c in self.covariates]
        inter_x = tx if not tx.startswith("I(") else tx
        terms += [f"{inter_x}:{cov_term(c)}" for c in self.interactions]
        return f"{lhs} ~ {' + '.join(terms)}"

    def as_json(self) -> dict:
        """The stable JSON shape of a spec."""
        return {
            "response": self.response.kind,
            "response_param": self.response.param,
            "response_estimated": self.response_estimated,
            "predictor": self.predictor.kind,
            "predictor_param": self.predictor.param,
            "predictor_estimated": self.predictor_estimated,
            "degree": self.degree,
            "covariates": list(self.covariates),
            "interactions": list(self.interactions),
            "weights": None if self.weights is None else self.weights.as_json(),
        }


_IDENT = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")


def quote_name(name: str) -> str:
    """Column name as a formula token (quoted with Q() when not a plain identifier)."""
    return name if _IDENT.match(name) else f"Q({name!r})"
