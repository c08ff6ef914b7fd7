"""The files behind a data argument (a file, a folder or a glob), their digest, and how a
table was read.
"""

from __future__ import annotations

import hashlib
import os
from pathlib import Path
from typing import Any

from ..errors import DataError

__all__ = ["data_files", "file_digest", "describe_reading"]


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


def file_digest(path: str | Path) -> tuple[str, int]:
    """SHA-256 (hex) and size in bytes of a file, read in chunks. For a folder or glob: the
    SHA-256 of each file's relative name and digest in turn (sorted), and the total size."""
    files = data_files(path)
    if len(files) > 1 or Path(path).is_dir():
        root = Path(path) if Path(path).is_dir() else Path(os.path.commonpath([str(f.parent) for f in files]))
        outer = hashlib.sha256()
        total = 0
        for f in files:
            sha, size = _one_file_digest(f)
            outer.update(f"{f.relative_to(root).as_posix()}\0{sha}\0".encode())
            total += size
        return outer.hexdigest(), total
    return _one_file_digest(files[0])


def _one_file_digest(path: str | Path) -> tuple[str, int]:
    """SHA-256 (hex) and size in bytes of one file."""
    h = hashlib.sha256()
    size = 0
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
            size += len(chunk)
    return h.hexdigest(), size


def describe_reading(path: str | Path | None, *, delimiter: str | None = None, decimal: str | None = None,
                     sheet: str | None = None) -> dict[str, Any]:
    """How the table was read (format, delimiter, decimal mark, sheet), as ``load_table`` reads it."""
    from .tables import _EXCEL_SUFFIXES, _JSONL_SUFFIXES, _PARQUET_SUFFIXES, _sniff_delimiter

    dec = decimal or "."
    if delimiter in {"\\t", "tab", "TAB"}:
        delimiter = "\t"
    out: dict[str, Any] = {"format": "text", "delimiter": delimiter, "decimal": dec, "sheet": None}
    if path is None:
        return out
    path = data_files(path)[0]  # a folder or glob is read as its first file is
    suffix = Path(path).suffix.lower()
    if suffix in _PARQUET_SUFFIXES:
        return {"format": "parquet", "delimiter": None, "decimal": dec, "sheet": None}
    if suffix in _EXCEL_SUFFIXES:
        return {"format": "excel", "delimiter": None, "decimal": dec, "sheet": sheet}
    if suffix in _JSONL_SUFFIXES:
        with open(path, "rb") as fh:
            first = fh.read(4096).lstrip(b"\xef\xbb\xbf \t\r\n")[:1]
        return {"format": "json" if first == b"[" else "jsonl", "delimiter": None, "decimal": dec, "sheet": None}
    if delimiter is None:
        with open(path, "rb") as fh:
            head = fh.read(65536)
        try:
            sample = head.decode("utf-8-sig")
        except UnicodeDecodeError:
            sample = head.decode("latin-1")
        out["delimiter"] = _sniff_delimiter(sample, dec)
    return out
