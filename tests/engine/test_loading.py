"""Reading tables in every supported format, picking columns, and the cleaning report.

Numbers read back are compared exactly (they are short decimals written by the test); row
numbers in the cleaning report count data rows from 1 (the first row after the header).
"""

from __future__ import annotations

import io

import bendwise.engine as engine
import numpy as np
import pandas as pd
import pytest
from bendwise.engine.errors import DataError

X = [0.5, 0.5, 1.5, 1.5, 2.5, 2.5]
Y = [1.25, 1.75, 3.5, 3.0, 5.25, 4.75]


def _expected() -> pd.DataFrame:
    return pd.DataFrame({"dose": X, "signal": Y})


def _assert_table(frame: pd.DataFrame) -> None:
    assert list(frame.columns) == ["dose", "signal"]
    np.testing.assert_array_equal(frame["dose"].to_numpy(float), X)
    np.testing.assert_array_equal(frame["signal"].to_numpy(float), Y)
    study = engine.make_study(frame, y="signal", x="dose")
    assert (study.n, study.c) == (6, 3)


def _text(sep: str, decimal: str = ".") -> str:
    lines = [f"dose{sep}signal"]
    for x, y in zip(X, Y, strict=True):
        lines.append(f"{x}{sep}{y}".replace(".", decimal) if decimal != "." else f"{x}{sep}{y}")
    return "\n".join(lines) + "\n"


@pytest.mark.parametrize(
    ("suffix", "sep"),
    [(".csv", ","), (".tsv", "\t"), (".txt", "|"), (".csv", ";"), (".dat", "\t")],
    ids=["comma", "tab", "pipe", "semicolon", "tab-dat"],
)
def test_text_delimiters_are_detected(tmp_path, suffix, sep):
    path = tmp_path / f"table{suffix}"
    path.write_text(_text(sep))
    _assert_table(engine.load_table(path))


def test_semicolon_with_decimal_comma(tmp_path):
    path = tmp_path / "european.csv"
    path.write_text(_text(";", decimal=","))
    assert "0,5;1,25" in path.read_text()
    _assert_table(engine.load_table(path, decimal=","))


def test_explicit_delimiter(tmp_path):
    path = tmp_path / "odd.txt"
    path.write_text(_text(":"))
    _assert_table(engine.load_table(path, delimiter=":"))


def test_parquet(tmp_path):
    pytest.importorskip("pyarrow")
    path = tmp_path / "table.parquet"
    _expected().to_parquet(path)
    _assert_table(engine.load_table(path))


def test_excel_first_and_named_sheet(tmp_path):
    pytest.importorskip("openpyxl")
    path = tmp_path / "book.xlsx"
    other = pd.DataFrame({"a": [1, 2, 3], "b": [4, 5, 6]})
    with pd.ExcelWriter(path) as writer:
        _expected().to_excel(writer, sheet_name="runs", index=False)
        other.to_excel(writer, sheet_name="notes", index=False)
    _assert_table(engine.load_table(path))  # the first sheet by default
    _assert_table(engine.load_table(path, sheet="runs"))
    notes = engine.load_table(path, sheet="notes")
    assert list(notes.columns) == ["a", "b"]
    with pytest.raises(DataError, match="no sheet named 'missing'"):
        engine.load_table(path, sheet="missing")


@pytest.mark.parametrize("suffix", [".jsonl", ".ndjson"])
def test_json_lines(tmp_path, suffix):
    path = tmp_path / f"table{suffix}"
    _expected().to_json(path, orient="records", lines=True)
    assert path.read_text().count("\n") >= 6
    _assert_table(engine.load_table(path))


@pytest.mark.parametrize("sep", [",", "\t", ";"])
def test_standard_input(monkeypatch, sep):
    monkeypatch.setattr("sys.stdin", io.StringIO(_text(sep)))
    _assert_table(engine.load_table("-"))


def test_empty_standard_input(monkeypatch):
    monkeypatch.setattr("sys.stdin", io.StringIO("  \n"))
    with pytest.raises(DataError, match="standard input is empty"):
        engine.load_table("-")


def test_header_whitespace_is_stripped(tmp_path):
    path = tmp_path / "spaced.csv"
    path.write_text(" dose , signal\n" + "".join(f"{x},{y}\n" for x, y in zip(X, Y, strict=True)))
    _assert_table(engine.load_table(path))


# ----------------------------------------------------------------------------- columns


def test_case_insensitive_column_names():
    study = engine.make_study(_expected(), y="SIGNAL", x="Dose")
    assert (study.y_name, study.x_name) == ("signal", "dose")
    np.testing.assert_array_equal(study.y, Y)


def test_unknown_column_suggests_the_closest():
    with pytest.raises(DataError) as info:
        engine.make_study(_expected(), y="signl", x="dose")
    message = str(info.value)
    assert "'signl'" in message
    assert "did you mean 'signal'?" in message
    assert "\n" not in message


def test_unknown_column_without_a_close_match_lists_the_columns():
    with pytest.raises(DataError) as info:
        engine.make_study(_expected(), y="temperature", x="dose")
    message = str(info.value)
    assert "did you mean" not in message
    assert "dose" in message and "signal" in message


# ----------------------------------------------------------------------------- cleaning report


def test_cleaning_report_counts_and_first_rows(tmp_path):
    # data rows (1-based):        1    2    3     4     5    6    7    8   9   10     11   12
    path = tmp_path / "dirty.csv"
    path.write_text(
        "x,y\n1,2.0\n1,\n2,abc\n2,inf\n3,4\n3,NaN\n4,5\n4,6\n,7\n5,-inf\nfoo,1\n5,3\n"
    )
    study = engine.make_study(engine.load_table(path), y="y", x="x", source="dirty.csv")
    report = study.report
    assert (report.n_read, report.n_used, report.n_dropped) == (12, 5, 7)
    found = {(d.column, d.reason): (d.count, d.rows) for d in report.drops}
    assert found == {
        ("y", "missing"): (2, (2, 6)),
        ("y", "non-numeric"): (1, (3,)),
        ("y", "non-finite"): (2, (4, 10)),
        ("x", "missing"): (1, (9,)),
        ("x", "non-numeric"): (1, (11,)),
    }
    np.testing.assert_array_equal(study.x, [1, 3, 4, 4, 5])
    np.testing.assert_array_equal(study.y, [2, 4, 5, 6, 3])
    lines = report.lines()
    assert len(lines) == 5
    assert any("non-numeric" in line and "'y'" in line and "3" in line for line in lines)
    js = report.as_json()
    assert js["n_dropped"] == 7
    assert sum(d["count"] for d in js["drops"]) == 7


def test_a_row_is_counted_once_under_its_first_problem():
    frame = pd.DataFrame({"x": [np.nan, 1, 1, 2, 2], "y": [np.nan, 1.0, 2.0, 3.0, 5.0]})
    report = engine.make_study(frame, y="y", x="x").report
    assert [(d.column, d.reason, d.count, d.rows) for d in report.drops] == [("y", "missing", 1, (1,))]


def test_report_shows_the_first_five_rows_of_many():
    y = [np.nan if i % 2 == 0 else float(i) for i in range(20)]
    frame = pd.DataFrame({"x": np.repeat([1.0, 2.0, 3.0, 4.0], 5), "y": y})
    report = engine.make_study(frame, y="y", x="x").report
    (drop,) = report.drops
    assert drop.count == 10
    assert drop.rows == (1, 3, 5, 7, 9)
    assert "…" in drop.describe()


def test_non_finite_in_a_numeric_column():
    frame = pd.DataFrame({"x": [1.0, 1.0, 2.0, 2.0, np.inf, -np.inf], "y": [1.0, 2, 3, 4, 5, 6]})
    report = engine.make_study(frame, y="y", x="x").report
    assert [(d.column, d.reason, d.count, d.rows) for d in report.drops] == [
        ("x", "non-finite", 2, (5, 6))
    ]


def test_nothing_dropped_means_an_empty_report():
    report = engine.make_study(_expected(), y="signal", x="dose").report
    assert report.drops == () and report.lines() == [] and report.n_dropped == 0
