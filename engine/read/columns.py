"""Finding columns by name and reading them as numbers, with every unusable cell counted."""

from __future__ import annotations

import difflib
from typing import TYPE_CHECKING

import numpy as np

from ..errors import DataError

if TYPE_CHECKING:
    import pandas as pd

__all__ = ["NA_TEXT", "resolve_column", "numeric_column", "bad_values_text", "first_rows"]


_SHOW_ROWS = 5


# Text read as a missing value (pandas' default list), for typed files that keep it as text too.
NA_TEXT = ("", "#N/A", "#N/A N/A", "#NA", "-1.#IND", "-1.#QNAN", "-NaN", "-nan", "1.#IND", "1.#QNAN",
           "<NA>", "N/A", "NA", "NULL", "NaN", "None", "n/a", "nan", "null")


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
    others = getattr(frame, "attrs", {}).get("other_sheets") or []
    sheets = f"; the workbook's other sheets are {', '.join(repr(o) for o in others[:8])} (choose with --sheet)" if others else ""
    raise DataError(f"{role} {name!r} not found; {hint}columns are: {listing}{sheets}")


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


def bad_values_text(missing: np.ndarray, non_numeric: np.ndarray, non_finite: np.ndarray) -> str:
    """'2 missing and 1 non-finite value(s)': each kind of unusable cell named as it is (an inf
    is not finite, not missing)."""
    parts = [f"{int(m.sum())} {word}" for m, word in ((missing, "missing"), (non_numeric, "non-numeric"),
                                                      (non_finite, "non-finite")) if m.any()]
    return (", ".join(parts[:-1]) + " and " + parts[-1] if len(parts) > 1 else parts[0]) + " value(s)"


def first_rows(mask: np.ndarray) -> tuple[int, ...]:
    """First few 1-based data-row numbers where ``mask`` is true."""
    idx = np.flatnonzero(mask)[:_SHOW_ROWS]
    return tuple(int(i) + 1 for i in idx)
