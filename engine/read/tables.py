"""Load a table and pick columns, reporting every row that cannot be used.

Formats: CSV/TSV/semicolon/pipe text (delimiter detected), Parquet, Excel, JSON lines,
and ``-`` for standard input. pandas is imported here only, lazily, so that importing
``engine`` stays cheap.
"""

from __future__ import annotations

import csv
import io
import sys
from pathlib import Path
from typing import TYPE_CHECKING

from ..errors import DataError, UsageError

if TYPE_CHECKING:
    import pandas as pd

__all__ = ["load_table", "ragged_message"]

_TEXT_SUFFIXES = {".csv", ".tsv", ".txt", ".dat", ".tab", ""}
_EXCEL_SUFFIXES = {".xlsx", ".xlsm", ".xls"}
_PARQUET_SUFFIXES = {".parquet", ".pq"}
_JSONL_SUFFIXES = {".jsonl", ".ndjson", ".json"}


def _complete_lines(sample: str) -> str:
    """The sample without a last line cut off by the sample size."""
    if sample.endswith(("\n", "\r")):
        return sample
    cut = max(sample.rfind("\n"), sample.rfind("\r"))
    return sample[:cut] if cut > 0 else sample


def _sniff_delimiter(sample: str, decimal: str) -> str:
    candidates = ";\t|" if decimal == "," else ",;\t|"
    text = _complete_lines(sample)
    lines = [ln for ln in text.splitlines()[:50] if ln.strip()]
    if not lines:
        return ","
    # quote-aware first: the separator that splits every record into the same number (> 1) of
    # fields, so a quoted name holding ';' or '|' does not mislead
    best, best_fields = None, 1
    for d in candidates:
        try:
            rows = [r for r in csv.reader(io.StringIO(text), delimiter=d, skipinitialspace=True)
                    if any(c.strip() for c in r)][:50]
        except csv.Error:
            continue
        widths = {len(r) for r in rows}
        if len(widths) == 1 and rows and len(rows[0]) > best_fields:
            best, best_fields = d, len(rows[0])
    if best is not None:
        return best
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


_EXCEL_ZIP = b"PK\x03\x04"
_EXCEL_OLE = b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1"
_BOMS = ((b"\xff\xfe\x00\x00", "UTF-32"), (b"\x00\x00\xfe\xff", "UTF-32"), (b"\xff\xfe", "UTF-16"),
         (b"\xfe\xff", "UTF-16"))


def _sniff_bytes(head: bytes) -> str:
    """What the first bytes of a table are: 'parquet', 'excel', 'xls', 'utf-16', 'utf-32',
    'binary' or 'text'."""
    if head[:4] == b"PAR1":
        return "parquet"
    if head[:4] == _EXCEL_ZIP:
        return "excel"
    if head[:8] == _EXCEL_OLE:
        return "xls"
    for bom, enc in _BOMS:
        if head.startswith(bom):
            return enc.lower()
    if b"\x00" in head:
        # UTF-16 without a byte-order mark: every other byte of ASCII text is NUL
        if len(head) >= 4 and (head[1::2].count(0) > 0.4 * len(head[1::2])
                               or head[0::2].count(0) > 0.4 * len(head[0::2])):
            return "utf-16"
        return "binary"
    return "text"


def _decode(head: bytes) -> str:
    """Text as ``load_table`` reads it: UTF-8 (a BOM is dropped), else Latin-1."""
    try:
        return head.decode("utf-8-sig")
    except UnicodeDecodeError:
        return head.decode("latin-1")


def _refuse_kind(kind: str, name: str, where: str) -> None:
    """One line for bytes that are not a text table bendwise reads from ``where``."""
    if kind in ("utf-16", "utf-32"):
        raise DataError(f"{name} is {kind.upper()} text; save it as UTF-8 (e.g. 'CSV UTF-8' in a spreadsheet) "
                        f"or convert it: iconv -f {kind.upper()} -t UTF-8")
    if kind == "xls":
        raise DataError(f"{name} is an old Excel (.xls) workbook; save it as .xlsx or CSV")
    if kind in ("parquet", "excel"):
        label = "Parquet" if kind == "parquet" else "an Excel workbook"
        fix = ".parquet" if kind == "parquet" else ".xlsx"
        raise DataError(f"{name} holds {label}, not text; {where}give it the {fix} suffix")
    raise DataError(f"{name} looks binary, not a text table; save it as CSV, or use a .parquet/.xlsx suffix")


def _stdin_bytes() -> bytes:
    """Standard input as bytes (a text stream without a buffer is encoded back as UTF-8)."""
    stream = sys.stdin
    buf = getattr(stream, "buffer", None)
    if buf is not None:
        return buf.read()
    return stream.read().encode("utf-8", "surrogateescape")


def load_table(
    source: str | Path,
    *,
    sheet: str | None = None,
    decimal: str | None = None,
    delimiter: str | None = None,
) -> pd.DataFrame:
    """Read a table from a file (or ``-`` for stdin) into a DataFrame.

    Text files get their delimiter detected (comma, semicolon, tab, pipe); ``decimal=','``
    reads numbers written as 1,25, and with ``decimal=None`` a decimal comma is assumed when it is
    unambiguous (a non-comma delimiter, every comma inside a number, no number with a point).
    Lines starting with ``#`` at the top are skipped as comments. What was assumed (decimal mark,
    skipped lines, which Excel sheet was read) is listed in ``frame.attrs["read_notes"]``. Standard input is recognised by its bytes (Parquet, Excel,
    JSON lines or a JSON array, else text). Errors are :class:`DataError` with one line naming
    the file and what to do; a header that names one column twice is refused.
    """
    if decimal not in {None, ".", ","}:
        raise UsageError(f"decimal mark {decimal!r} is not supported; use '.' or ','")
    name = str(source)
    notes: list[str] = []
    if name == "-":
        frame, header = _read_stdin(sheet, decimal, delimiter, notes)
        name = "standard input"
    else:
        frame, header = _read_path(name, sheet, decimal, delimiter, notes)
    if frame.shape[0] == 0:
        raise DataError(f"{name} has no data rows; check the file")
    _refuse_duplicate_names(name, header if header is not None and len(header) == frame.shape[1]
                            else [str(c) for c in frame.columns])
    frame.columns = [str(c).strip() for c in frame.columns]
    frame.attrs["read_notes"] = notes
    return frame


def _refuse_duplicate_names(name: str, header: list[str]) -> None:
    """A header that names one column twice cannot be read by name: say which, and where."""
    seen: dict[str, list[int]] = {}
    for i, col in enumerate(header):
        key = str(col).strip()
        if key:
            seen.setdefault(key, []).append(i + 1)
    for col, where in seen.items():
        if len(where) > 1:
            places = ", ".join(str(i) for i in where[:-1]) + f" and {where[-1]}"
            raise DataError(f"{name}: the header names column {col!r} {len(where)} times (columns {places}); "
                            "rename them so every column has its own name")


def _read_stdin(sheet: str | None, dec: str | None, delimiter: str | None,
                notes: list[str]) -> tuple[pd.DataFrame, list[str] | None]:
    import pandas as pd

    name = "standard input"
    raw = _stdin_bytes()
    if not raw.strip():
        raise DataError("standard input is empty; pipe a table into bendwise or give a file")
    kind = _sniff_bytes(raw[:65536])
    if sheet is not None and kind != "excel":
        raise UsageError(f"--sheet applies to Excel workbooks; {name} is not one: drop --sheet")
    try:
        if kind == "parquet":
            try:
                return pd.read_parquet(io.BytesIO(raw)), None
            except ImportError:
                raise DataError("reading Parquet needs pyarrow; install it with: pip install 'bendwise[parquet]'") from None
        if kind == "excel":
            return _read_excel(io.BytesIO(raw), name, sheet, notes)
        if kind != "text":
            _refuse_kind(kind, name, "save it to a file and ")
        text = _decode(raw)
        first = text.lstrip()[:1]
        if first in ("{", "["):
            return _read_json(text, name), None
        return _text_table(io.StringIO(text), text[:65536], name, dec, delimiter, notes)
    except DataError:
        raise
    except Exception as exc:  # noqa: BLE001 - readers raise many types; the user needs one line
        raise _unreadable(name, exc) from None


def _read_path(name: str, sheet: str | None, dec: str | None, delimiter: str | None,
               notes: list[str]) -> tuple[pd.DataFrame, list[str] | None]:
    import pandas as pd

    path = Path(name)
    if not path.exists():
        raise DataError(f"file not found: {name}; check the path")
    if path.is_dir():
        raise DataError(f"{name} is a folder; give a table file (CSV, TSV, Parquet, Excel or JSON lines)")
    suffix = path.suffix.lower()
    if sheet is not None and suffix not in _EXCEL_SUFFIXES:
        raise UsageError(f"--sheet applies to Excel workbooks (.xlsx, .xlsm, .xls); {name} is not one: drop --sheet")
    try:
        if suffix in _PARQUET_SUFFIXES:
            try:
                return pd.read_parquet(path), None
            except ImportError:
                raise DataError(
                    "reading Parquet needs pyarrow; install it with: pip install 'bendwise[parquet]'"
                ) from None
        if suffix in _EXCEL_SUFFIXES:
            return _read_excel(path, name, sheet, notes)
        if suffix in _JSONL_SUFFIXES:
            return _read_json(_decode(path.read_bytes()), name), None
        with open(path, "rb") as fh:
            head = fh.read(65536)
        kind = _sniff_bytes(head)
        if kind != "text":
            _refuse_kind(kind, name, "")
        return _text_table(path, _decode(head), name, dec, delimiter, notes)
    except DataError:
        raise
    except Exception as exc:  # noqa: BLE001 - readers raise many types; the user needs one line
        raise _unreadable(name, exc) from None


def _unreadable(name: str, exc: Exception) -> DataError:
    text = str(exc).strip()
    first = text.splitlines()[0] if text else ""
    kind = type(exc).__name__
    return DataError(f"cannot read {name} ({kind}{': ' + first if first else ''}); check the file format")


def _read_excel(src, name: str, sheet: str | None, notes: list[str]) -> tuple[pd.DataFrame, list[str] | None]:
    import pandas as pd

    try:
        book = pd.ExcelFile(src)
    except ImportError:
        raise DataError("reading Excel needs openpyxl; install it with: pip install 'bendwise[excel]'") from None
    sheets = [str(n) for n in book.sheet_names]
    if sheet is not None and sheet not in sheets:
        raise DataError(f"{name}: no sheet named {sheet!r}; its sheets are {_quoted(sheets)}: check --sheet")
    chosen = sheet if sheet is not None else sheets[0]
    if len(sheets) > 1:
        others = [n for n in sheets if n != chosen]
        notes.append(f"read sheet {chosen!r} of {name}; other sheets: {_quoted(others)} (choose with --sheet)")
    frame = book.parse(chosen)
    head = book.parse(chosen, header=None, nrows=1)
    header = None if head.shape[0] == 0 else ["" if pd.isna(v) else str(v) for v in head.iloc[0].tolist()]
    frame.attrs["other_sheets"] = [n for n in sheets if n != chosen]
    return frame, header


def _quoted(names: list[str]) -> str:
    shown = ", ".join(repr(n) for n in names[:8])
    return shown + (", …" if len(names) > 8 else "")


def _comment_lines(sample: str) -> int:
    """How many lines at the top are comments (start with '#') or blank before the first one."""
    k = 0
    for line in _complete_lines(sample).splitlines():
        if line.lstrip().startswith("#") or (not line.strip() and k):
            k += 1
        else:
            break
    return k


def _decimal_comma(sample: str, sep: str) -> bool:
    """True when a decimal comma is the only reading of the sample: the delimiter is not a comma,
    some field is a number written with one comma (1,25), no field is a number with a point,
    and no other field holds a comma."""
    import re

    if sep == ",":
        return False
    comma = re.compile(r"^[+-]?\d+,\d+([eE][+-]?\d+)?$")
    point = re.compile(r"^[+-]?(\d+\.\d*|\.\d+)([eE][+-]?\d+)?$")
    rows = list(csv.reader(io.StringIO(_complete_lines(sample)), delimiter=sep, skipinitialspace=True))[1:]
    fields = [c.strip() for r in rows for c in r]
    n_comma = sum(bool(comma.match(c)) for c in fields)
    if n_comma == 0 or any(point.match(c) for c in fields):
        return False
    return all(comma.match(c) or "," not in c for c in fields)


def _text_table(src, sample: str, name: str, dec: str | None, delimiter: str | None,
                notes: list[str]) -> tuple[pd.DataFrame, list[str] | None]:
    """Read a text table: skip comment lines at the top, find the delimiter, and assume a decimal
    comma only when ``dec`` is None and nothing else can be meant (saying so in ``notes``)."""
    skip = _comment_lines(sample)
    body = "\n".join(_complete_lines(sample).splitlines()[skip:]) + "\n"
    if skip:
        notes.append(f"skipped {skip} comment line{'s' if skip != 1 else ''} at the top of {name} (lines starting with #)")
    sep = delimiter or _sniff_delimiter(body, dec or ".")
    if dec is None:
        dec = "."
        if _decimal_comma(body, sep):
            dec = ","
            notes.append(f"read numbers such as 1,25 in {name} as 1.25 (decimal comma, {_SEP_NAMES.get(sep, repr(sep))}-separated); "
                         "give --decimal . if the commas mean something else")
    return _read_text(src, name, dec, sep, skip), _text_header(body, sep)


_SEP_NAMES = {";": "semicolon", "\t": "tab", "|": "pipe", ",": "comma"}


def _text_header(sample: str, sep: str) -> list[str] | None:
    """The first record of a text table as written (pandas renames a repeated name 'y.1')."""
    try:
        row = next(csv.reader(io.StringIO(sample), delimiter=sep, skipinitialspace=True), None)
    except csv.Error:
        return None
    return None if row is None else [c.strip() for c in row]


def _read_json(text: str, name: str) -> pd.DataFrame:
    """JSON lines (one object per line) or one JSON array of objects."""
    import json

    import pandas as pd

    if text.lstrip().startswith("["):
        try:
            doc = json.loads(text)
        except json.JSONDecodeError as exc:
            raise DataError(f"{name} is not valid JSON (line {exc.lineno}, column {exc.colno}: {exc.msg}); "
                            "fix the file, or write one JSON object per line (JSON lines)") from None
        bad = next((i for i, r in enumerate(doc) if not isinstance(r, dict)), None) if isinstance(doc, list) else 0
        if bad is not None:
            raise DataError(f"{name} is a JSON array whose item {bad + 1} is not an object; give an array of "
                            "objects, one per row, or JSON lines (one object per line)")
        return pd.read_json(io.StringIO(text), orient="records")
    lines = text.splitlines()
    for i, line in enumerate(lines, start=1):
        if not line.strip():
            continue
        try:
            obj = json.loads(line)
        except json.JSONDecodeError as exc:
            raise DataError(f"{name} line {i} is not valid JSON ({exc.msg} at column {exc.colno}); each line "
                            "must hold one JSON object") from None
        if not isinstance(obj, dict):
            raise DataError(f"{name} line {i} holds a JSON {type(obj).__name__}, not an object; each line must "
                            "hold one JSON object (or give one JSON array of objects)")
    return pd.read_json(io.StringIO(text), lines=True)


def _read_text(buf, name: str, dec: str, sep: str, skip: int = 0) -> pd.DataFrame:
    import pandas as pd

    try:
        return pd.read_csv(buf, sep=sep, decimal=dec, encoding="utf-8-sig" if not isinstance(buf, io.StringIO) else None,
                           skipinitialspace=True, skiprows=skip)
    except UnicodeDecodeError:
        return pd.read_csv(buf, sep=sep, decimal=dec, encoding="latin-1", skipinitialspace=True, skiprows=skip)
    except pd.errors.EmptyDataError:
        raise DataError(f"{name} is empty; check the file") from None
    except pd.errors.ParserError as exc:
        raise DataError(ragged_message(name, str(exc))) from None


def ragged_message(name: str, detail: str) -> str:
    """The one line for a text table whose rows do not split into the header's fields."""
    import re

    m = re.search(r"Expected (\d+) fields in line (\d+), saw (\d+)", detail)
    if m:
        want, line, saw = m.groups()
        return (f"cannot parse {name} as a table: line {line} has {saw} fields, the header {want}; "
                "check the delimiter with --delimiter, or that line")
    first = detail.strip().splitlines()[0] if detail.strip() else ""
    return f"cannot parse {name} as a table ({first}); check the delimiter with --delimiter"


