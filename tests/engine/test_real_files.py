"""Files as labs export them: decimal commas, comment lines, several sheets, dropped rows on
standard error. Each assumption bendwise makes is said in one line."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import bendwise.engine as engine
import pandas as pd
import pytest
from bendwise.engine.errors import DataError

REPO = Path(__file__).resolve().parents[2]

SEMICOLON_COMMA = "conc;signal;lot\n0,5;1,25;A\n0,5;1,31;A\n1,0;2,40;B\n1,0;2,52;B\n2,0;4,61;A\n2,0;4,70;B\n"


def _cli(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "bendwise.tui.cli", *args], capture_output=True, text=True, cwd=REPO,
                          timeout=120)


def test_a_decimal_comma_in_a_semicolon_file_is_read_and_said(tmp_path):
    path = tmp_path / "export.csv"
    path.write_text(SEMICOLON_COMMA, encoding="utf-8")
    frame = engine.load_table(path)
    assert frame["conc"].tolist() == [0.5, 0.5, 1.0, 1.0, 2.0, 2.0]
    assert frame["signal"].iloc[0] == pytest.approx(1.25)
    notes = frame.attrs["read_notes"]
    assert any("decimal comma" in n and "--decimal ." in n for n in notes), notes


def test_the_decimal_mark_given_wins_over_detection(tmp_path):
    path = tmp_path / "export.csv"
    path.write_text(SEMICOLON_COMMA, encoding="utf-8")
    frame = engine.load_table(path, decimal=".")
    assert frame["conc"].tolist()[0] == "0,5"  # stays text: the user said "."
    assert frame.attrs["read_notes"] == []


@pytest.mark.parametrize("text", [
    "conc;signal;note\n0,5;1,25;a, b\n1,0;2,40;c\n",     # a comma in a word: not only numbers
    "conc;signal\n0,5;1.25\n1,0;2.40\n",                  # points and commas mixed: ambiguous
    "conc,signal\n0.5,1.25\n1.0,2.40\n",                  # comma-delimited: commas separate
])
def test_no_decimal_comma_is_assumed_when_ambiguous(tmp_path, text):
    path = tmp_path / "t.csv"
    path.write_text(text, encoding="utf-8")
    frame = engine.load_table(path)
    assert not any("decimal comma" in n for n in frame.attrs["read_notes"])


def test_comment_lines_at_the_top_are_skipped_and_counted(tmp_path):
    path = tmp_path / "instrument.csv"
    path.write_text("# instrument FX-2 serial 0042\n# exported 2026-11-30\nx,y\n1,2\n1,2.1\n2,3.9\n", encoding="utf-8")
    frame = engine.load_table(path)
    assert list(frame.columns) == ["x", "y"] and len(frame) == 3
    assert frame.attrs["read_notes"] == [f"skipped 2 comment lines at the top of {path} (lines starting with #)"]


def test_comment_lines_on_standard_input_too():
    text = "# from a pipe\nx,y\n1,2\n1,2.2\n2,4\n2,4.1\n3,6\n"
    out = subprocess.run([sys.executable, "-m", "bendwise.tui.cli", "check", "-", "-y", "y", "-x", "x", "--json"],
                         input=text, capture_output=True, text=True, cwd=REPO, timeout=120)
    assert out.returncode == 0, out.stderr
    assert json.loads(out.stdout)["n"] == 5
    assert "skipped 1 comment line at the top" in out.stderr


def _two_sheet_book(path: Path) -> None:
    with pd.ExcelWriter(path) as xw:
        pd.DataFrame({"note": ["instrument log"]}).to_excel(xw, sheet_name="Info", index=False)
        pd.DataFrame({"x": [1, 1, 2, 2, 3, 3], "y": [2.0, 2.1, 4.0, 3.9, 6.1, 6.0]}).to_excel(
            xw, sheet_name="Results", index=False)


def test_a_workbook_with_several_sheets_says_which_was_read(tmp_path):
    book = tmp_path / "run.xlsx"
    _two_sheet_book(book)
    frame = engine.load_table(book, sheet="Results")
    assert "read sheet 'Results'" in frame.attrs["read_notes"][0] and "'Info'" in frame.attrs["read_notes"][0]
    first = engine.load_table(book)
    with pytest.raises(DataError, match=r"other sheets are 'Results' \(choose with --sheet\)"):
        engine.make_study(first, y="y", x="x")


def test_an_unknown_sheet_lists_the_sheets(tmp_path):
    book = tmp_path / "run.xlsx"
    _two_sheet_book(book)
    with pytest.raises(DataError, match=r"no sheet named 'Data'; its sheets are 'Info', 'Results'"):
        engine.load_table(book, sheet="Data")


def test_dropped_rows_are_told_on_standard_error_with_json(tmp_path):
    path = tmp_path / "t.csv"
    path.write_text("x,y\n1,2\n1,oops\n2,4\n2,4.1\n3,6\n3,6.2\n", encoding="utf-8")
    out = _cli("check", str(path), "-y", "y", "-x", "x", "--json")
    assert out.returncode == 0, out.stderr
    json.loads(out.stdout)  # standard output stays pure JSON
    assert "non-numeric 'y'" in out.stderr and "rows 2" in out.stderr


def test_messages_show_categories_as_text_not_python_values():
    frame = pd.DataFrame({"x": [1, 1, 2, 2, 3, 3], "y": [1.0, 1.1, 2.0, 2.1, 3.0, 3.2], "lot": ["D4"] * 6})
    with pytest.raises(DataError) as err:
        engine.make_study(frame, y="y", x="x", covariates=["lot"])
    assert "('D4')" in str(err.value) and "np.str_" not in str(err.value)
