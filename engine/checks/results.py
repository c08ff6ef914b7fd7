"""Results of tests of a model against a richer one (frozen; untestable cases carry a reason)."""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["LackOfFit"]


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

    def as_json(self) -> dict:
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
