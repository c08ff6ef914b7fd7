"""What makes a cleaned table usable for one analysis, shared by every engine.

The in-memory study and the SQL studies clean rows in different places (pandas arrays, a scan),
but they choose the columns and refuse unusable data with the same rules and the same one-line
messages: the response, predictor, covariate and weights columns are found by name (exact, then
case-insensitive) and must be distinct; at least 3 rows must survive cleaning; x and y must vary;
values must have sizes whose sums of squares stay exact; a covariate must vary in the rows used,
and a categorical one must have 2 to ``MAX_CATEGORIES`` categories.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from ..errors import DataError, UsageError
from .cleaning import DropCount
from .columns import resolve_column

__all__ = ["ChosenColumns", "choose_columns", "require_rows", "require_spread", "require_covariate_varies",
           "require_categories", "check_magnitude", "MAX_CATEGORIES", "MAGNITUDE_LIMIT"]

MAX_CATEGORIES = 30
MAGNITUDE_LIMIT = 1e100
"""Values whose size exceeds this (or whose largest size is below its inverse) are refused: sums
of squares of such values overflow or underflow double precision."""


@dataclass(frozen=True, slots=True)
class ChosenColumns:
    """The table's own names of the columns one analysis uses."""

    y: str
    x: str
    covariates: tuple[str, ...]
    weights: str | None


def choose_columns(frame: Any, *, y: str, x: str, covariates: Sequence[str] = (),
                   weights: str | None = None) -> ChosenColumns:
    """Find each requested column in ``frame.columns`` and refuse repeats, in one line each."""
    y_col = resolve_column(frame, y, "response column")
    x_col = resolve_column(frame, x, "predictor column")
    if y_col == x_col:
        raise UsageError(f"response and predictor are the same column {y_col!r}; choose two columns")
    cov_cols: list[str] = []
    for name in covariates:
        col = resolve_column(frame, name, "covariate column")
        if col in (y_col, x_col):
            raise UsageError(f"covariate {col!r} is already the response or predictor; drop it from --covariates")
        if col in cov_cols:
            raise UsageError(f"covariate {col!r} is listed twice in --covariates")
        cov_cols.append(col)
    w_col = resolve_column(frame, weights, "weights column") if weights else None
    return ChosenColumns(y_col, x_col, tuple(cov_cols), w_col)


def require_rows(n_used: int, drops: Sequence[DropCount]) -> None:
    """At least 3 rows must survive cleaning; the message lists why the others went."""
    if n_used < 3:
        raise DataError(
            f"only {n_used} usable row(s) after cleaning (need at least 3); "
            + ("; ".join(d.describe() for d in drops) if drops else "add data")
        )


def require_spread(cols: ChosenColumns, x_range: tuple[float, float], y_range: tuple[float, float]) -> None:
    """x needs two settings and y some variation, both of a size whose squares stay exact."""
    (xmin, xmax), (ymin, ymax) = x_range, y_range
    if xmin == xmax:
        raise DataError(
            f"predictor {cols.x!r} has one distinct value ({xmin:g}); a line needs at least 2 settings "
            "(3 or more to test its shape)"
        )
    if ymin == ymax:
        raise DataError(f"response {cols.y!r} is constant (all {ymin:g}); there is nothing to fit")
    check_magnitude(ymin, ymax, cols.y, "response")
    check_magnitude(xmin, xmax, cols.x, "predictor")


def require_covariate_varies(column: str, constant: float | None) -> None:
    """A numeric covariate with one value in the rows used (``constant``) explains nothing."""
    if constant is not None:
        raise DataError(
            f"covariate {column!r} has one value ({constant:g}) in the rows used; it cannot explain "
            "anything: drop it from --covariates"
        )


def require_categories(column: str, labels: Sequence[str]) -> None:
    """A categorical covariate needs 2 to ``MAX_CATEGORIES`` categories in the rows used."""
    if len(labels) < 2:
        raise DataError(
            f"covariate {column!r} has one category ({str(labels[0])!r}) in the rows used; it cannot explain "
            "anything: drop it from --covariates"
        )
    if len(labels) > MAX_CATEGORIES:
        raise DataError(
            f"covariate {column!r} has {len(labels)} categories (at most {MAX_CATEGORIES}); is it an "
            "identifier? Drop it or merge categories"
        )


def check_magnitude(lo: float, hi: float, column: str, role: str) -> None:
    """Refuse a column whose values are too large or too small in size for exact sums of squares."""
    big = max(abs(float(lo)), abs(float(hi)))
    if big > MAGNITUDE_LIMIT or 0 < big < 1 / MAGNITUDE_LIMIT:
        size = "as large as" if big > 1 else "no larger than"
        raise DataError(
            f"{role} column {column!r} has values {size} {big:.3g} in size; bendwise needs sizes between "
            f"{1 / MAGNITUDE_LIMIT:g} and {MAGNITUDE_LIMIT:g} so that its sums of squares stay exact: "
            "rescale the column (e.g. change its units) and run again"
        )
