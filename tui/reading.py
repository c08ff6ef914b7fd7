"""What to open and how to read it: shared by the CLI (before the app starts) and the app's workers.

No Textual imports and no pandas at import time: these run in worker threads (or in the
CLI before the app starts, so that data errors are one line and exit 2).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from bendwise.engine.stats.study import Study

__all__ = ["DataRequest", "read_frame", "build_study", "demo_request", "datasets_dir"]


@dataclass(frozen=True, slots=True)
class DataRequest:
    """The table and the columns of one analysis (as typed on the command line)."""

    path: str
    """Table file, or '-' for standard input."""
    y: str | None = None
    """Response column (None: choose on the start screen)."""
    x: str | None = None
    """Predictor column."""
    covariates: tuple[str, ...] = ()
    """Columns the tree may add."""
    weights: str | None = None
    """Column of positive weights."""
    tolerance: str | None = None
    """Merge settings closer than this."""
    sheet: str | None = None
    """Excel sheet."""
    decimal: str | None = None
    """Decimal mark of text files."""
    delimiter: str | None = None
    """Field separator of text files."""
    runs: str | None = None
    """Column naming the run (day, batch): a random intercept in every node, never a fixed covariate."""
    engine: str = "memory"
    """Who builds the study in the app's worker: 'memory', or 'spark' (the rows stay where Spark reads them)."""
    spark_master: str | None = None
    """With engine 'spark': the master URL (None: local[*], or Spark Connect from SPARK_REMOTE)."""

    @property
    def source(self) -> str:
        """Name shown to the user."""
        return "<stdin>" if self.path == "-" else Path(self.path).name

    def choose(self, y: str, x: str, covariates: tuple[str, ...], runs: str | None = None) -> DataRequest:
        """Copy with the columns picked on the start screen."""
        return replace(self, y=y, x=x, covariates=covariates, runs=runs)


def datasets_dir() -> Path:
    """The bundled demo data: the package ``bendwise.datasets`` (installed from ``datasets/``)."""
    from importlib.resources import files

    return Path(str(files("bendwise.datasets")))


def demo_request() -> DataRequest:
    """The main demo: sensor calibration with two candidate covariates."""
    path = datasets_dir() / "sensor_calibration.csv"
    return DataRequest(str(path), "signal_mv", "conc_mg_l", ("run_day", "temp_c"))


def read_frame(req: DataRequest) -> Any:
    """The table as a DataFrame (``engine.load_table``; raises DataError with one line)."""
    from bendwise.engine import load_table

    delim = req.delimiter
    if delim in {"\\t", "tab", "TAB"}:
        delim = "\t"
    return load_table(req.path, sheet=req.sheet, decimal=req.decimal, delimiter=delim)


def build_study(req: DataRequest, frame: Any = None, progress: Callable[[str], None] | None = None) -> Study:
    """Clean the chosen columns into a Study (raises BendwiseError with one line). With
    ``req.engine`` 'spark' the study is built by Spark SQL, and Spark's task counts reach ``progress``."""
    from bendwise.engine import make_study
    from bendwise.engine.errors import UsageError

    if not req.y or not req.x:
        raise UsageError("choose a response and a predictor column")
    if req.engine == "spark":
        from bendwise.engine.backends.spark import make_spark_study

        delim = "\t" if req.delimiter in {"\\t", "tab", "TAB"} else req.delimiter
        return make_spark_study(req.path, y=req.y, x=req.x, covariates=list(req.covariates), weights=req.weights,
                                tolerance=req.tolerance, decimal=req.decimal, delimiter=delim, progress=progress,
                                master=req.spark_master)
    if frame is None:
        frame = read_frame(req)
    covariates = list(req.covariates)
    if req.runs:
        from bendwise.engine.checks.runs import validate_runs_column

        covariates = [validate_runs_column(frame, req.runs, req.y, req.x),
                      *(c for c in covariates if c != req.runs)]
    return make_study(frame, y=req.y, x=req.x, covariates=covariates, weights=req.weights,
                      tolerance=req.tolerance, source=req.source)
