"""What was read and what was dropped, and why: nothing is dropped silently."""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["DropCount", "CleaningReport"]


@dataclass(frozen=True, slots=True)
class DropCount:
    """Rows dropped for one reason in one column."""

    column: str
    """Column whose value was unusable."""
    reason: str
    """'missing', 'non-numeric', 'non-finite', 'weight not positive'."""
    count: int
    """How many rows."""
    rows: tuple[int, ...]
    """First few data-row numbers (1 = first row after the header)."""

    def describe(self) -> str:
        """One line for reports."""
        if not self.rows:
            return f"{self.count} row(s) with {self.reason} {self.column!r}"
        shown = ", ".join(str(r) for r in self.rows)
        more = ", …" if self.count > len(self.rows) else ""
        return f"{self.count} row(s) with {self.reason} {self.column!r} (rows {shown}{more})"


@dataclass(frozen=True, slots=True)
class CleaningReport:
    """What was read and what was dropped, and why. Nothing is dropped silently."""

    source: str
    """File name (or '<stdin>')."""
    n_read: int
    """Data rows read."""
    n_used: int
    """Rows kept for the analysis."""
    drops: tuple[DropCount, ...]
    """Each reason rows were dropped (a row is counted once, under its first problem)."""

    @property
    def n_dropped(self) -> int:
        """Rows not used."""
        return self.n_read - self.n_used

    def lines(self) -> list[str]:
        """Human lines, empty when nothing was dropped."""
        return [d.describe() for d in self.drops]

    def as_json(self) -> dict:
        """JSON shape."""
        return {
            "source": self.source,
            "n_read": self.n_read,
            "n_used": self.n_used,
            "n_dropped": self.n_dropped,
            "drops": [
                {"column": d.column, "reason": d.reason, "count": d.count, "rows": list(d.rows)}
                for d in self.drops
            ],
        }
