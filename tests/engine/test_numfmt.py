"""The one number-formatting module (engine.numfmt): the rules, and that nobody else keeps their own."""

from __future__ import annotations

import math
import re
from pathlib import Path

import pytest
from bendwise.engine.numfmt import MISSING, count, fmt_num, fmt_p, p_clause

ROOT = Path(__file__).resolve().parents[2]


@pytest.mark.parametrize(("p", "text"), [
    (0.5, "0.5"), (0.04567, "0.0457"), (0.000123456, "0.000123"),  # three significant digits
    (3.2e-05, "3.2e-05"), (9.87654e-08, "9.88e-08"),  # below 1e-4: scientific, still three digits
    (1e-12, "1e-12"), (9.99e-13, "<1e-12"), (0.0, "<1e-12"),  # below the tail's accuracy: a bound
    (None, MISSING), (math.nan, MISSING), (math.inf, MISSING),
])
def test_p_values(p, text):
    assert fmt_p(p) == text


def test_p_clause_never_writes_equals_before_an_inequality():
    assert p_clause(0.0234) == "p = 0.0234"
    assert p_clause(1e-20) == "p < 1e-12"
    assert p_clause(None) == "p = —"


@pytest.mark.parametrize(("v", "digits", "text"), [
    (238014.7, 5, "238015"), (238010.0, 6, "238010"),  # never 2.3801e+05: the whole part in full
    (882773.2, 4, "882773"), (3368421.0, 6, "3368421"),
    (999.96, 4, "1000"), (9999.6, 4, "10000"),  # rounding up to the next power of ten
    (12.0, 4, "12"), (0.1, 4, "0.1"), (-3.14159, 5, "-3.1416"),  # no trailing zeros
    (0.000123456, 4, "0.0001235"), (1e-4, 3, "0.0001"),  # plain down to 1e-4
    (1.234e-05, 4, "1.234e-05"), (-2.5e-07, 3, "-2.50e-07"),  # small: scientific
    (1.5e9, 4, "1.500e+09"), (6.02e23, 3, "6.02e+23"),  # huge: scientific
    (0.0, 4, "0"), (-0.0, 4, "0"), (None, 4, MISSING), (math.nan, 4, MISSING), (-math.inf, 4, MISSING),
])
def test_quantities(v, digits, text):
    assert fmt_num(v, digits) == text


def test_counts_agree_with_their_noun():
    assert count(1, "model") == "1 model"
    assert count(0, "model") == "0 models"
    assert count(22, "model") == "22 models"
    assert count(1, "replicate") == "1 replicate"
    assert count(2, "analysis", "analyses") == "2 analyses"


# A p-value formatted in place: an f-string field whose expression names a p-value (p, x.p, p_low,
# p_alpha1, pvalue) with a precision, e.g. {lof.p:.3g} or {p:.4f}; or a '<1e-12' bound spelled out.
_P_FIELD = re.compile(r"\{([^{}:]*?(?:\bp(?:_\w+)?|\.p|pval\w*))\s*:\s*\.\d+[efg%]\}")
_P_BOUND = re.compile(r"""["']<\s?1e-12""")
_ALLOWED = {
    # the Box–Tidwell move's label (engine/tree/moves/box_tidwell.py) is held byte for byte by the
    # golden JSON; it keeps Python's 3-significant-digit spelling
    ("engine/tree/moves/box_tidwell.py", "test of α = 1 p = {ps.p_alpha1:.3g}"),
}


def _sources():
    for folder in ("engine", "tui"):
        for path in sorted((ROOT / folder).rglob("*.py")):
            rel = path.relative_to(ROOT).as_posix()
            if rel != "engine/numfmt.py":
                yield rel, path.read_text(encoding="utf-8")


def test_no_module_formats_p_values_its_own_way():
    found = []
    for rel, text in _sources():
        for line in text.splitlines():
            for m in _P_FIELD.finditer(line):
                if not any(rel == f and snippet in line for f, snippet in _ALLOWED):
                    found.append(f"{rel}: {m.group(0)}")
            if _P_BOUND.search(line):
                found.append(f"{rel}: {line.strip()}")
    assert not found, "format p-values with engine.numfmt (fmt_p / p_clause):\n" + "\n".join(found)


def test_no_module_defines_a_p_value_helper():
    helper = re.compile(r"^\s*def (_?fmt_p|_fp|_p|_pv|_pval\w*|format_p\w*)\(", re.MULTILINE)
    found = [f"{rel}: {m.group(0).strip()}" for rel, text in _sources() for m in helper.finditer(text)]
    assert not found, "\n".join(found)


def test_the_check_catches_an_ad_hoc_formatter():
    # the patterns above must match what they are meant to forbid
    assert _P_FIELD.search('f"p = {lof.p:.3g}"') and _P_FIELD.search('f"{p:.4f}"')
    assert _P_FIELD.search('f"{t.p_value:.2e}"')
    assert not _P_FIELD.search('f"{theta:.3g}"') and not _P_FIELD.search('f"{p:g}"')
    assert _P_BOUND.search('return "<1e-12" if p < 1e-12 else x')


def test_numfmt_sits_in_the_base_layer():
    # every layer may use it, so it must import nothing from the engine (or any UI library)
    import ast

    tree = ast.parse((ROOT / "engine" / "numfmt.py").read_text(encoding="utf-8"))
    imported = {a.name.split(".")[0] for n in ast.walk(tree) if isinstance(n, ast.Import) for a in n.names}
    imported |= {(n.module or "").split(".")[0] or "." for n in ast.walk(tree) if isinstance(n, ast.ImportFrom)}
    assert imported <= {"__future__", "math"}, imported
