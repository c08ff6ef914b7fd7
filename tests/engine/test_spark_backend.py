"""``--engine spark``: the DuckDB backend's queries, spelled for Spark SQL, give the memory
engine's statistics (to 1e-9 relative, as tests/engine/test_sql_backend.py checks DuckDB; the
memory engine is itself checked against statsmodels there and in test_against_statsmodels.py).

One local Spark context (local[2], no UI, few shuffle partitions) serves the whole module, and
the cases are a few fixed examples rather than many random ones: a Spark query costs about a
second here. Without pyspark the module is skipped, except in CI (the ``CI`` variable set),
where it must run.
"""

from __future__ import annotations

import json
import sys
import types

import bendwise.engine as engine
import numpy as np
import pandas as pd
import pytest
from bendwise.engine.backends.dialect import DUCKDB, SPARK
from bendwise.engine.errors import DataError, UsageError
from bendwise.engine.tree.model_spec import ModelSpec
from cli_in_process import need_pyspark
from hypothesis import given
from test_sql_backend import (
    CAT,
    NUM,
    SPECS,
    X,
    Y,
    _design_frame,
    _fresh,
    _memory_of,
    _same_everything,
    _split,
    hyp,
    replicated,
    write_csv,
    write_parquet,
)

need_pyspark()

from bendwise.engine.backends import spark as spark_backend  # noqa: E402
from bendwise.engine.backends.spark import make_spark_study, spark_session  # noqa: E402

MASTER = "local[2]"
pytestmark = [pytest.mark.filterwarnings("ignore:PySpark does not yet fully support pandas"),
              pytest.mark.filterwarnings("ignore:The copy keyword is deprecated")]


@pytest.fixture(scope="module")
def _spark_context():
    """Start the module's one Spark context; studies open their own sessions on it."""
    session = spark_session(MASTER)
    yield session
    session.stop()


def on_spark(test):
    """Marks a test that runs Spark: it shares the module's context, and it is ``slow`` (starting
    the JVM alone takes half a minute here), so the quick loop leaves it to CI."""
    return pytest.mark.slow(pytest.mark.usefixtures("_spark_context")(test))


def _spark(path, **kw):
    return make_spark_study(str(path), y=Y, x=X, master=MASTER, **kw)


# ----------------------------------------------------------------------------- same statistics


@on_spark
@hyp(2)
@given(data=replicated(dirty=True))
def test_fixed_examples_give_the_memory_statistics(tmp_path, data):
    """Dirty cells (missing, text, ±inf, NaN) take the exact path; both file kinds."""
    cells, storage = data
    d = _fresh(tmp_path)
    for path in (write_csv(cells, d / "t.csv"), write_parquet(cells, storage, d / "t.parquet")):
        mem = engine.make_study(engine.load_table(str(path)), y=Y, x=X, covariates=[CAT, NUM], source=path.name)
        sql = _spark(path, covariates=[CAT, NUM])
        _same_everything(mem, sql, SPECS[:4] + SPECS[7:9])


@on_spark
@hyp(2)
@given(data=replicated(dirty=False))
def test_clean_examples_take_the_one_scan_path(tmp_path, data):
    cells, storage = data
    path = write_parquet(cells, storage, _fresh(tmp_path) / "t.parquet", text_numbers=False)
    mem = engine.make_study(engine.load_table(str(path)), y=Y, x=X, covariates=[CAT, NUM], source=path.name)
    sql = _spark(path, covariates=[CAT, NUM])
    assert sql._info["series"] is not None  # the power-sum scan ran as Spark SQL
    _same_everything(mem, sql, SPECS)


@on_spark
def test_parquet_folder_equals_the_concatenated_frame(tmp_path):
    frame = _design_frame(20, 1)
    parts = _split(frame, 3)
    folder = tmp_path / "parts"
    folder.mkdir()
    for i, p in enumerate(parts):
        p.to_parquet(folder / f"part-{i}.parquet")
    mem = _memory_of(pd.concat(parts, ignore_index=True), "parts")
    sql = _spark(folder, covariates=[CAT, NUM])
    assert sql.n == len(frame)
    _same_everything(mem, sql, SPECS[:2] + SPECS[7:12])


@on_spark
def test_demo_calibration(repo):
    from bendwise.engine.tree.scoring import score_spec
    from conftest import SENSOR, SENSOR_COVARIATES, SENSOR_X, SENSOR_Y
    from test_sql_backend import _same_check, _same_score

    mem = engine.make_study(pd.read_csv(SENSOR), y=SENSOR_Y, x=SENSOR_X, covariates=list(SENSOR_COVARIATES),
                            source=SENSOR.name)
    sql = make_spark_study(str(SENSOR), y=SENSOR_Y, x=SENSOR_X, covariates=list(SENSOR_COVARIATES), master=MASTER)
    assert (sql.n, sql.c) == (mem.n, mem.c)
    _same_check(mem, sql)
    root_mem = np.asarray(score_spec(mem, ModelSpec()).level_fitted_y)
    root_sql = np.asarray(score_spec(sql, ModelSpec()).level_fitted_y)
    for spec in (ModelSpec(), ModelSpec(degree=2), ModelSpec(covariates=("run_day",))):
        _same_score(mem, sql, spec, root_mem, root_sql)


# ----------------------------------------------------------------------------- hostile names

HOSTILE = {Y: 'y"; DROP TABLE t; --', X: "x `tick` ü", CAT: "it's a;b", NUM: "back\\slash \u00e9"}


@on_spark
def test_hostile_column_names_stay_quoted_identifiers(tmp_path):
    frame = _design_frame(8, 2)
    renamed = frame.rename(columns=HOSTILE)
    path = tmp_path / "odd.parquet"
    renamed.to_parquet(path)
    mem = engine.make_study(renamed, y=HOSTILE[Y], x=HOSTILE[X], covariates=[HOSTILE[CAT], HOSTILE[NUM]],
                            source="odd.parquet")
    sql = make_spark_study(str(path), y=HOSTILE[Y], x=HOSTILE[X], covariates=[HOSTILE[CAT], HOSTILE[NUM]],
                           master=MASTER, exact=True)
    assert (sql.n, sql.c) == (mem.n, mem.c)
    from test_sql_backend import _same_check

    _same_check(mem, sql)


@on_spark
def test_dialect_quoting_round_trips_through_spark(tmp_path):
    spark = spark_session(MASTER)
    for text in ["a`b", "x'y", "semi;colon", "sp ace", "é ü ∑", 'dq"', "back\\slash"]:
        assert SPARK.quote(text).startswith("`") and DUCKDB.quote(text).startswith('"')
        row = spark.sql(f"SELECT {SPARK.literal(text)} AS {SPARK.quote(text)}").collect()[0]
        assert row[0] == text and row.__fields__[0] == text


@on_spark
def test_csv_text_table_with_a_categorical_covariate(tmp_path):
    frame = _design_frame(10, 3)
    path = tmp_path / "t.csv"
    frame.to_csv(path, index=False)
    mem = _memory_of(frame, "t.csv")
    _same_everything(mem, _spark(path, covariates=[CAT, NUM]), SPECS[:2] + SPECS[7:9])


# ----------------------------------------------------------------------------- what is missing


def test_missing_pyspark_is_one_line(monkeypatch):
    monkeypatch.setitem(sys.modules, "pyspark.sql", None)
    with pytest.raises(DataError, match=r"needs pyspark; install it with: pip install 'bendwise\[spark\]'"):
        spark_backend._need_pyspark()


def test_missing_java_is_one_line(monkeypatch, tmp_path):
    monkeypatch.delenv("JAVA_HOME", raising=False)
    monkeypatch.delenv("SPARK_REMOTE", raising=False)
    monkeypatch.setenv("PATH", str(tmp_path))
    with pytest.raises(DataError, match="needs Java 17 or newer .* openjdk-17-jre-headless"):
        spark_backend.spark_session("local[1]")


def test_missing_file_named_before_spark_starts(tmp_path):
    with pytest.raises(DataError, match="nope.parquet"):
        make_spark_study(str(tmp_path / "nope.parquet"), y=Y, x=X, master=MASTER)
    with pytest.raises(UsageError, match="tolerance 'wide' is not a number"):
        make_spark_study(str(tmp_path / "nope.parquet"), y=Y, x=X, tolerance="wide", master=MASTER)


# ----------------------------------------------------------------------------- the command line


@on_spark
def test_cli_check_json_via_spark_matches_memory(capsys, repo):
    from bendwise.tui.cli import main
    from conftest import SENSOR

    base = ["check", str(SENSOR), "-y", "signal_mv", "-x", "conc_mg_l", "--json"]
    assert main(base + ["--engine", "memory"]) == 0
    mem = json.loads(capsys.readouterr().out)
    assert main(base + ["--engine", "spark", "--spark-master", MASTER]) == 0
    got = json.loads(capsys.readouterr().out)

    def numbers(a, b, path=""):
        if isinstance(a, dict):
            for k in a:
                if k in b:
                    numbers(a[k], b[k], f"{path}.{k}")
        elif isinstance(a, list) and isinstance(b, list) and len(a) == len(b):
            for i, (u, v) in enumerate(zip(a, b, strict=True)):
                numbers(u, v, f"{path}[{i}]")
        elif isinstance(a, float) and isinstance(b, float):
            assert b == pytest.approx(a, rel=1e-9, abs=1e-12), path

    numbers(mem["lack_of_fit"] if "lack_of_fit" in mem else mem, got["lack_of_fit"] if "lack_of_fit" in got else got)


@on_spark
@pytest.mark.parametrize("roles", [
    dict(y="yeild", x=X),  # a typo: the suggestion names the column
    dict(y=Y, x=Y),
    dict(y=Y, x=X, covariates=[CAT, CAT]),
    dict(y=Y, x=X, covariates=[X]),
])
def test_column_messages_are_the_memory_engines(tmp_path, roles):
    """One column resolution (engine.read.usable.choose_columns) for all engines: same one line."""
    from bendwise.engine.backends.duckdb import make_sql_study
    from bendwise.engine.errors import BendwiseError

    frame = _design_frame(3, 4)
    path = tmp_path / "t.parquet"
    frame.to_parquet(path)
    messages = []
    for build in (lambda: engine.make_study(frame, **roles), lambda: make_sql_study(str(path), **roles),
                  lambda: make_spark_study(str(path), master=MASTER, **roles)):
        with pytest.raises(BendwiseError) as err:
            build()
        messages.append(str(err.value))
    assert messages[0] == messages[1] == messages[2]


def test_spark_task_counts_reach_the_progress_line():
    """While a query's result is fetched, a thread polls Spark's status tracker and reports the
    active stages' task counts (here a stand-in tracker and a fetch that takes a second)."""
    import time
    from types import SimpleNamespace

    from bendwise.engine.backends.spark import SparkConnection, _Watched

    info = SimpleNamespace(numCompletedTasks=3, numTasks=8)
    tracker = SimpleNamespace(getActiveStageIds=lambda: [7], getStageInfo=lambda sid: info)
    fake = SimpleNamespace(sparkContext=SimpleNamespace(statusTracker=lambda: tracker))
    said: list[str] = []
    con = SparkConnection(fake, said.append)
    got = _Watched(con, None)._watch(lambda: time.sleep(1.2) or "done")
    assert got == "done" and "Spark stage 7: 3/8 tasks" in said
    said.clear()
    con.progress = None  # the app silences the progress line: no polling at all
    _Watched(con, None)._watch(lambda: time.sleep(0.7))
    assert said == []


def test_a_query_shorter_than_the_first_poll_still_reports_its_stages():
    """The fetch runs in a job group of its own; after it, the stages of that group's jobs are
    reported once (stand-in context and tracker: a fetch of 10 ms, long before the first poll)."""
    from types import SimpleNamespace

    from bendwise.engine.backends.spark import SparkConnection, _Watched

    groups: list[str] = []
    jobs = {5: SimpleNamespace(stageIds=[11, 12])}
    stages = {11: SimpleNamespace(numCompletedTasks=2, numTasks=2), 12: SimpleNamespace(numCompletedTasks=1,
                                                                                          numTasks=1)}
    tracker = SimpleNamespace(getActiveStageIds=lambda: [], getStageInfo=stages.get, getJobInfo=jobs.get,
                              getJobIdsForGroup=lambda g: [5] if groups and g == groups[-1] else [])
    sc = SimpleNamespace(statusTracker=lambda: tracker, setJobGroup=lambda g, d: groups.append(g))
    said: list[str] = []
    con = SparkConnection(SimpleNamespace(sparkContext=sc), said.append)
    assert _Watched(con, None)._watch(lambda: "quick") == "quick"
    assert said == ["Spark stage 11: 2/2 tasks, stage 12: 1/1 tasks"]
    _Watched(con, None)._watch(lambda: None)
    assert len(set(groups)) == 2  # each fetch its own group


@on_spark
def test_spark_read_errors_are_one_line(tmp_path):
    """A ragged CSV line is named as the memory engine names it; a Parquet file that is not one
    gives Spark's first line, not a traceback."""
    ragged = tmp_path / "ragged.csv"
    ragged.write_text("yield,dose\n1,2\n3,4,5\n6,7\n")
    with pytest.raises(DataError) as mem_err:
        engine.make_study(engine.load_table(str(ragged)), y=Y, x=X)
    with pytest.raises(DataError) as spark_err:
        _spark(ragged)
    assert str(spark_err.value) == str(mem_err.value)
    broken = tmp_path / "broken.parquet"
    broken.write_bytes(b"PAR1 not really parquet PAR1")
    with pytest.raises(DataError, match="broken.parquet") as err:
        _spark(broken)
    assert "\n" not in str(err.value)


@on_spark
def test_cli_stderr_carries_no_jvm_start_up_notices(repo):
    """The local JVM's start-up lines (log profile, hostname, native libraries) stay off stderr;
    the report on stdout is the DuckDB engine's (the same SQL study: Bartlett's spread test)."""
    import subprocess
    from pathlib import Path

    from conftest import SENSOR

    exe = Path(sys.executable).with_name("bendwise")
    base = [str(exe), "check", str(SENSOR), "-y", "signal_mv", "-x", "conc_mg_l"]
    spark = subprocess.run([*base, "--engine", "spark", "--spark-master", "local[1]"], capture_output=True,
                           text=True, timeout=300)
    duck = subprocess.run([*base, "--engine", "duckdb"], capture_output=True, text=True, timeout=120)
    assert spark.returncode == 0, spark.stderr[-2000:]
    assert spark.stderr == duck.stderr == ""
    assert spark.stdout == duck.stdout


class _FakeBuilder:
    """Records how a session is made (Spark Connect has no server here)."""

    def __init__(self, log):
        self.log = log

    def appName(self, name):  # noqa: N802 (pyspark's name)
        self.log.append(("appName", name))
        return self

    def remote(self, url):
        self.log.append(("remote", url))
        return self

    def create(self):
        self.log.append(("create",))
        return _FakeSession(self.log)

    def getOrCreate(self):  # noqa: N802
        self.log.append(("getOrCreate",))
        return _FakeSession(self.log)


class _FakeSession:
    def __init__(self, log):
        self.log = log
        self.conf = types.SimpleNamespace(set=lambda k, v: log.append(("conf", k, v)))

    def newSession(self):  # noqa: N802
        raise AssertionError("Spark Connect has no newSession()")

    @property
    def sparkContext(self):  # noqa: N802
        raise AssertionError("Spark Connect has no SparkContext in the client")


@pytest.mark.parametrize("url, how", [("sc://cluster.example:15002", "create"), ("local", "getOrCreate")])
def test_spark_connect_session_is_made_without_new_session(monkeypatch, url, how):
    """Under SPARK_REMOTE the session comes from builder.create() (a session of its own on the
    server, so its temporary views are its own), or getOrCreate() for a 'local' remote, which
    cannot create(); never newSession() or the SparkContext, which Spark Connect does not have
    (pyspark 3.5, pyspark/sql/connect/session.py). No Java is needed on the client."""
    log: list = []
    fake = types.SimpleNamespace(SparkSession=types.SimpleNamespace(builder=_FakeBuilder(log)))
    monkeypatch.setattr(spark_backend, "_need_pyspark", lambda: fake)
    monkeypatch.setattr(spark_backend, "_need_java", lambda: (_ for _ in ()).throw(AssertionError("java asked")))
    monkeypatch.setenv("SPARK_REMOTE", url)
    spark_backend.spark_session("local[1]")
    assert ("remote", url) in log and (how,) in log
    assert ("conf", "spark.sql.ansi.enabled", spark_backend.SESSION_CONF["spark.sql.ansi.enabled"]) in log


# ----------------------------------------------------------------------------- the user's weights


@on_spark
@hyp(1)
@given(data=replicated(dirty=True))
def test_weighted_example_gives_the_memory_statistics(tmp_path, data):
    """A weights column varying within levels (bad weights only on rows dropped anyway), both file
    kinds, and a weights column with a hostile name read as a quoted identifier."""
    from test_sql_backend import HOSTILE_WEIGHTS, WEIGHTED_SPECS, W, _same_weighted, with_weights

    cells, storage = data
    cells = with_weights(cells, 5)
    d = _fresh(tmp_path)
    for path in (write_csv(cells, d / "t.csv"), write_parquet(cells, storage, d / "t.parquet", text_numbers=False)):
        mem = engine.make_study(engine.load_table(str(path)), y=Y, x=X, covariates=[CAT, NUM], weights=W,
                                source=path.name)
        _same_weighted(mem, _spark(path, covariates=[CAT, NUM], weights=W), WEIGHTED_SPECS[:3] + WEIGHTED_SPECS[7:])
    frame = _design_frame(4, 6)
    frame[HOSTILE_WEIGHTS] = np.random.default_rng(2).uniform(0.5, 2.0, len(frame))
    path = tmp_path / "odd.parquet"
    frame.to_parquet(path)
    mem = engine.make_study(frame, y=Y, x=X, covariates=[CAT], weights=HOSTILE_WEIGHTS, source="odd.parquet")
    _same_weighted(mem, _spark(path, covariates=[CAT], weights=HOSTILE_WEIGHTS), SPECS[:2] + SPECS[7:8])


@on_spark
@pytest.mark.parametrize("bad", [0.0, -1.0, None, "heavy"])
def test_bad_weight_is_the_same_line_on_every_engine(tmp_path, bad):
    from bendwise.engine.backends.duckdb import make_sql_study

    frame = _design_frame(3, 4)
    frame["w"] = pd.Series(np.linspace(0.5, 2.0, len(frame)), dtype=object)
    frame.loc[[2, 11], "w"] = bad
    path = tmp_path / "t.csv"
    frame.to_csv(path, index=False)
    messages = []
    for build in (lambda: engine.make_study(engine.load_table(str(path)), y=Y, x=X, weights="w"),
                  lambda: make_sql_study(str(path), y=Y, x=X, weights="w"),
                  lambda: make_spark_study(str(path), y=Y, x=X, weights="w", master=MASTER)):
        with pytest.raises(DataError) as err:
            build()
        messages.append(str(err.value))
    assert messages[0] == messages[1] == messages[2] and "(rows 3, 12)" in messages[0], messages
    if bad == 0.0:  # in a folder the rows are numbered through the files in name order, as memory reads them
        folder = tmp_path / "parts"
        folder.mkdir()
        parts = [frame.iloc[:10], frame.iloc[10:20], frame.iloc[20:]]
        for i, p in enumerate(parts):
            p.to_csv(folder / f"part-{i}.csv", index=False)
        with pytest.raises(DataError) as err:
            make_spark_study(str(folder), y=Y, x=X, weights="w", master=MASTER)
        assert str(err.value) == messages[0]


@on_spark
@hyp(1)
@given(data=replicated(dirty=False))
def test_weighted_clean_example_takes_the_one_scan_path(tmp_path, data):
    from bendwise.engine.backends.weighted import WeightedSeries
    from test_sql_backend import WEIGHTED_SPECS, W, _same_weighted, with_weights

    cells, storage = data
    path = write_parquet(with_weights(cells, 9, spoil=False), storage, _fresh(tmp_path) / "t.parquet",
                         text_numbers=False)
    mem = engine.make_study(engine.load_table(str(path)), y=Y, x=X, covariates=[CAT, NUM], weights=W,
                            source=path.name)
    sql = _spark(path, covariates=[CAT, NUM], weights=W)
    assert isinstance(sql._info["series"], WeightedSeries)  # the weighted power-sum scan ran as Spark SQL
    _same_weighted(mem, sql, WEIGHTED_SPECS)
