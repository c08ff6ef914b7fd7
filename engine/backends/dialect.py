"""What differs between the SQL engines the study runs on, in one place.

The queries themselves (the one-scan power sums, the exact per-transform aggregates, the
cleaning counts) are written once in :mod:`engine.backends.duckdb`; every spot where DuckDB and
Spark SQL spell something differently asks a :class:`Dialect`: how an identifier and a string
literal are quoted, the text type of a cast, the infinity test, a seeded row sample, which
column types are numbers, and how a small table of ours (group centres, x levels) is handed to
the engine.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

__all__ = ["Dialect", "DUCKDB", "SPARK"]


def _double_quote(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'


def _backtick(name: str) -> str:
    return "`" + name.replace("`", "``") + "`"


def _standard_literal(text: str) -> str:
    return "'" + text.replace("'", "''") + "'"


def _backslash_literal(text: str) -> str:
    # Spark SQL reads backslash escapes inside '…' and joins adjacent literals ('a' 'b' is 'ab'),
    # so a doubled quote would silently lose a character: escape the backslash and the quote
    return "'" + text.replace("\\", "\\\\").replace("'", "\\'") + "'"


def _duckdb_put(con: Any, name: str, data: dict) -> None:
    con.register(f"{name}_src", data)
    con.execute(f"CREATE OR REPLACE TEMP TABLE {name} AS SELECT * FROM {name}_src")
    con.unregister(f"{name}_src")


def _spark_put(con: Any, name: str, data: dict) -> None:
    con.register(name, data)


_DUCKDB_NUMBERS = ("DOUBLE", "FLOAT", "INTEGER", "BIGINT", "SMALLINT", "TINYINT", "DECIMAL", "HUGEINT",
                   "UBIGINT", "UINTEGER", "USMALLINT", "UTINYINT", "REAL")
_SPARK_NUMBERS = ("DOUBLE", "FLOAT", "INT", "BIGINT", "SMALLINT", "TINYINT", "DECIMAL", "LONG", "SHORT", "BYTE")


@dataclass(frozen=True)
class Dialect:
    """The spellings of one SQL engine (see the module notes)."""

    name: str
    quote: Callable[[str], str]
    """Quote an identifier (always used, whatever the name)."""
    literal: Callable[[str], str]
    """Quote a string literal."""
    text_type: str
    """The type name of text in a CAST."""
    numbers: tuple[str, ...]
    """Upper-case column type names (or their starts) that hold numbers."""
    put: Callable[[Any, str, dict], None]
    """Hand a small table of ours (column name → numpy array) to the engine under a name."""
    drop: str
    """Statement prefix that drops such a table."""

    def isinf(self, expr: str) -> str:
        """True when the double ``expr`` is ±infinity."""
        if self.name == "spark":
            return f"(ABS({expr}) = CAST('Infinity' AS DOUBLE))"
        return f"isinf({expr})"

    def to_double(self, expr: str) -> str:
        """``expr`` (text) as a double, NULL when it is not a number."""
        if self.name == "spark":  # ANSI mode is off in our session: a failed CAST gives NULL
            return f"CAST({expr} AS DOUBLE)"
        return f"TRY_CAST({expr} AS DOUBLE)"

    def sample(self, select: str, k: int, seed: int) -> str:
        """``select`` (SELECT … FROM table) cut to a seeded random sample of ``k`` rows."""
        if self.name == "spark":
            return f"{select} ORDER BY rand({int(seed)}) LIMIT {int(k)}"
        return f"{select} USING SAMPLE reservoir({int(k)} ROWS) REPEATABLE ({int(seed)})"

    def row_number(self) -> str:
        """The 1-based number of each row, files taken in the order of their names as the in-memory
        reader concatenates them (only for naming the first bad rows)."""
        if self.name == "spark":  # ids grow with the partition, and a file's splits keep its order
            return "row_number() OVER (ORDER BY input_file_name(), monotonically_increasing_id())"
        return "row_number() OVER ()"

    def is_number_type(self, type_name: str) -> bool:
        """Whether a column of this declared type holds numbers."""
        t = type_name.upper()
        return t.startswith(self.numbers) and not t.startswith("INTERVAL")


DUCKDB = Dialect("duckdb", _double_quote, _standard_literal, "VARCHAR", _DUCKDB_NUMBERS, _duckdb_put,
                 "DROP TABLE IF EXISTS")
SPARK = Dialect("spark", _backtick, _backslash_literal, "STRING", _SPARK_NUMBERS, _spark_put,
                "DROP VIEW IF EXISTS")
