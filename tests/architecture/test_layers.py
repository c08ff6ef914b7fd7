"""The engine's imports go one way down, and the app uses only the engine's public names.

Every import in ``engine/`` (module level and inside functions) is parsed. Each sub-package has a
rank; a module may import from its own rank or lower ones, never from above, and the module graph
has no cycle. ``tui/`` may import any engine module but no name that starts with an underscore.
The layer order is the one drawn in DEVELOPERS.md.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]

# rank of each part of the engine; equal ranks may not import each other unless same part
RANKS = {
    "errors": 0, "cautions": 0, "version": 0, "numfmt": 0,
    "read": 1,
    "stats": 2,
    "backends": 3, "checks": 3, "plan": 3,
    "tree": 4,
    "handon": 5,
    "engine": 6,  # engine/__init__.py re-exports the public names
}


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(ROOT).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def _imports(path: Path) -> list[tuple[int, str, list[str]]]:
    """(line, absolute module, imported names) for every import in one file, at module level or
    inside functions; imports under ``if TYPE_CHECKING:`` are left out (they never run)."""
    mod = _module_name(path)
    package = mod if path.name == "__init__.py" else mod.rpartition(".")[0]
    out = []
    tree = ast.parse(path.read_text(encoding="utf-8"))
    typing_only = {id(n) for block in ast.walk(tree) if _is_type_checking(block)
                   for n in ast.walk(block)}
    for node in ast.walk(tree):
        if id(node) in typing_only:  # annotations only: never executed, not a dependency
            continue
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")[: len(package.split(".")) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            out.append((node.lineno, target, [a.name for a in node.names]))
        elif isinstance(node, ast.Import):
            out.extend((node.lineno, a.name, []) for a in node.names)
    return out


def _is_type_checking(node: ast.AST) -> bool:
    return isinstance(node, ast.If) and "TYPE_CHECKING" in ast.unparse(node.test)


def _part(module: str) -> str:
    bits = module.split(".")
    return bits[1] if len(bits) > 1 else "engine"


def _engine_files() -> list[Path]:
    return sorted((ROOT / "engine").rglob("*.py"))


def test_every_engine_part_has_a_rank():
    parts = {_part(_module_name(f)) for f in _engine_files()}
    assert parts <= set(RANKS), f"give these parts a rank here and in DEVELOPERS.md: {parts - set(RANKS)}"


def test_no_upward_import_in_the_engine():
    bad = []
    for f in _engine_files():
        here = _part(_module_name(f))
        for line, target, names in _imports(f):
            if not target.startswith("engine"):
                continue
            targets = [target]
            if target == "engine":  # "from bendwise.engine import stats" style: judge each named part
                targets = [f"engine.{n}" for n in names]
            for t in targets:
                there = _part(t)
                if there == here:
                    continue
                if RANKS.get(there, 99) >= RANKS[here]:
                    bad.append(f"{f.relative_to(ROOT)}:{line} ({here}) imports {t} ({there})")
    assert not bad, "imports that go up or sideways:\n" + "\n".join(bad)


def test_engine_never_imports_the_ui():
    bad = [f"{f.relative_to(ROOT)}:{line} imports {t}"
           for f in _engine_files() for line, t, _ in _imports(f)
           if t.split(".")[0] in {"tui", "textual", "rich", "plotext"}]
    assert not bad, "\n".join(bad)


def test_no_import_cycle_between_engine_modules():
    files = {_module_name(f): f for f in _engine_files()}
    graph: dict[str, set[str]] = {m: set() for m in files}
    for m, f in files.items():
        for _, target, names in _imports(f):
            for cand in [target] + [f"{target}.{n}" for n in names]:
                if cand in files and cand != m:
                    graph[m].add(cand)
    # a package's __init__ re-exporting its own modules is not a cycle worth reporting
    for m in graph:
        graph[m] = {t for t in graph[m] if not t.startswith(m + ".")}
    cycle = _find_cycle(graph)
    assert cycle is None, "import cycle: " + " -> ".join(cycle or [])


def _find_cycle(graph: dict[str, set[str]]) -> list[str] | None:
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(m: str) -> list[str] | None:
        state[m] = 1
        stack.append(m)
        for t in sorted(graph[m]):
            if state.get(t) == 1:
                return stack[stack.index(t):] + [t]
            if t not in state and (found := visit(t)):
                return found
        stack.pop()
        state[m] = 2
        return None

    for m in sorted(graph):
        if m not in state and (found := visit(m)):
            return found
    return None


def test_the_cycle_finder_finds_a_planted_cycle():
    assert _find_cycle({"a": {"b"}, "b": {"c"}, "c": {"a"}}) == ["a", "b", "c", "a"]
    assert _find_cycle({"a": {"b"}, "b": set()}) is None


@pytest.mark.parametrize("folder", ["tui", "bench"])
def test_ui_and_benchmarks_use_only_public_engine_names(folder):
    bad = []
    for f in sorted((ROOT / folder).rglob("*.py")):
        for line, target, names in _imports(f):
            if target.startswith("engine"):
                private = [n for n in names if n.startswith("_")]
                private += [p for p in target.split(".") if p.startswith("_")]
                if private:
                    bad.append(f"{f.relative_to(ROOT)}:{line} imports {target}: {', '.join(private)}")
    assert not bad, "private engine names used outside the engine:\n" + "\n".join(bad)
