"""Load a table and pick columns, reporting every row that cannot be used.

Formats: CSV/TSV/semicolon/pipe text (delimiter detected), Parquet, Excel, JSON lines,
and ``-`` for standard input. pandas is imported here only, lazily, so that importing
``engine`` stays cheap.
"""

from __future__ import annotations

import csv
import difflib
import io
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from .errors import DataError, UsageError

if TYPE_CHECKING:
    import pandas as pd

__all__ = ["load_table", "resolve_column", "DropCount", "CleaningReport", "numeric_column"]

_TEXT_SUFFIXES = {".csv", ".tsv", ".txt", ".dat", ".tab", ""}
_EXCEL_SUFFIXES = {".xlsx", ".xlsm", ".xls"}
_PARQUET_SUFFIXES = {".parquet", ".pq"}
_JSONL_SUFFIXES = {".jsonl", ".ndjson", ".json"}
_SHOW_ROWS = 5
# Text read as a missing value (pandas' default list), for typed files that keep it as text too.
NA_TEXT = ("", "#N/A", "#N/A N/A", "#NA", "-1.#IND", "-1.#QNAN", "-NaN", "-nan", "1.#IND", "1.#QNAN",
           "<NA>", "N/A", "NA", "NULL", "NaN", "None", "n/a", "nan", "null")


@dataclass(frozen=True, slots=True)
class DropCount:
    """Rows dropped for one reason in one column."""

    column: str
    """Column whose value was unusable."""
    reason: str
    """'missing', 'non-numeric', 'non-finite', 'weight not positive'."""
    count: int
    """How many rows."""
    rows: tuple[int, ...]
    """First few data-row numbers (1 = first row after the header)."""

    def describe(self) -> str:
        """One line for reports."""
        if not self.rows:
            return f"{self.count} row(s) with {self.reason} {self.column!r}"
        shown = ", ".join(str(r) for r in self.rows)
        more = ", …" if self.count > len(self.rows) else ""
        return f"{self.count} row(s) with {self.reason} {self.column!r} (rows {shown}{more})"


@dataclass(frozen=True, slots=True)
class CleaningReport:
    """What was read and what was dropped, and why. Nothing is dropped silently."""

    source: str
    """File name (or '<stdin>')."""
    n_read: int
    """Data rows read."""
    n_used: int
    """Rows kept for the analysis."""
    drops: tuple[DropCount, ...]
    """Each reason rows were dropped (a row is counted once, under its first problem)."""

    @property
    def n_dropped(self) -> int:
        """Rows not used."""
        return self.n_read - self.n_used

    def lines(self) -> list[str]:
        """Human lines, empty when nothing was dropped."""
        return [d.describe() for d in self.drops]

    def as_json(self) -> dict:
        """JSON shape."""
        return {
            "source": self.source,
            "n_read": self.n_read,
            "n_used": self.n_used,
            "n_dropped": self.n_dropped,
            "drops": [
                {"column": d.column, "reason": d.reason, "count": d.count, "rows": list(d.rows)}
                for d in self.drops
            ],
        }


def _sniff_delimiter(sample: str, decimal: str) -> str:
    candidates = ";\t|" if decimal == "," else ",;\t|"
    lines = [ln for ln in sample.splitlines()[:50] if ln.strip()]
    if not lines:
        return ","
    try:
        return csv.Sniffer().sniff("\n".join(lines), delimiters=candidates).delimiter
    except csv.Error:
        pass
    best, best_score = ",", -1
    for d in candidates:
        counts = [ln.count(d) for ln in lines]
        if counts[0] and len(set(counts)) == 1 and counts[0] > best_score:
            best, best_score = d, counts[0]
    if best_score < 0:
        # no consistent delimiter: a single column (or a ragged file pandas will name)
        return candidates[0] if decimal != "," else ";"
    return best


def load_table(
    source: str | Path,
    *,
    sheet: str | None = None,
    decimal: str | None = None,
    delimiter: str | None = None,
) -> pd.DataFrame:
    """Read a table from a file (or ``-`` for stdin) into a DataFrame.

    Text files get their delimiter detected (comma, semicolon, tab, pipe); ``decimal=','``
    reads numbers written as 1,25. Errors are :class:`DataError` with one line naming the
    file and what to do.
    """
    import pandas as pd

    dec = decimal or "."
    if dec not in {".", ","}:
        raise UsageError(f"decimal mark {decimal!r} is not supported; use '.' or ','")
    name = str(source)
    if name == "-":
        text = sys.stdin.read()
        if not text.strip():
            raise DataError("standard input is empty; pipe a table into bendwise or give a file")
        return _read_text(io.StringIO(text), "<stdin>", dec, delimiter or _sniff_delimiter(text[:65536], dec))
    path = Path(name)
    if not path.exists():
        raise DataError(f"file not found: {name}; check the path")
    if path.is_dir():
        raise DataError(f"{name} is a folder; give a table file (CSV, TSV, Parquet, Excel or JSON lines)")
    suffix = path.suffix.lower()
    try:
        if suffix in _PARQUET_SUFFIXES:
            try:
                frame = pd.read_parquet(path)
            except ImportError:
                raise DataError(
                    "reading Parquet needs pyarrow; install it with: pip install 'bendwise[parquet]'"
                ) from None
        elif suffix in _EXCEL_SUFFIXES:
            try:
                frame = pd.read_excel(path, sheet_name=sheet if sheet is not None else 0)
            except ImportError:
                raise DataError(
                    "reading Excel needs openpyxl; install it with: pip install 'bendwise[excel]'"
                ) from None
            except ValueError as exc:
                if sheet is not None and "not found" in str(exc).lower():
                    raise DataError(f"{name}: no sheet named {sheet!r}; check --sheet") from None
                raise
        elif suffix in _JSONL_SUFFIXES:
            frame = pd.read_json(path, lines=True)
        else:
            with open(path, "rb") as fh:
                head = fh.read(65536)
            if b"\x00" in head:
                raise DataError(
                    f"{name} looks binary, not a text table; save it as CSV, or use a .parquet/.xlsx suffix"
                )
            try:
                sample = head.decode("utf-8-sig")
            except UnicodeDecodeError:
                sample = head.decode("latin-1")
            sep = delimiter or _sniff_delimiter(sample, dec)
            frame = _read_text(path, name, dec, sep)
    except DataError:
        raise
    except Exception as exc:  # noqa: BLE001 - readers raise many types; the user needs one line
        text = str(exc).strip()
        first = text.splitlines()[0] if text else ""
        kind = type(exc).__name__
        raise DataError(f"cannot read {name} ({kind}{': ' + first if first else ''}); check the file format") from None
    if frame.shape[0] == 0:
        raise DataError(f"{name} has no data rows; check the file")
    frame.columns = [str(c).strip() for c in frame.columns]
    return frame


def _read_text(buf, name: str, dec: str, sep: str) -> pd.DataFrame:
    import pandas as pd

    try:
        return pd.read_csv(buf, sep=sep, decimal=dec, encoding="utf-8-sig" if not isinstance(buf, io.StringIO) else None, skipinitialspace=True)
    except UnicodeDecodeError:
        return pd.read_csv(buf, sep=sep, decimal=dec, encoding="latin-1", skipinitialspace=True)
    except pd.errors.EmptyDataError:
        raise DataError(f"{name} is empty; check the file") from None
    except pd.errors.ParserError as exc:
        first = str(exc).strip().splitlines()[0]
        raise DataError(f"cannot parse {name} as a table ({first}); check the delimiter with --delimiter") from None


def resolve_column(frame: pd.DataFrame, name: str, role: str = "column") -> str:
    """Find ``name`` among the columns: exact, then case-insensitive; else suggest."""
    cols = [str(c) for c in frame.columns]
    if name in cols:
        return name
    folded = {c.casefold().strip(): c for c in cols}
    key = name.casefold().strip()
    if key in folded:
        return folded[key]
    close = difflib.get_close_matches(key, list(folded), n=1, cutoff=0.6)
    hint = f"did you mean {folded[close[0]]!r}? " if close else ""
    listing = ", ".join(cols[:12]) + (", …" if len(cols) > 12 else "")
    raise DataError(f"{role} {name!r} not found; {hint}columns are: {listing}")


def numeric_column(values, column: str) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Coerce a column to float. Returns (values, missing, non_numeric, non_finite) masks."""
    import pandas as pd

    series = values if isinstance(values, pd.Series) else pd.Series(values)
    missing = series.isna().to_numpy()
    if pd.api.types.is_bool_dtype(series.dtype):
        series = series.astype(float)
    if series.dtype == np.float64:
        arr = series.to_numpy()  # no copy: the frame's own buffer (never written to)
        non_numeric = np.zeros(arr.shape, dtype=bool)
    elif pd.api.types.is_numeric_dtype(series.dtype):
        arr = series.to_numpy(dtype=float, na_value=np.nan)
        non_numeric = np.zeros(arr.shape, dtype=bool)
    else:
        text = series.astype("string").str.strip()
        missing = missing | text.isin(NA_TEXT).fillna(False).to_numpy(dtype=bool)
        coerced = pd.to_numeric(text.where(text != ""), errors="coerce")
        arr = coerced.to_numpy(dtype=float, na_value=np.nan)
        non_numeric = np.isnan(arr) & ~missing
    non_finite = ~np.isfinite(arr) & ~missing & ~non_numeric
    return arr, missing, non_numeric, non_finite


def first_rows(mask: np.ndarray) -> tuple[int, ...]:
    """First few 1-based data-row numbers where ``mask`` is true."""
    idx = np.flatnonzero(mask)[:_SHOW_ROWS]
    return tuple(int(i) + 1 for i in idx)


def data_files(path: str | Path) -> list[Path]:
    """The files behind a data argument: the file itself, a folder's Parquet files (else its CSV
    files, searched below it, sorted) or a glob's matches (sorted). One-line DataError when a
    folder holds none, a glob matches none or a file is missing."""
    import glob

    text = str(path)
    p = Path(text)
    if p.is_dir():
        found = sorted(glob.glob(str(p / "**" / "*.parquet"), recursive=True))
        found = found or sorted(glob.glob(str(p / "**" / "*.csv"), recursive=True))
        if not found:
            raise DataError(f"folder {text} holds no .parquet or .csv files; point at the data files")
        return [Path(f) for f in found]
    if any(ch in text for ch in "*?[") and not p.exists():
        found = sorted(glob.glob(text, recursive=True))
        if not found:
            raise DataError(f"no file matches {text}; check the pattern")
        return [Path(f) for f in found]
    if not p.exists():
        raise DataError(f"file not found: {text}; check the path")
    return [p]
