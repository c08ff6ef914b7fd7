"""``confirm`` and ``apply`` with ``--engine spark``: the memory engine's results (reference: the
memory engine, checked against statsmodels in test_confirm.py), on the module's one local[2]
Spark context and few queries. Slow (a JVM starts); without pyspark skipped, except in CI
(``CI`` set), where it must run.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest
from cli_in_process import need_pyspark
from test_engine_handon import RUN2, _bad_tables, _cli, same_numbers, sensor_spec  # noqa: F401 (a fixture)

need_pyspark()

from bendwise.engine.backends.spark import spark_session  # noqa: E402

MASTER = "local[2]"
pytestmark = [pytest.mark.slow, pytest.mark.usefixtures("_spark_context"),
              pytest.mark.filterwarnings("ignore:PySpark does not yet fully support pandas"),
              pytest.mark.filterwarnings("ignore:The copy keyword is deprecated")]
SPARK = ["--engine", "spark", "--spark-master", MASTER]


@pytest.fixture(scope="module")
def _spark_context():
    """The module's one Spark context; each command opens its own session on it."""
    session = spark_session(MASTER)
    yield session
    session.stop()


def test_confirm_on_spark_equals_memory_on_a_parquet_folder(sensor_spec, tmp_path, capsys):  # noqa: F811
    folder = tmp_path / "parts"
    folder.mkdir()
    frame = pd.read_csv(RUN2)
    frame.iloc[:10].to_parquet(folder / "a.parquet")
    frame.iloc[10:].to_parquet(folder / "b.parquet")
    mem = json.loads(_cli(["confirm", str(sensor_spec), str(RUN2), "--json"], capsys)[1])
    code, out, err = _cli(["confirm", str(sensor_spec), str(folder), "--json", *SPARK], capsys)
    assert code == 0 and err == ""
    same_numbers({**mem, "source": "parts"}, json.loads(out))


def test_apply_on_spark_writes_the_same_bytes(sensor_spec, tmp_path, capsys, monkeypatch):  # noqa: F811
    import bendwise.engine.backends.batches as batches

    monkeypatch.setattr(batches, "BATCH_ROWS", 10)
    outs = []
    for eng in (["--engine", "memory"], SPARK):
        for mode in ([], ["--inverse"]):
            code, out, err = _cli(["apply", str(sensor_spec), str(RUN2), "--json", *mode, *eng], capsys)
            assert code == 0 and err == ""
            outs.append(out)
    assert outs[:2] == outs[2:]


def test_bad_input_gives_the_memory_line_on_spark(sensor_spec, tmp_path, capsys):  # noqa: F811
    for what, path in _bad_tables(tmp_path).items():
        for cmd in ("apply", "confirm"):
            if cmd == "confirm" and what == "text in x":
                continue  # dropped and counted, as on DuckDB (test_engine_handon.py)
            mem = _cli([cmd, str(sensor_spec), str(path), "--engine", "memory"], capsys)
            got = _cli([cmd, str(sensor_spec), str(path), *SPARK], capsys)
            assert got[0] == 2 and got[2] == mem[2] and len(got[2].strip().splitlines()) == 1, (what, cmd, got)


def test_confirm_cli_on_spark_has_an_empty_stderr(sensor_spec, tmp_path):  # noqa: F811
    exe = Path(sys.executable).with_name("bendwise")
    mem = subprocess.run([str(exe), "confirm", str(sensor_spec), str(RUN2), "--json"], capture_output=True,
                         text=True, timeout=300)
    got = subprocess.run([str(exe), "confirm", str(sensor_spec), str(RUN2), "--json", *SPARK], capture_output=True,
                         text=True, timeout=300)
    assert got.returncode == 0 and got.stderr == ""
    same_numbers(json.loads(mem.stdout), json.loads(got.stdout))


def test_apply_on_spark_keeps_the_file_order_of_a_folder(sensor_spec, tmp_path, capsys):  # noqa: F811
    # Spark packs small files into one partition largest first; apply reads them one by one, in
    # the order DuckDB reads them, so the rows (and their numbers) come out the same
    frame = pd.read_csv(RUN2)
    folder = tmp_path / "parts"
    folder.mkdir()
    frame.iloc[:4].to_parquet(folder / "a.parquet")  # the smaller file first by name
    frame.iloc[4:].to_parquet(folder / "b.parquet")
    duck = _cli(["apply", str(sensor_spec), str(folder), "--json", "--engine", "duckdb"], capsys)
    got = _cli(["apply", str(sensor_spec), str(folder), "--json", *SPARK], capsys)
    assert got[0] == 0 and got[2] == "" and got[1] == duck[1]
    assert duck[1] == _cli(["apply", str(sensor_spec), str(RUN2), "--json"], capsys)[1]
