"""Every section of docs/METHODS.md that code or tests cite by name exists."""

from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def test_cited_method_sections_exist():
    methods = (ROOT / "docs" / "METHODS.md").read_text(encoding="utf-8")
    headings = {m.strip() for m in re.findall(r"^## (.+)$", methods, flags=re.M)}
    cited: list[tuple[str, str]] = []
    for folder in ("engine", "tui", "tests", "bench"):
        for f in (ROOT / folder).rglob("*.py"):
            if f.name == "test_docs.py":
                continue
            text = f.read_text(encoding="utf-8")
            for m in re.finditer(r"METHODS\.md[^\n]*", text):
                for name in re.findall(r"\"([^\"]+)\"", m.group(0)):
                    cited.append((str(f.relative_to(ROOT)), name))
    assert cited, "no citation found: the search pattern is broken"
    missing = [f"{f}: {name!r}" for f, name in cited if name not in headings]
    assert not missing, "cited sections missing from docs/METHODS.md:\n" + "\n".join(missing)
