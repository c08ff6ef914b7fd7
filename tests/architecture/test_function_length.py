"""Functions stay short: none over 60 lines (signature, docstring and body) unless its docstring
says why, in a sentence that starts "Long because". The rule is the project's own (STYLE)."""

from __future__ import annotations

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
LIMIT = 60
FOLDERS = ("engine", "tui", "datasets")


def _long_functions(root: Path = ROOT) -> list[str]:
    found = []
    for folder in FOLDERS:
        for path in sorted((root / folder).rglob("*.py")):
            tree = ast.parse(path.read_text(encoding="utf-8"))
            for node in ast.walk(tree):
                if not isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
                    continue
                length = node.end_lineno - node.lineno + 1  # type: ignore[operator]
                if length > LIMIT and "Long because" not in (ast.get_docstring(node) or ""):
                    found.append(f"{path.relative_to(root)}:{node.lineno} {node.name} ({length} lines)")
    return found


def test_no_function_is_long_without_a_reason():
    assert _long_functions() == []


def test_the_rule_sees_a_long_function(tmp_path):
    """The check itself: a 70-line function without a reason is reported, with one it is not."""
    pkg = tmp_path / "engine"
    pkg.mkdir()
    body = "\n".join(f"    v{i} = {i}" for i in range(70))
    (pkg / "m.py").write_text(f"def f():\n{body}\n\n\ndef g():\n    \"\"\"Long because tested.\"\"\"\n{body}\n")
    found = _long_functions(tmp_path)
    assert [f.split(" ")[1] for f in found] == ["f"]
