"""Column summaries and replicate previews of a table, for choosing columns (no UI imports)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    import pandas as pd

__all__ = ["ColumnSummary", "ReplicatePreview", "describe_columns", "replicate_preview"]


@dataclass(frozen=True, slots=True)
class ColumnSummary:
    """One column of a table, as seen before any column is chosen."""

    name: str
    """Column name as in the file."""
    kind: str
    """'numeric' (every non-missing value parses as a number) or 'text'."""
    distinct: int
    """Distinct non-missing values."""
    missing: int
    """Missing or blank cells."""
    non_numeric: int
    """Non-missing cells that are not numbers (0 for 'text' columns by convention)."""


@dataclass(frozen=True, slots=True)
class ReplicatePreview:
    """How a candidate predictor groups the rows into replicated settings."""

    column: str
    """The candidate predictor."""
    rows: int
    """Rows with a usable (numeric, finite) value."""
    levels: int
    """Distinct settings."""
    replicated_levels: int
    """Settings measured more than once."""
    min_replicates: int
    """Fewest rows at one setting (0 when there are no usable rows)."""
    max_replicates: int
    """Most rows at one setting."""
    counts: tuple[tuple[float, int], ...]
    """(setting, rows) for the first ``max_levels`` settings in increasing order."""
    more_levels: int
    """Settings not listed in ``counts``."""
    testable: bool
    """True when at least one setting is replicated and there are ≥ 3 settings."""
    note: str
    """The structure in words (what it allows)."""


def describe_columns(frame: pd.DataFrame) -> tuple[ColumnSummary, ...]:
    """Type, distinct values and missing count of every column (one pass per column)."""
    from .columns import numeric_column

    out = []
    for name in frame.columns:
        series = frame[name]
        arr, missing, non_num, _ = numeric_column(series, str(name))
        n_missing = int(missing.sum())
        n_bad = int(non_num.sum())
        usable = len(series) - n_missing
        if usable > 0 and n_bad == 0:
            kind = "numeric"
            vals = arr[~missing]
            distinct = int(np.unique(vals[np.isfinite(vals)]).size + (~np.isfinite(vals)).any())
        else:
            kind = "text"
            distinct = int(series[~missing].astype("string").str.strip().nunique())
            n_bad = 0
        out.append(ColumnSummary(str(name), kind, distinct, n_missing, n_bad))
    return tuple(out)


def replicate_preview(frame: pd.DataFrame, column: str, max_levels: int = 12) -> ReplicatePreview:
    """Levels of ``column`` and the rows at each, to see whether pure error exists."""
    from .columns import numeric_column

    arr, *_ = numeric_column(frame[column], column)
    vals = arr[np.isfinite(arr)]
    if vals.size == 0:
        return ReplicatePreview(column, 0, 0, 0, 0, 0, (), 0, False, "no numeric values: cannot be the predictor")
    uniq, counts = np.unique(vals, return_counts=True)
    c = int(uniq.size)
    replicated = int((counts > 1).sum())
    lo, hi = int(counts.min()), int(counts.max())
    shown = tuple((float(u), int(k)) for u, k in zip(uniq[:max_levels], counts[:max_levels], strict=True))
    testable = replicated > 0 and c >= 3
    if c < 2:
        note = "one setting only: a line needs at least 2 settings"
    elif replicated == 0:
        note = "no setting is repeated: the pure-error test cannot run (group with --tolerance, approximate)"
    elif c < 3:
        note = "2 settings: a line fits exactly through the means; nothing is left to test"
    else:
        reps = f"{lo} replicate(s) each" if lo == hi else f"{lo}–{hi} replicates"
        note = (f"{c} settings, {replicated} replicated ({reps}): lack of fit has {c - 2} and pure error "
                f"{int(vals.size) - c} degrees of freedom")
    return ReplicatePreview(column, int(vals.size), c, replicated, lo, hi, shown, max(c - max_levels, 0), testable, note)
