"""Transforms are objects: no module outside engine/stats/transforms.py compares a transform's
kind string ("log", "boxcox", …); callers ask the Transform (is_identity, is_log, sql(), …).
The standalone reproduce.py that an export writes imports nothing from bendwise, so the template
in engine/handon/reproduce.py carries its own small forward function: the one allowed exception."""

from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
KINDS = ("identity", "log", "sqrt", "reciprocal", "boxcox", "power")
_NAMES = "|".join(KINDS)
_COMPARE = re.compile(r"kind\s*(?:==|!=)\s*[\"'](" + _NAMES + r")[\"']|kind\s+(?:not\s+)?in\s*\(([^)]*)\)")
ALLOWED = {"engine/stats/transforms.py", "engine/handon/reproduce.py"}


def _hits(text: str) -> list[str]:
    out = []
    for m in _COMPARE.finditer(text):
        if m.group(1) or any(f'"{k}"' in (m.group(2) or "") for k in KINDS):
            out.append(m.group(0))
    return out


def test_the_scan_sees_a_kind_comparison():
    assert _hits('if t.kind == "log":') and _hits('x = t.kind in ("boxcox", "power")')
    assert not _hits('if cov.kind == "numeric":')


def test_no_transform_kind_comparison_outside_the_transform():
    bad = []
    for folder in ("engine", "tui"):
        for f in (ROOT / folder).rglob("*.py"):
            rel = f.relative_to(ROOT).as_posix()
            if rel in ALLOWED:
                continue
            bad += [f"{rel}: {h}" for h in _hits(f.read_text(encoding="utf-8"))]
    assert not bad, "ask the Transform instead:\n" + "\n".join(bad)
