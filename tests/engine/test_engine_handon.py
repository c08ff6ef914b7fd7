"""``confirm`` and ``apply`` with ``--engine duckdb``: the same results as the memory engine.

References: the memory engine (itself checked against statsmodels in test_confirm.py and
test_export.py) — confirm's JSON numbers to 1e-9 relative, apply's output byte for byte; the
invented second run of the sensor scenario in datasets/ and Parquet folders made from it. Spark
runs the same comparisons in test_engine_handon_spark.py.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from bendwise.tui.cli import main
from cli_in_process import run_cli as _cli

pytest.importorskip("duckdb")

DATA = Path(__file__).resolve().parents[2] / "datasets"
RUN2 = DATA / "sensor_calibration_run2.csv"


def same_numbers(a, b, rel: float = 1e-9) -> None:
    """Equal JSON values, floats to ``rel`` relative (absolute near 0)."""
    if isinstance(a, dict):
        assert set(a) == set(b)
        for k in a:
            same_numbers(a[k], b[k], rel)
    elif isinstance(a, list):
        assert len(a) == len(b)
        for u, v in zip(a, b, strict=True):
            same_numbers(u, v, rel)
    elif isinstance(a, float) and isinstance(b, float):
        assert math.isclose(a, b, rel_tol=rel, abs_tol=rel), (a, b)
    else:
        assert a == b


@pytest.fixture(scope="module")
def sensor_spec(tmp_path_factory) -> Path:
    """The suggested node of the sensor scenario (a quadratic with power-of-mean weights)."""
    out = tmp_path_factory.mktemp("spec") / "exA"
    assert main(["export", str(DATA / "sensor_calibration.csv"), "-y", "signal_mv", "-x", "conc_mg_l",
                 "--covariates", "run_day,temp_c", "--suggested", "-o", str(out)]) == 0
    return out


@pytest.fixture(scope="module")
def batch_spec(tmp_path_factory) -> tuple[Path, pd.DataFrame]:
    """A line with a categorical covariate (two batches), and a new run of it."""
    rng = np.random.default_rng(41)
    x = np.repeat(np.linspace(1.0, 10.0, 6), 4)
    batch = np.tile(["b1", "b2"], x.size // 2)

    def run(shift: float) -> pd.DataFrame:
        y = 4 + 1.5 * x + 0.8 * (batch == "b2") + shift + rng.normal(0, 0.3, x.size)
        return pd.DataFrame({"level": x, "reading": y, "batch": batch})

    folder = tmp_path_factory.mktemp("batch")
    run(0.0).to_csv(folder / "a.csv", index=False)
    out = folder / "exB"
    assert main(["export", str(folder / "a.csv"), "-y", "reading", "-x", "level", "--covariates", "batch",
                 "--node", "root", "-o", str(out)]) == 0
    spec = json.loads((out / "spec.json").read_text())
    if not spec["model"]["covariates"]:  # the root has no covariate: take the node that adds it
        assert main(["export", str(folder / "a.csv"), "-y", "reading", "-x", "level", "--covariates", "batch",
                     "--node", _node_with(folder / "a.csv", "batch"), "-o", str(out), "--force"]) == 0
    return out, run(0.1)


def _node_with(path: Path, cov: str) -> str:
    import bendwise.engine as engine

    tree = engine.RemedyTree(engine.make_study(pd.read_csv(path), y="reading", x="level", covariates=[cov]))
    tree.grow(1)
    return next(n.id for n in tree.nodes.values() if n.spec.covariates == (cov,) and n.spec.degree == 1)


# ---------------------------------------------------------------------------------- confirm


def test_confirm_on_duckdb_equals_memory_on_the_second_run(sensor_spec, capsys):
    outs = {}
    for eng in ("memory", "duckdb"):
        code, out, err = _cli(["confirm", str(sensor_spec), str(RUN2), "--json", "--engine", eng], capsys)
        assert code == 0 and err == ""
        outs[eng] = json.loads(out)
    assert outs["memory"]["verdict"] == "confirmed" and outs["memory"]["transfer"]["testable"]
    same_numbers(outs["memory"], outs["duckdb"])
    texts = [_cli(["confirm", str(sensor_spec), str(RUN2), "--engine", e], capsys)[1] for e in ("memory", "duckdb")]
    assert texts[0] == texts[1]


def test_confirm_on_a_parquet_folder_equals_memory(sensor_spec, tmp_path, capsys):
    frame = pd.read_csv(RUN2)
    frame["signal_mv"] = frame["signal_mv"] + 9.0  # moved: the transfer test has something to find
    shifted = tmp_path / "shifted.csv"
    frame.to_csv(shifted, index=False)
    folder = tmp_path / "parts"
    folder.mkdir()
    frame.iloc[::2].to_parquet(folder / "p0.parquet")
    frame.iloc[1::2].to_parquet(folder / "p1.parquet")
    code, out, _ = _cli(["confirm", str(sensor_spec), str(shifted), "--json", "--allowable-deviation", "5"], capsys)
    mem = json.loads(out)
    code2, out2, err2 = _cli(["confirm", str(sensor_spec), str(folder), "--json", "--allowable-deviation", "5"], capsys)
    assert code == code2 == 0 and err2 == ""  # a folder goes through DuckDB with --engine auto
    got = json.loads(out2)
    assert mem["verdict"] == "form holds, curve moved" and got["source"] == "parts"
    same_numbers({**mem, "source": "parts"}, got)


def test_confirm_with_a_categorical_covariate_names_the_same_settings(batch_spec, tmp_path, capsys):
    spec, new = batch_spec
    path = tmp_path / "new.parquet"
    new.to_parquet(path)
    outs = [json.loads(_cli(["confirm", str(spec), str(path), "--json", "--engine", e], capsys)[1])
            for e in ("memory", "duckdb")]
    assert outs[0]["levels"] == 6 and outs[0]["transfer"]["df1"] == 12  # settings: 6 levels × 2 batches
    assert "batch = " in outs[0]["transfer"]["max_deviation_at"]
    same_numbers(outs[0], outs[1])


def test_confirm_refuses_what_needs_rows_in_one_line(tmp_path, capsys):
    rng = np.random.default_rng(8)
    x = np.repeat(np.linspace(1.0, 10.0, 6), 4)
    temp = rng.normal(20, 2, x.size)
    frame = pd.DataFrame({"x": x, "y": 3 + 2 * x + 0.4 * temp + rng.normal(0, 0.2, x.size), "temp": temp})
    frame.to_csv(tmp_path / "a.csv", index=False)
    import bendwise.engine as engine

    tree = engine.RemedyTree(engine.make_study(frame, y="y", x="x", covariates=["temp"]))
    tree.grow(1)
    nid = next(n.id for n in tree.nodes.values() if n.spec.covariates == ("temp",) and n.spec.degree == 1)
    assert main(["export", str(tmp_path / "a.csv"), "-y", "y", "-x", "x", "--covariates", "temp", "--node", nid,
                 "-o", str(tmp_path / "ex")]) == 0
    capsys.readouterr()
    code, out, err = _cli(["confirm", str(tmp_path / "ex"), str(tmp_path / "a.csv"), "--engine", "duckdb"], capsys)
    assert code == 2 and out == "" and len(err.strip().splitlines()) == 1
    assert "'temp'" in err and "--engine memory" in err
    assert _cli(["confirm", str(tmp_path / "ex"), str(tmp_path / "a.csv")], capsys)[0] == 0  # memory: fine


# ------------------------------------------------------------------------------------ apply


@pytest.mark.parametrize("inverse", [False, True])
def test_apply_on_duckdb_writes_the_same_bytes(sensor_spec, tmp_path, capsys, monkeypatch, inverse):
    import bendwise.engine.backends.batches as batches

    monkeypatch.setattr(batches, "BATCH_ROWS", 7)  # 24 rows in four batches: row numbers carry over
    mode = ["--inverse"] if inverse else []
    got = {}
    for eng in ("memory", "duckdb"):
        out_csv = tmp_path / f"{eng}.csv"
        code, js, err = _cli(["apply", str(sensor_spec), str(RUN2), "--json", "--engine", eng, *mode], capsys)
        assert code == 0 and err == ""
        code, text, err = _cli(["apply", str(sensor_spec), str(RUN2), "-o", str(out_csv), "--engine", eng, *mode],
                               capsys)
        assert code == 0 and err == ""
        got[eng] = (js, text.replace(str(out_csv), "OUT"), out_csv.read_bytes())
    assert got["memory"] == got["duckdb"]
    rows = json.loads(got["duckdb"][0])["rows"]
    assert [r["row"] for r in rows] == list(range(1, 25))
    assert len(got["duckdb"][2].splitlines()) == 25


def test_apply_reads_a_parquet_folder_in_batches(batch_spec, tmp_path, capsys, monkeypatch):
    import bendwise.engine.backends.batches as batches

    spec, new = batch_spec
    big = pd.concat([new] * 30, ignore_index=True)  # 720 rows
    big.to_csv(tmp_path / "big.csv", index=False)
    folder = tmp_path / "parts"
    folder.mkdir()
    big.iloc[:400].to_parquet(folder / "a.parquet")
    big.iloc[400:].to_parquet(folder / "b.parquet")
    monkeypatch.setattr(batches, "BATCH_ROWS", 64)
    seen: list[int] = []
    real = batches.table_batches

    def counted(*a, **k):
        for frame in real(*a, **k):
            seen.append(frame.shape[0])
            yield frame

    monkeypatch.setattr(batches, "table_batches", counted)
    mem = _cli(["apply", str(spec), str(tmp_path / "big.csv"), "--json"], capsys)
    code, out, err = _cli(["apply", str(spec), str(folder), "--json"], capsys)  # auto: a folder → DuckDB
    assert code == 0 and err == "" and out == mem[1]
    assert len(seen) > 1 and max(seen) <= 64 and sum(seen) == 720  # never the whole table at once
    text = _cli(["apply", str(spec), str(folder)], capsys)[1]
    assert "… 520 more row(s): use -o or --json" in text and text == _cli(["apply", str(spec), str(tmp_path / "big.csv")], capsys)[1]


def test_apply_output_is_atomic_and_never_replaced_without_force(sensor_spec, tmp_path, capsys):
    out = tmp_path / "rows.csv"
    out.write_text("keep me\n")
    code, _, err = _cli(["apply", str(sensor_spec), str(RUN2), "-o", str(out), "--engine", "duckdb"], capsys)
    assert code == 2 and "already exists" in err and "--force" in err and out.read_text() == "keep me\n"
    bad = tmp_path / "bad.csv"
    frame = pd.read_csv(RUN2)
    frame["conc_mg_l"] = frame["conc_mg_l"].astype(object)
    frame.loc[20, "conc_mg_l"] = "n/a?"
    frame.to_csv(bad, index=False)
    code, _, err = _cli(["apply", str(sensor_spec), str(bad), "-o", str(out), "--force", "--engine", "duckdb"], capsys)
    assert code == 2 and out.read_text() == "keep me\n"  # a failed batch leaves the old file
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bad.csv", "rows.csv"]  # and no temporary file
    assert _cli(["apply", str(sensor_spec), str(RUN2), "-o", str(out), "--force", "--engine", "duckdb"], capsys)[0] == 0
    assert out.read_text().startswith("row,x,")


def _bad_tables(tmp_path: Path) -> dict[str, Path]:
    frame = pd.read_csv(RUN2)
    out = {}
    out["missing column"] = tmp_path / "nox.csv"
    frame.drop(columns=["conc_mg_l"]).to_csv(out["missing column"], index=False)
    text = frame.astype({"conc_mg_l": object})
    text.loc[[17, 22], "conc_mg_l"] = "abc"
    out["text in x"] = tmp_path / "textx.csv"
    text.to_csv(out["text in x"], index=False)
    out["no rows"] = tmp_path / "header.csv"
    frame.iloc[:0].to_csv(out["no rows"], index=False)
    out["empty file"] = tmp_path / "zero.csv"
    out["empty file"].write_text("")
    return out


def test_bad_input_gives_the_same_line_on_both_engines(sensor_spec, tmp_path, capsys, monkeypatch):
    import bendwise.engine.backends.batches as batches

    monkeypatch.setattr(batches, "BATCH_ROWS", 5)  # the text cells sit in later batches
    for what, path in _bad_tables(tmp_path).items():
        for cmd in ("apply", "confirm"):
            if cmd == "confirm" and what == "text in x":
                continue  # confirm drops such rows and says so (tested below)
            lines = []
            for eng in ("memory", "duckdb"):
                code, out, err = _cli([cmd, str(sensor_spec), str(path), "--engine", eng], capsys)
                assert code == 2 and out == "" and len(err.strip().splitlines()) == 1, (what, cmd, eng, err)
                lines.append(err)
            assert lines[0] == lines[1], (what, cmd)
    err = _cli(["apply", str(sensor_spec), str(tmp_path / "textx.csv"), "--engine", "duckdb"], capsys)[2]
    assert "row 18 has 'abc'" in err and "(2 such row(s))" in err


def test_confirm_drops_a_text_x_on_both_engines(sensor_spec, tmp_path, capsys):
    path = _bad_tables(tmp_path)["text in x"]
    outs = [json.loads(_cli(["confirm", str(sensor_spec), str(path), "--json", "--engine", e], capsys)[1])
            for e in ("memory", "duckdb")]
    assert outs[0]["n"] == outs[1]["n"] == 22
    # the memory engine also names the rows; the SQL engines count them (their rows have no order)
    assert outs[0]["dropped"] == ["2 row(s) with non-numeric 'conc_mg_l' (rows 18, 23)"]
    assert outs[1]["dropped"] == ["2 row(s) with non-numeric 'conc_mg_l'"]
    same_numbers({**outs[0], "dropped": []}, {**outs[1], "dropped": []})


def test_confirm_refuses_a_weights_column_before_reading(tmp_path, capsys):
    rng = np.random.default_rng(9)
    x = np.repeat(np.linspace(1.0, 10.0, 6), 4)
    frame = pd.DataFrame({"x": x, "y": 3 + 2 * x + rng.normal(0, 0.2, x.size), "w": rng.uniform(0.5, 2.0, x.size)})
    frame.to_csv(tmp_path / "a.csv", index=False)
    assert main(["export", str(tmp_path / "a.csv"), "-y", "y", "-x", "x", "--weights", "w", "--node", "root",
                 "-o", str(tmp_path / "ex")]) == 0
    capsys.readouterr()
    code, out, err = _cli(["confirm", str(tmp_path / "ex"), str(tmp_path / "a.csv"), "--engine", "duckdb"], capsys)
    assert code == 2 and out == "" and len(err.strip().splitlines()) == 1
    assert "weights column 'w'" in err and "--engine memory" in err


def test_batches_clear_the_progress_line_and_strip_names(tmp_path):
    from bendwise.engine.backends.batches import table_batches

    path = tmp_path / "t.csv"
    path.write_text(" x , y\n1,2\n3,4\n5,6\n")
    said: list[str] = []
    frames = list(table_batches(str(path), "duckdb", batch_rows=2, progress=said.append))
    assert [f.shape[0] for f in frames] == [2, 1] and list(frames[0].columns) == ["x", "y"]
    assert said == [""]  # the last word clears the line before the report is printed
