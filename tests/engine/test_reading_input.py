"""Reading tables: standard input by its bytes, clear refusals, and both engines alike.

Standard input is tested through the real entry point in a child process (so the bytes reach it
through a pipe, as from ``cat``), for ``check`` and ``apply``.
"""

from __future__ import annotations

import io
import json
import subprocess
import sys
from pathlib import Path

import bendwise.engine as engine
import numpy as np
import pandas as pd
import pytest
from bendwise.engine.errors import DataError, UsageError

REPO = Path(__file__).resolve().parents[2]
LINE = REPO / "datasets" / "straight_line.csv"


def _cli(*args: str, stdin: bytes | None = None, cwd: Path = REPO) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "bendwise.tui.cli", *args], input=stdin, capture_output=True,
                          timeout=180, cwd=cwd)


def _table() -> pd.DataFrame:
    x = np.repeat([0.0, 1.0, 2.0, 3.0, 4.0], 3)
    noise = np.tile([-0.1, 0.0, 0.12], 5)
    return pd.DataFrame({"dosé": x, "réponse": 1.0 + 2.0 * x + noise})


def _xlsx_bytes(frame: pd.DataFrame) -> bytes:
    buf = io.BytesIO()
    frame.to_excel(buf, index=False)
    return buf.getvalue()


def _parquet_bytes(frame: pd.DataFrame) -> bytes:
    buf = io.BytesIO()
    frame.to_parquet(buf)
    return buf.getvalue()


@pytest.mark.parametrize("kind", ["latin-1", "parquet", "excel", "utf-8-bom"])
def test_check_reads_standard_input_by_its_bytes(kind):
    frame = _table()
    if kind == "latin-1":
        data = frame.to_csv(index=False).encode("latin-1")
    elif kind == "utf-8-bom":
        data = frame.to_csv(index=False).encode("utf-8-sig")
    elif kind == "parquet":
        data = _parquet_bytes(frame)
    else:
        data = _xlsx_bytes(frame)
    done = _cli("check", "-", "-y", "réponse", "-x", "dosé", "--json", stdin=data)
    assert done.returncode == 0, done.stderr.decode()
    assert done.stderr == b""
    out = json.loads(done.stdout)
    assert out["n"] == 15 and out["levels"] == 5
    # the same numbers as from a file
    ref = engine.check(engine.make_study(frame, y="réponse", x="dosé"))
    assert out["lack_of_fit"]["f"] == pytest.approx(ref.lack_of_fit.f, rel=1e-12)


@pytest.mark.parametrize("encoding", ["utf-16", "utf-16-le"])
def test_utf16_on_standard_input_is_refused_in_one_line(encoding):
    data = _table().to_csv(index=False).encode(encoding)
    done = _cli("check", "-", "-y", "réponse", "-x", "dosé", stdin=data)
    err = done.stderr.decode()
    assert done.returncode == 2 and err.count("\n") == 1, err
    assert "UTF-16" in err and "UTF-8" in err and "Traceback" not in err


@pytest.mark.slow
def test_apply_reads_new_data_from_standard_input_in_latin1(tmp_path):
    out = tmp_path / "exp"
    assert _cli("export", str(LINE), "-y", "response_au", "-x", "dose_ug", "--node", "root", "-o",
                str(out)).returncode == 0
    data = "dose_ug,note\n1.5,café\n2.5,thé\n".encode("latin-1")
    done = _cli("apply", str(out / "spec.json"), "-", "--json", stdin=data)
    assert done.returncode == 0, done.stderr.decode()
    rows = json.loads(done.stdout)["rows"]
    assert [r["x"] for r in rows] == [1.5, 2.5]
    binary = _cli("apply", str(out / "spec.json"), "-", stdin=b"\x00\x01\x02garbage\x00" * 10)
    assert binary.returncode == 2 and b"Traceback" not in binary.stderr
    assert binary.stderr.decode().count("\n") == 1


def test_repeated_column_names_are_refused_naming_them(tmp_path):
    path = tmp_path / "dup.csv"
    path.write_text("x,y,y\n1,2,3\n2,3,4\n3,4,5\n", encoding="utf-8")
    with pytest.raises(DataError, match=r"names column 'y' 2 times \(columns 2 and 3\)"):
        engine.load_table(path)
    spaced = tmp_path / "spaced.csv"
    spaced.write_text("x, y,y \n1,2,3\n2,3,4\n3,4,5\n", encoding="utf-8")
    with pytest.raises(DataError, match="column 'y' 2 times"):
        engine.load_table(spaced)
    # a name that merely looks like pandas' renaming of a repeat is a name of its own
    fine = tmp_path / "fine.csv"
    fine.write_text("x,y,y.1\n1,2,3\n2,3,4\n3,4,5\n", encoding="utf-8")
    assert list(engine.load_table(fine).columns) == ["x", "y", "y.1"]


def test_repeated_column_names_are_refused_by_the_sql_engine_too(tmp_path):
    pytest.importorskip("duckdb")
    from bendwise.engine.backends.duckdb import make_sql_study

    path = tmp_path / "dup.csv"
    path.write_text("x,y,y\n" + "".join(f"{i % 4},{i},{2 * i}\n" for i in range(12)), encoding="utf-8")
    with pytest.raises(DataError, match=r"names column 'y' 2 times \(columns 2 and 3\)"):
        make_sql_study(str(path), y="y", x="x")


def test_broken_json_lines_name_the_line(tmp_path):
    path = tmp_path / "runs.jsonl"
    path.write_text('{"x": 1, "y": 2}\n{"x": 2, "y": 3}\n{"x": 3, "y": \n{"x": 4, "y": 5}\n', encoding="utf-8")
    with pytest.raises(DataError, match=r"runs.jsonl line 3 is not valid JSON"):
        engine.load_table(path)
    path.write_text('{"x": 1, "y": 2}\n[3, 4]\n', encoding="utf-8")
    with pytest.raises(DataError, match=r"line 2 holds a JSON list, not an object"):
        engine.load_table(path)


@pytest.mark.slow
def test_json_array_of_objects_is_read_and_reproduced(tmp_path):
    rows = [{"dose": float(x), "signal": 1.0 + 2.0 * x + e} for x, e in
            zip(np.repeat([0, 1, 2, 3], 3), np.tile([-0.1, 0.0, 0.1], 4), strict=True)]
    path = tmp_path / "runs.json"
    path.write_text(json.dumps(rows, indent=1), encoding="utf-8")
    frame = engine.load_table(path)
    assert list(frame.columns) == ["dose", "signal"] and frame.shape == (12, 2)
    out = tmp_path / "exp"
    assert _cli("export", str(path), "-y", "signal", "-x", "dose", "--node", "root", "-o", str(out)).returncode == 0
    assert json.loads((out / "spec.json").read_text())["provenance"]["data"]["reading"]["format"] == "json"
    done = subprocess.run([sys.executable, str(out / "reproduce.py")], capture_output=True, text=True, timeout=180)
    assert done.returncode == 0 and "OK: all" in done.stdout, done.stdout + done.stderr


def test_sheet_is_refused_for_a_text_table(tmp_path):
    with pytest.raises(UsageError, match="--sheet applies to Excel workbooks"):
        engine.load_table(LINE, sheet="runs")
    done = _cli("check", str(LINE), "-y", "response_au", "-x", "dose_ug", "--sheet", "runs")
    assert done.returncode == 2 and b"--sheet applies to Excel" in done.stderr


def test_quoted_names_holding_separators_do_not_mislead_the_delimiter(tmp_path):
    path = tmp_path / "q.csv"
    path.write_text('"a;b|c",x\n1,2\n3,4\n5,6\n', encoding="utf-8")
    assert list(engine.load_table(path).columns) == ["a;b|c", "x"]


# ----------------------------------------------------------------------------- SQL engine parity


def _both(path: Path, y: str = "y", x: str = "x") -> tuple[str, str]:
    pytest.importorskip("duckdb")
    from bendwise.engine.backends.duckdb import make_sql_study

    def message(build) -> str:
        with pytest.raises(DataError) as info:
            build()
        return str(info.value)

    return (message(lambda: engine.make_study(engine.load_table(str(path)), y=y, x=x)),
            message(lambda: make_sql_study(str(path), y=y, x=x)))


@pytest.mark.parametrize("content", ["x,y\n1,2\n2,3\n3,4,5\n4,5\n", "", "x,y\n"],
                         ids=["ragged", "empty", "header-only"])
def test_sql_engine_refuses_in_the_memory_engines_words(tmp_path, content):
    path = tmp_path / "t.csv"
    path.write_text(content, encoding="utf-8")
    mem, sql = _both(path)
    assert sql == mem
    if content.startswith("x,y\n1"):
        assert "line 4 has 3 fields, the header 2" in mem


@pytest.mark.parametrize("late", [False, True], ids=["at-start", "after-64KiB"])
def test_sql_engine_reads_latin1_files_as_the_memory_engine_does(tmp_path, late):
    pytest.importorskip("duckdb")
    from bendwise.engine.backends.duckdb import make_sql_study

    rng = np.random.default_rng(5)
    n = 6000 if late else 30
    x = np.tile(np.arange(5.0), n // 5)
    y = 3.0 + 0.5 * x + rng.normal(0, 0.1, x.size)
    site = np.where(np.arange(x.size) < x.size - 3, "Zürich", "Genève")
    lines = ["x,réponse,site"] + [f"{a},{float(b)!r},{c}" for a, b, c in zip(x, y, site, strict=True)]
    path = tmp_path / "l.csv"
    path.write_bytes(("\n".join(lines) + "\n").encode("latin-1"))
    mem = engine.make_study(engine.load_table(str(path)), y="réponse", x="x", covariates=["site"])
    sql = make_sql_study(str(path), y="réponse", x="x", covariates=["site"])
    assert sql.n == mem.n == x.size
    assert sql.covariate("site").levels == mem.covariate("site").levels == ("Genève", "Zürich")
    assert engine.check(sql).lack_of_fit.f == pytest.approx(engine.check(mem).lack_of_fit.f, rel=1e-9)
