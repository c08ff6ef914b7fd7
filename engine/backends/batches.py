"""A table's rows in bounded batches, read by DuckDB or Spark (for ``apply`` on large inputs).

Each batch arrives as Arrow and is handed on as a small pandas frame, so a table larger than
memory is never held whole. Text files come as text columns (as the SQL study reads them) and
are parsed by the same column readers as the in-memory engine; Parquet columns keep their types.
Column names are stripped of surrounding spaces, as :func:`engine.read.tables.load_table` does.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from typing import Any

from ..errors import DataError

__all__ = ["BATCH_ROWS", "table_batches"]

BATCH_ROWS = 65_536
"""Rows per batch: large enough that per-batch overhead vanishes, small enough to stay a few MB."""

ProgressFn = Callable[[str], None]


def table_batches(path: str, engine: str, *, decimal: str | None = None, delimiter: str | None = None,
                  batch_rows: int | None = None, master: str | None = None,
                  progress: ProgressFn | None = None) -> Iterator[Any]:
    """Pandas frames of at most ``batch_rows`` rows, in file order, read by ``engine`` ('duckdb' or
    'spark'; ``batch_rows`` defaults to :data:`BATCH_ROWS`). A table without data rows is refused with the
    memory engine's line."""
    dec = decimal or "."
    batch_rows = batch_rows or BATCH_ROWS
    got = _duckdb_batches(path, dec, delimiter, batch_rows) if engine == "duckdb" else \
        _spark_batches(path, dec, delimiter, batch_rows, master, progress)
    seen = False
    for frame in got:
        if frame.shape[0] == 0:
            continue
        seen = True
        frame.columns = [str(c).strip() for c in frame.columns]
        yield frame
    if progress is not None:
        progress("")  # the progress line is cleared before the rows' report
    if not seen:
        raise DataError(f"{path} has no data rows; check the file")


def _duckdb_batches(path: str, decimal: str, delimiter: str | None, batch_rows: int) -> Iterator[Any]:
    """DuckDB's record batches of ``SELECT *`` over the file, folder or glob."""
    try:
        import duckdb
    except ImportError:
        raise DataError("the SQL engine needs duckdb; install it with: pip install 'bendwise[scale]'") from None
    from .duckdb import _connect, _csv_preflight, _describe, _source_sql

    sep, encoding = _csv_preflight(path, decimal, delimiter)
    con = _connect(None)
    try:
        src, as_text = _source_sql(path, decimal, sep, encoding)
        _describe(con, src, path, as_text)  # a typed file naming a column twice is refused here
        rel = con.sql(f"SELECT * FROM {src}")
        # a relation streams without an extra copy; DuckDB 2.x names its reader to_arrow_reader
        open_reader = getattr(rel, "to_arrow_reader", None) or rel.fetch_arrow_reader
        reader = open_reader(batch_rows)
        for batch in reader:
            yield batch.to_pandas()
    except duckdb.Error as exc:
        raise DataError(_duckdb_message(path, exc, sep, encoding)) from None
    finally:
        con.close()


def _duckdb_message(path: str, exc: BaseException, sep: str | None, encoding: str | None) -> str:
    """One line for a DuckDB read failure: a ragged CSV line as the memory engine names it."""
    from ..read.files import data_files
    from ..read.tables import ragged_message
    from .duckdb import _ragged_line

    text = str(exc).strip()
    files = data_files(path)
    if "csv" in text.lower() and files[0].suffix.lower() not in (".parquet", ".pq"):
        hit = _ragged_line(files, encoding, sep or ";")
        if hit is not None:
            f, line, want, saw = hit
            return ragged_message(path if len(files) == 1 else str(f), f"Expected {want} fields in line {line}, saw {saw}")
    first = text.splitlines()[0] if text else type(exc).__name__
    return f"cannot read {path} ({first}); check the file format"


def _spark_batches(path: str, decimal: str, delimiter: str | None, batch_rows: int, master: str | None,
                   progress: ProgressFn | None) -> Iterator[Any]:
    """Spark's rows streamed to this process one partition at a time, gathered into frames."""
    import pandas as pd

    from ..read.files import data_files
    from .spark import _read, _spark_errors, _spark_message, spark_session

    targets = [path] if "://" in path else [str(f) for f in data_files(path)]  # a missing file: before Spark
    spark = spark_session(master)
    # small input partitions: toLocalIterator hands over one partition at a time, so this bounds
    # what the JVM driver and this process hold at once (a 100 MB CSV is otherwise one partition)
    spark.conf.set("spark.sql.files.maxPartitionBytes", str(16 << 20))
    if progress:
        progress("Spark session started; reading the table")
    # local files one at a time, in the order DuckDB reads them (Spark packs several files into a
    # partition largest first, which would reorder the rows); a URI goes to Spark whole
    try:
        for target in targets:
            frame, _, _, _ = _read(spark, target, decimal, delimiter)
            names = list(frame.columns)
            rows: list[tuple] = []
            for row in frame.toLocalIterator():
                rows.append(tuple(row))
                if len(rows) == batch_rows:
                    yield pd.DataFrame.from_records(rows, columns=names)
                    rows = []
            if rows:
                yield pd.DataFrame.from_records(rows, columns=names)
    except _spark_errors() as exc:
        raise DataError(_spark_message(path, exc, decimal, delimiter)) from None
