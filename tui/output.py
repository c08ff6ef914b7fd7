"""Small printing helpers shared by the line-mode commands (numbers come from ``engine.numfmt``)."""

from __future__ import annotations

import json
import math
import sys
from typing import Any

from bendwise.engine.numfmt import count, fmt_num, fmt_p, p_clause

__all__ = ["emit_json", "fmt_num", "fmt_p", "p_clause", "count", "collinear_words"]


def _clean(obj: Any) -> Any:
    """Make engine values JSON-safe: NaN/inf become None, numpy scalars plain floats."""
    if isinstance(obj, dict):
        return {str(k): _clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_clean(v) for v in obj]
    if hasattr(obj, "item") and callable(obj.item) and getattr(obj, "shape", None) == ():
        obj = obj.item()
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    return obj


def emit_json(obj: Any) -> None:
    """Print one JSON object on stdout."""
    sys.stdout.write(json.dumps(_clean(obj), indent=2, allow_nan=False) + "\n")


def collinear_words(aliased: tuple[str, ...] | list[str], weighted: bool) -> str:
    """What to say about terms the fit set aside as collinear: under weights, that the weights made
    them so (tiny weights can leave a column no spread of its own), not just that they were dropped."""
    names = ", ".join(aliased)
    if not weighted:
        return f"dropped as collinear: {names}"
    one = len(aliased) == 1
    return (f"with these weights {names} {'is' if one else 'are'} collinear with the other terms (the weights "
            f"leave {'it' if one else 'them'} no spread of {'its' if one else 'their'} own); "
            f"{'its coefficient is' if one else 'their coefficients are'} set to 0 — check the weights")
