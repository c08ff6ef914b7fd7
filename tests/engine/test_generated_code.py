"""Generated files never run or render what the data says: names from hostile headers.

Every generator that writes text from column names — reproduce.py, report.md, spec.json (and its
JSON Schema) and the DuckDB SQL — gets names with quotes, triple quotes, backslashes, newlines,
``--``, ``;``, ``$(…)``, NUL, backticks, Markdown and non-ASCII, as the response, the predictor, a
categorical and a numeric covariate, read from CSV and from Parquet.
"""

from __future__ import annotations

import ast
import io
import json
import re
import subprocess
import sys
import tokenize
from pathlib import Path

import bendwise.engine as engine
import jsonschema
import numpy as np
import pandas as pd
import pytest
from bendwise.engine.handon.export import export_node
from bendwise.engine.handon.specfile import schema_path, validate_spec

pytestmark = pytest.mark.slow  # each case runs a generated script in a new interpreter

MARK = "pwned_by_name"  # every name that tries to run something would create a file of this name
HOSTILE = [
    f'y"""; __import__("os").system("touch {MARK}1"); """',
    f"x'''; open('{MARK}2', 'w'); '''",
    f'back\\slash\\"; open("{MARK}3", "w") #',
    f"two\n# lines {MARK}4",
    f"a -- comment; DROP TABLE t; $(touch {MARK}5)",
    f"`tick` | pipe ``{MARK}6`` <b>bold</b> *star* [link](x)",
    f"naïve µg/L ✓ Ω {MARK}7",
    f'q"uote\'s; select 1; --{MARK}8',
]
NUL_NAME = f"nul\x00char {MARK}9"  # Parquet only: a NUL byte makes a CSV look binary
LEVELS = ['a"""b', "c'\nd", "e\\f", "g -- h; $(i)"]
ROLES = ("y", "x", "cat", "num")


def _frame(names: dict[str, str], seed: int = 3) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = np.repeat(np.arange(1.0, 7.0), 4)
    cat = np.tile(LEVELS, 6)
    num = rng.normal(20.0, 2.0, x.size)
    shift = {lv: 0.3 * i for i, lv in enumerate(LEVELS)}
    y = 2.0 + 1.5 * x + np.array([shift[c] for c in cat]) + 0.05 * num + rng.normal(0.0, 0.1, x.size)
    return pd.DataFrame({names["y"]: y, names["x"]: x, names["cat"]: cat, names["num"]: num})


def _cases() -> list[tuple[str, dict[str, str]]]:
    """Every hostile name in every role, CSV and Parquet (NUL in Parquet only)."""
    out = []
    for k in range(0, len(HOSTILE), 4):
        group = HOSTILE[k:k + 4]
        for shift in range(4):
            names = {role: group[(i + shift) % 4] for i, role in enumerate(ROLES)}
            out.append(("csv" if shift % 2 == 0 else "parquet", names))
    out.append(("parquet", {"y": NUL_NAME, "x": HOSTILE[0], "cat": HOSTILE[5], "num": HOSTILE[3]}))
    return out


CASES = _cases()


def _write(folder: Path, fmt: str, frame: pd.DataFrame) -> Path:
    path = folder / ("data.csv" if fmt == "csv" else "data.parquet")
    if fmt == "csv":
        frame.to_csv(path, index=False)
    else:
        frame.to_parquet(path)
    return path


def _export(folder: Path, fmt: str, names: dict[str, str]) -> tuple[Path, dict[str, str]]:
    """The node with both covariates (and an interaction when there is one) exported next to its data."""
    data = _write(folder, fmt, _frame(names))
    frame = engine.load_table(data)
    study = engine.make_study(frame, y=names["y"], x=names["x"], covariates=[names["cat"], names["num"]],
                              source=data.name)
    tree = engine.grow(study, depth=2)
    node = next(n for n in tree.nodes.values() if n.score is not None and not n.score.fit.aliased
                and set(n.spec.covariates) == {names["cat"], names["num"]})
    out = folder / "export"
    export_node(tree, node.id, out, data_path=data)
    return out, names


@pytest.fixture(scope="module", params=range(len(CASES)), ids=lambda i: f"{CASES[i][0]}-{i}")
def hostile_export(request, tmp_path_factory):
    fmt, names = CASES[request.param]
    folder = tmp_path_factory.mktemp(f"hostile{request.param}")
    return _export(folder, fmt, names)


def _fragments(names: dict[str, str]) -> list[str]:
    """Pieces of the names that only the names contain."""
    return [MARK, "__import__", "touch", "DROP TABLE", "<b>", "[link]"]


def test_reproduce_script_holds_names_only_as_literals_and_runs_nothing(hostile_export):
    out, names = hostile_export
    script = (out / "reproduce.py").read_text(encoding="utf-8")
    ast.parse(script)  # it is valid Python whatever the names hold
    # outside string literals (the docstring included) no piece of any name appears: not in code,
    # not in a comment
    docstring = ast.get_docstring(ast.parse(script)) or ""
    rest = []
    for tok in tokenize.generate_tokens(io.StringIO(script).readline):
        if tok.type != tokenize.STRING:
            rest.append(tok.string)
    code_and_comments = " ".join(rest)
    for piece in _fragments(names):
        assert piece not in docstring, piece
        assert piece not in code_and_comments, piece
    # and running it (as the README says) refits the model, creates nothing, and agrees
    done = subprocess.run([sys.executable, str(out / "reproduce.py")], capture_output=True, text=True,
                          timeout=180, cwd=out)
    assert done.returncode == 0, done.stdout + done.stderr
    assert "OK: all" in done.stdout
    created = [p.name for p in out.parent.rglob(f"*{MARK}*")] + [p.name for p in out.rglob(f"*{MARK}*")]
    assert created == []


_SPAN = re.compile(r"(`+)(.+?)\1", re.S)


def test_report_shows_names_as_inert_code_spans(hostile_export):
    out, names = hostile_export
    text = (out / "report.md").read_text(encoding="utf-8")
    # the only headings are the report's own (a name's newline never starts a line of its own)
    headings = [ln for ln in text.splitlines() if ln.startswith("#")]
    assert all(re.match(r"^#{1,2} [A-Z]|^# bendwise model hand-off: `", h) for h in headings), headings
    # with every code span removed, nothing of any name is left to render as Markdown or HTML
    outside = _SPAN.sub("", text)
    for piece in _fragments(names):
        assert piece not in outside, piece
    # inside the spans, names are on one line (newlines and NUL escaped)
    for name in names.values():
        visible = "".join(c if c.isprintable() else repr(c)[1:-1] for c in name)
        assert visible in text or visible.replace("|", "\\|") in text
        if any(not c.isprintable() for c in name):
            assert name not in text


def test_spec_json_keeps_names_exact_and_valid(hostile_export):
    out, names = hostile_export
    raw = (out / "spec.json").read_text(encoding="utf-8")
    doc = json.loads(raw)
    # reference: the project's published JSON Schema, checked by the jsonschema package
    jsonschema.Draft202012Validator(json.loads(schema_path().read_text())).validate(doc)
    cols = doc["provenance"]["columns"]
    assert cols["response"] == names["y"] and cols["predictor"] == names["x"]
    assert set(cols["covariates"]) == {names["cat"], names["num"]}
    levels = next(c["levels"] for c in doc["model"]["covariates"] if c["kind"] == "categorical")
    assert sorted(levels) == sorted(lv.strip() for lv in LEVELS)
    model = validate_spec(doc)
    assert model.response_name == names["y"]
    assert "\x00" not in raw  # a NUL travels as the JSON escape \u0000


@pytest.mark.parametrize("fmt", ["parquet", "csv"])
def test_sql_engine_quotes_every_name_and_agrees_with_memory(tmp_path, fmt):
    pytest.importorskip("duckdb")
    from bendwise.engine.backends.duckdb import make_sql_study

    # hostile names, and names that are the SQL's own words and aliases ("y", "x", "n", "bw_c")
    names = {"y": HOSTILE[4], "x": HOSTILE[7], "cat": "n" if fmt == "csv" else NUL_NAME, "num": "y"}
    frame = _frame(names)
    frame["X"] = frame[names["x"]] * 0 + 1.0  # same as the internal "x" but for case
    frame["bw_c"] = np.linspace(0, 1, frame.shape[0])
    path = _write(tmp_path, fmt, frame)
    covs = [names["cat"], names["num"], "bw_c"]
    mem = engine.make_study(engine.load_table(path), y=names["y"], x=names["x"], covariates=covs)
    sql = make_sql_study(str(path), y=names["y"], x=names["x"], covariates=covs)
    assert sql.n == mem.n == frame.shape[0]
    assert [c.name for c in sql.covariates] == [c.name for c in mem.covariates]
    assert sql.covariate(names["cat"]).levels == mem.covariate(names["cat"]).levels
    for name in (names["num"], "bw_c"):
        assert sql.covariate_mean(name) == pytest.approx(float(np.mean(mem.covariate(name).values)), rel=1e-12)
    a = engine.check(mem).as_json()
    b = engine.check(sql).as_json()
    assert b["lack_of_fit"]["f"] == pytest.approx(a["lack_of_fit"]["f"], rel=1e-9)
    tm, ts = engine.grow(mem, depth=1), engine.grow(sql, depth=1)
    for nid, node in tm.nodes.items():
        if node.score is not None and nid in ts.nodes and ts.nodes[nid].score is not None:
            assert ts.nodes[nid].score.fit.sse == pytest.approx(node.score.fit.sse, rel=1e-8), nid
    rows = sql.sample_rows(10)
    assert set(rows) == {"y", "x", *covs}
