"""Numbers in words: the one place that decides how bendwise writes a p-value, a quantity or a count.

Base layer (no imports from the rest of the engine). Every text that shows a number — the CLI's
line output, the app's detail pane, the report and the sentences stored in JSON (verdicts,
reasons, moves) — formats it here, so the same quantity reads the same everywhere:

* p-values: three significant digits; below 1e-12 as ``<1e-12`` (the distributions' tails are not
  accurate beyond it); missing as ``—``.
* quantities: ``digits`` significant digits in plain notation while the number is between 1e-4 and
  1e9, with the whole-number part always in full (``238015``, never ``2.3801e+05`` beside it);
  scientific notation outside that range.
* counts: the number and the noun in the right number (``1 model``, ``2 models``).
"""

from __future__ import annotations

import math

__all__ = ["MISSING", "P_FLOOR", "fmt_p", "p_clause", "fmt_num", "count"]

MISSING = "—"
"""Shown for a value that is missing or not finite."""
P_FLOOR = 1e-12
"""p-values below this are shown as ``<1e-12``."""
_PLAIN_LOW, _PLAIN_HIGH = 1e-4, 1e9


def _missing(v: float | None) -> bool:
    return v is None or not math.isfinite(float(v))


def fmt_p(p: float | None) -> str:
    """A p-value: ``0.0234``, ``3.2e-05``, ``<1e-12``; ``—`` when missing."""
    if _missing(p):
        return MISSING
    return "<1e-12" if p < P_FLOOR else f"{p:.3g}"  # type: ignore[operator]


def p_clause(p: float | None) -> str:
    """``p = 0.0234`` or ``p < 1e-12`` (no equals sign before an inequality)."""
    text = fmt_p(p)
    return f"p < {text[1:]}" if text.startswith("<") else f"p = {text}"


def fmt_num(v: float | None, digits: int = 4) -> str:
    """``v`` to ``digits`` significant digits; plain notation between 1e-4 and 1e9, else scientific."""
    if _missing(v):
        return MISSING
    x = float(v)  # type: ignore[arg-type]
    if x == 0:
        return "0"
    digits = max(int(digits), 1)
    rounded = float(f"{x:.{digits}g}")
    a = abs(rounded)
    if not _PLAIN_LOW <= a < _PLAIN_HIGH:
        return f"{x:.{digits - 1}e}"
    if abs(x) >= 10 ** (digits - 1):
        return f"{x:.0f}"  # the whole number part in full: 238015, not 2.3801e+05 nor 238010
    decimals = max(digits - 1 - math.floor(math.log10(a)), 0)
    text = f"{rounded:.{decimals}f}"
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return "0" if text in {"-0", ""} else text


def count(n: int, noun: str, plural: str | None = None) -> str:
    """``1 model``, ``0 models``, ``3 replicates``; ``plural`` for irregular nouns."""
    return f"{n} {noun if n == 1 else (plural or noun + 's')}"
