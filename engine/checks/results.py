"""Results of tests of a model against a richer one (frozen; untestable cases carry a reason)."""

from __future__ import annotations

from dataclasses import dataclass

from ..numfmt import fmt_num, p_clause

__all__ = ["LackOfFit", "NestedTest", "f_test_words"]


def f_test_words(f: float | None, df1: int | None, df2: int | None, p: float | None, approximate: bool) -> str:
    """'F = 0.37 on 5 and 16 df, p = 0.866' (', approximate' when it is)."""
    return f"F = {fmt_num(f, 4)} on {df1} and {df2} df, {p_clause(p)}" + (", approximate" if approximate else "")


@dataclass(frozen=True, slots=True)
class LackOfFit:
    """An F test of a model against a richer one; untestable cases carry a reason."""

    testable: bool
    """False when the test cannot be run; then ``reason`` says why and numbers are None."""
    reason: str | None = None
    """Why the test is unavailable (None when testable)."""
    kind: str = "pure error"
    """Which comparison: 'pure error', 'shape in x', 'near-replicate (approximate)'."""
    ss_lack: float | None = None
    """Sum of squares for lack of fit."""
    ss_pure: float | None = None
    """Pure-error (or richer model's residual) sum of squares."""
    df_lack: int | None = None
    """Degrees of freedom for lack of fit (c − p)."""
    df_pure: int | None = None
    """Degrees of freedom for pure error (n − c)."""
    f: float | None = None
    """F ratio."""
    p: float | None = None
    """Upper-tail p-value."""
    approximate: bool = False
    """True when groups were formed by a tolerance or weights were estimated."""

    def passes(self, alpha: float) -> bool | None:
        """True/False at level alpha; None when untestable."""
        if not self.testable or self.p is None:
            return None
        return self.p >= alpha

    def summary(self) -> str:
        """One line of plain text: the F test, or why it cannot be run."""
        if not self.testable:
            return f"not testable: {self.reason or 'no reason given'}"
        return f_test_words(self.f, self.df_lack, self.df_pure, self.p, self.approximate)

    def to_dict(self) -> dict:
        """The stable JSON shape other tools rely on."""
        if not self.testable:
            return {"testable": False, "reason": self.reason, "kind": self.kind}
        return {
            "testable": True,
            "kind": self.kind,
            "approximate": self.approximate,
            "ss_lack": self.ss_lack,
            "ss_pure": self.ss_pure,
            "df_lack": self.df_lack,
            "df_pure": self.df_pure,
            "f": self.f,
            "p": self.p,
        }

    as_json = to_dict


@dataclass(frozen=True, slots=True)
class NestedTest:
    """F test of a model against a richer one that contains it (a move's added terms, a
    covariate, the x² of the curvature check); untestable cases carry a reason."""

    testable: bool
    """False when the models are not nested or the F ratio is undefined (see ``reason``)."""
    reason: str | None = None
    """Why the test is unavailable (None when testable)."""
    kind: str = "nested F"
    """Which comparison: 'nested F', 'curvature (line + x²)'."""
    ss_extra: float | None = None
    """Sum of squares the richer model removes."""
    sse_full: float | None = None
    """Residual sum of squares of the richer model."""
    df_num: int | None = None
    """Parameters the richer model adds."""
    df_den: int | None = None
    """Residual degrees of freedom of the richer model."""
    f: float | None = None
    """F ratio."""
    p: float | None = None
    """Upper-tail p-value."""
    approximate: bool = False
    """True when weights were estimated from the data."""

    def summary(self) -> str:
        """One line of plain text: the F test, or why it cannot be run."""
        if not self.testable:
            return f"not testable: {self.reason or 'no reason given'}"
        return f_test_words(self.f, self.df_num, self.df_den, self.p, self.approximate)

    def to_dict(self) -> dict:
        """The node's ``nested`` entry in ``grow --json``."""
        if not self.testable:
            return {"reason": self.reason}
        return {"f": self.f, "df_num": self.df_num, "df_den": self.df_den, "p": self.p,
                "approximate": self.approximate}

    def to_spec_dict(self) -> dict:
        """The path entry's ``nested`` in an export's spec.json (the lack-of-fit shape, kept as it was)."""
        if not self.testable:
            return {"testable": False, "reason": self.reason, "kind": self.kind}
        return {"testable": True, "kind": self.kind, "approximate": self.approximate, "ss_lack": self.ss_extra,
                "ss_pure": self.sse_full, "df_lack": self.df_num, "df_pure": self.df_den, "f": self.f, "p": self.p}
