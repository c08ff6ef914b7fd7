"""The same group statistics on Apache Spark (``--engine spark``).

The queries are the DuckDB backend's (:func:`engine.backends.duckdb.build_sql_study`), spelled
through :data:`engine.backends.dialect.SPARK`; this module only opens a SparkSession (Spark
Connect from ``SPARK_REMOTE``, or a master URL, ``local[*]`` by default), reads the paths the
user gave as Parquet or CSV, and answers the connection calls the study makes with Spark SQL.
Only group totals come back to this process: the rows stay where Spark reads them.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import sys
import threading
import warnings
from collections.abc import Callable, Iterator, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import DataError
from ..read.files import data_files
from .dialect import SPARK

__all__ = ["make_spark_study", "spark_session", "SparkConnection", "require_spark"]

ProgressFn = Callable[[str], None]

SESSION_CONF = {
    "spark.ui.enabled": "false",
    "spark.ui.showConsoleProgress": "false",
    "spark.sql.shuffle.partitions": "4",
    "spark.sql.ansi.enabled": "false",  # a text cell that is not a number casts to NULL, as TRY_CAST does
    "spark.sql.caseSensitive": "true",  # columns "Dose" and "dose" stay two columns, as in the files
    "spark.sql.execution.arrow.pyspark.enabled": "true",
    "spark.driver.memory": "1g",
}
"""Session settings: few shuffle partitions (the grouped results are small), no web UI."""

_CSV_SUFFIXES = (".csv", ".tsv", ".txt", ".csv.gz", ".tsv.gz")


def _need_pyspark() -> Any:
    try:
        import pyspark.sql
    except ImportError:
        raise DataError("the Spark engine needs pyspark; install it with: pip install 'bendwise[spark]'") from None
    return pyspark.sql


def _need_java() -> None:
    home = os.environ.get("JAVA_HOME")
    if home and Path(home, "bin", "java").exists():
        return
    if shutil.which("java"):
        return
    raise DataError("the Spark engine needs Java 17 or newer and found none (no JAVA_HOME, no java on PATH); "
                    "install a JRE (e.g. apt-get install openjdk-17-jre-headless) or set JAVA_HOME")


def require_spark() -> None:
    """Refuse in one line, before anything starts, when pyspark is missing, or Java is (without
    ``SPARK_REMOTE``: Spark Connect needs no local JVM)."""
    _need_pyspark()
    if not os.environ.get("SPARK_REMOTE"):
        _need_java()


def spark_session(master: str | None = None) -> Any:
    """A fresh SparkSession (its own temporary views) on the shared Spark context: Spark Connect
    when ``SPARK_REMOTE`` is set, else ``master`` (default ``local[*]``)."""
    sql = _need_pyspark()
    remote = os.environ.get("SPARK_REMOTE")
    builder = sql.SparkSession.builder.appName("bendwise")
    if remote:
        # Spark Connect has no newSession(): create() opens a session of its own on the server
        # (its own temporary views); a "local" remote cannot create(), so it shares one
        builder = builder.remote(remote)
        session = builder.getOrCreate() if remote.startswith("local") else builder.create()
    else:
        _need_java()
        builder = builder.master(master or "local[*]")
        for key, value in SESSION_CONF.items():
            builder = builder.config(key, value)
        with _jvm_output_muted():
            spark = builder.getOrCreate()
        spark.sparkContext.setLogLevel("ERROR")
        session = spark.newSession()
    for key in ("spark.sql.ansi.enabled", "spark.sql.caseSensitive", "spark.sql.shuffle.partitions"):
        session.conf.set(key, SESSION_CONF[key])
    return session


@contextlib.contextmanager
def _jvm_output_muted() -> Iterator[None]:
    """Start the local JVM with its standard error on /dev/null: its start-up notices (log
    profile, hostname, native libraries) are not bendwise's to show. Failures still arrive as
    Python exceptions. Nothing changes when a context is already running."""
    sys.stderr.flush()
    saved = os.dup(2)
    null = os.open(os.devnull, os.O_WRONLY)
    try:
        os.dup2(null, 2)
        yield
    finally:
        os.dup2(saved, 2)
        os.close(saved)
        os.close(null)


class _Result:
    """One query's answer, fetched the way the study asks for it."""

    def __init__(self, frame: Any) -> None:
        self.frame = frame

    def fetchall(self) -> list[tuple]:
        return [tuple(r) for r in self.frame.collect()]

    def fetchone(self) -> tuple | None:
        rows = self.frame.take(1)
        return tuple(rows[0]) if rows else None

    def fetchnumpy(self) -> dict[str, np.ndarray]:
        """Column name → numpy array; numbers as float or int (NULL as NaN), text as objects
        (a masked array when some are NULL)."""
        with warnings.catch_warnings():  # pyspark's notices (newer pandas; a failed read's Java stack)
            warnings.simplefilter("ignore")
            pdf = self.frame.toPandas()
        out: dict[str, np.ndarray] = {}
        for name in pdf.columns:
            col = pdf[name]
            if col.dtype == object:
                mask = col.isna().to_numpy()
                values = col.to_numpy(dtype=object)
                out[name] = np.ma.masked_array(values, mask) if mask.any() else values
            else:
                out[name] = col.to_numpy()
        return out


class SparkConnection:
    """What the SQL study needs of a connection, answered by a SparkSession; while a query runs,
    Spark's own task counts reach ``progress`` (local and cluster masters; not under Spark Connect,
    which has no status tracker in the client)."""

    def __init__(self, spark: Any, progress: ProgressFn | None = None) -> None:
        self.spark = spark
        self.progress = progress
        self.scans = 0
        self.bytes_returned = 0
        self._groups = 0

    def execute(self, sql: str) -> _Result:
        text = sql.lstrip().upper()
        if text.startswith(("CREATE", "DROP")):
            self.spark.sql(sql).collect()
            return _Result(None)
        self.scans += 1
        return _Watched(self, self.spark.sql(sql))

    def register(self, name: str, data: dict) -> None:
        import pandas as pd

        frame = pd.DataFrame({k: np.asarray(v) for k, v in data.items()})
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", FutureWarning)
            self.spark.createDataFrame(frame).createOrReplaceTempView(name)

    def tag_jobs(self) -> str | None:
        """Put the jobs this thread starts next into a job group of their own (so their stages can
        be found after they finish); None where there is no SparkContext (Spark Connect)."""
        try:
            sc = self.spark.sparkContext
            self._groups += 1
            group = f"bendwise-{id(self)}-{self._groups}"
            sc.setJobGroup(group, "bendwise scan")
            return group
        except Exception:  # Spark Connect or a stand-in without job groups
            return None

    def tracker(self) -> Any:
        try:
            return self.spark.sparkContext.statusTracker()
        except Exception:  # Spark Connect: no SparkContext in the client
            return None


class _Watched(_Result):
    """A result whose fetch reports Spark's task progress from a polling thread."""

    def __init__(self, con: SparkConnection, frame: Any) -> None:
        super().__init__(frame)
        self.con = con

    def _watch(self, fetch: Callable[[], Any]) -> Any:
        """Fetch while a thread reports the active stages' task counts every half second; then
        report the counts of the stages this fetch ran (a query shorter than the first poll still
        shows Spark's own figures once)."""
        tracker = self.con.tracker() if self.con.progress is not None else None
        if tracker is None:
            return fetch()
        done = threading.Event()

        def poll() -> None:
            while not done.wait(0.5):
                self._report(tracker, tracker.getActiveStageIds())

        group = self.con.tag_jobs()
        thread = threading.Thread(target=poll, daemon=True)
        thread.start()
        try:
            return fetch()
        finally:
            done.set()
            thread.join()
            if group is not None:
                with contextlib.suppress(Exception):  # progress is a courtesy: it never fails a query
                    self._report(tracker, [sid for jid in tracker.getJobIdsForGroup(group)
                                           for sid in (getattr(tracker.getJobInfo(jid), "stageIds", None) or [])])

    def _report(self, tracker: Any, stage_ids: Sequence[int]) -> None:
        parts = []
        for sid in stage_ids:
            info = tracker.getStageInfo(sid)
            if info is not None:
                parts.append(f"stage {sid}: {info.numCompletedTasks}/{info.numTasks} tasks")
        if parts and self.con.progress is not None:
            self.con.progress("Spark " + ", ".join(parts))

    def fetchall(self) -> list[tuple]:
        return self._watch(super().fetchall)

    def fetchone(self) -> tuple | None:
        return self._watch(super().fetchone)

    def fetchnumpy(self) -> dict[str, np.ndarray]:
        got = self._watch(super().fetchnumpy)
        self.con.bytes_returned += sum(int(np.asarray(v).nbytes) for v in got.values())
        return got


def _read(spark: Any, path: str, decimal: str, delimiter: str | None) -> tuple[Any, bool, str | None, str | None]:
    """The table as a Spark DataFrame; whether its columns are text; the separator and encoding.

    Local paths are checked as the other engines check them (missing file, empty folder, glob
    matching nothing, a file that is not a text table); any other URI goes to Spark untouched,
    read as CSV when its name ends in .csv/.tsv/.txt and as Parquet otherwise."""
    from .duckdb import _csv_preflight

    if "://" in path:
        parquet = not path.rstrip("/").lower().endswith(_CSV_SUFFIXES)
        targets = [path]
        sep, encoding = delimiter, None
    else:
        files = data_files(path)
        parquet = files[0].suffix.lower() in (".parquet", ".pq")
        targets = [str(f) for f in files]
        sep, encoding = _csv_preflight(path, decimal, delimiter)
    if parquet:
        return spark.read.option("mergeSchema", "true").parquet(*targets), False, sep, encoding
    sep = sep or (";" if decimal == "," else ",")
    reader = spark.read.options(header="true", inferSchema="false", sep=sep, encoding=encoding or "UTF-8",
                                mode="FAILFAST")
    return reader.csv(targets), True, sep, encoding


def make_spark_study(
    path: str,
    *,
    y: str,
    x: str,
    covariates: Sequence[str] = (),
    weights: str | None = None,
    tolerance: str | float | None = None,
    decimal: str | None = None,
    delimiter: str | None = None,
    source: str = "",
    progress: ProgressFn | None = None,
    master: str | None = None,
    exact: bool = False,
) -> Any:
    """Build the SQL study over ``path`` with Spark SQL doing the scans (see the module notes)."""
    from ..stats.study import parse_tolerance
    from .duckdb import build_sql_study

    parse_tolerance(tolerance)  # a bad tolerance is refused before Spark starts
    dec = decimal or "."
    if "://" not in path:
        data_files(path)  # a missing file is named before Spark starts
    spark = spark_session(master)
    if progress:
        progress("Spark session started; reading the table")
    con = SparkConnection(spark, progress)
    try:
        frame, as_text, sep, encoding = _read(spark, path, dec, delimiter)
        names = list(frame.columns)
        if not as_text:
            from ..read.tables import _refuse_duplicate_names

            _refuse_duplicate_names(path, [n.strip() for n in names])
        types = {name: kind.upper() for name, kind in frame.dtypes}
        frame.createOrReplaceTempView("bw_src")
        study = build_sql_study(con, SPARK, "bw_src", names, types, as_text, path=path, y=y, x=x,
                                covariates=covariates, tolerance=tolerance, decimal=dec,
                                source=source or Path(path.rstrip("/")).name, progress=progress, exact=exact,
                                weights=weights)
    except _spark_errors() as exc:  # Spark's own errors (analysis, a malformed file, a lost executor)
        raise DataError(_spark_message(path, exc, dec, delimiter)) from None

    def forward(text: str) -> None:  # later scans report to whatever the study reports to now
        if study.progress is not None:
            study.progress(text)

    con.progress = forward
    return study


def _spark_errors() -> tuple[type[BaseException], ...]:
    """The exception types pyspark raises for a query that fails (bendwise's own pass through)."""
    kinds: list[type[BaseException]] = []
    try:
        from pyspark.errors import PySparkException

        kinds.append(PySparkException)
    except ImportError:
        pass
    try:
        from py4j.protocol import Py4JError

        kinds.append(Py4JError)
    except ImportError:
        pass
    return tuple(kinds)


def _spark_message(path: str, exc: BaseException, decimal: str, delimiter: str | None) -> str:
    """One line for a Spark failure: a ragged CSV line named as the memory engine names it, else
    the first line of Spark's message."""
    text = str(exc).strip()
    if "://" not in path:
        files = data_files(path)
        if files[0].suffix.lower() not in (".parquet", ".pq") and "malformed" in text.lower():
            from ..read.tables import ragged_message
            from .duckdb import _ragged_line

            hit = _ragged_line(files, None, delimiter or (";" if decimal == "," else ","))
            if hit is not None:
                f, line, want, saw = hit
                return ragged_message(path if len(files) == 1 else str(f),
                                      f"Expected {want} fields in line {line}, saw {saw}")
    first = text.splitlines()[0] if text else type(exc).__name__
    return f"cannot read {path} with Spark ({first[:200]}); check the file format"
