"""The app on a table whose rows stay in files (the DuckDB engine): `bendwise open` builds the
SQL study before the app starts, the app grows the same tree as the engine, and scans that
happen while the app runs are reported in its status row, never on the terminal behind it."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from bendwise.engine.tree.tree import RemedyTree
from bendwise.tui.cli import main
from bendwise.tui.reading import DataRequest

pytestmark = pytest.mark.slow  # app walks under Pilot: run 'python -m pytest tests/tui' when you touch the app

duckdb = pytest.importorskip("duckdb")


def _files(tmp_path):
    """Two Parquet files in a folder: calibration-like data, six levels, one numeric covariate."""
    rng = np.random.default_rng(17)
    folder = tmp_path / "runs"
    folder.mkdir()
    for part in range(2):
        x = np.repeat([0.5, 1.0, 2.0, 4.0, 8.0, 16.0], 40)
        temp = rng.normal(21.0, 1.5, x.size)
        y = np.exp(0.3 + 0.9 * np.log(x) + 0.01 * (temp - 21.0) + rng.normal(0, 0.04, x.size))
        pd.DataFrame({"signal": y, "conc": x, "temp": temp}).to_parquet(folder / f"part{part}.parquet")
    return folder


def test_open_builds_the_sql_study_and_launches(tmp_path, monkeypatch, capsys):
    import bendwise.tui.commands.open as open_cmd
    folder = _files(tmp_path)
    seen = {}

    def fake_launch(req, **kw):
        seen["req"], seen["study"] = req, kw["study"]
        return 0

    monkeypatch.setattr(open_cmd, "launch", fake_launch)
    monkeypatch.setattr(open_cmd, "terminal_problem", lambda *a, **k: None)  # as if in a terminal
    # a folder goes through DuckDB with --engine auto
    assert main(["open", str(folder), "-y", "signal", "-x", "conc", "--covariates", "temp"]) == 0
    study = seen["study"]
    assert type(study).__name__ == "SqlStudy" and study.n == 480 and study.progress is None
    assert study._info["series"] is not None  # clean, positive: the one-scan path


def test_open_with_duckdb_needs_the_columns(tmp_path, capsys, monkeypatch):
    monkeypatch.setattr("bendwise.tui.commands.open.terminal_problem", lambda *a, **k: None)  # as if in a terminal
    folder = _files(tmp_path)
    assert main(["open", str(folder)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "give -y and -x" in err[0]


async def test_app_grows_the_engine_tree_over_files(tmp_path):
    from bendwise.engine.backends.duckdb import make_sql_study
    from bendwise.tui.app import make_app
    from bendwise.tui.widgets.detail import NodeDetail
    from bendwise.tui.widgets.remedy_tree import RemedyTreeView

    folder = _files(tmp_path)
    reference = RemedyTree(make_sql_study(str(folder), y="signal", x="conc", covariates=["temp"]))
    reference.grow(2)
    study = make_sql_study(str(folder), y="signal", x="conc", covariates=["temp"])
    app = make_app(request=DataRequest(str(folder), "signal", "conc", ("temp",)), study=study, depth=2)
    async with app.run_test(size=(100, 30)) as pilot:
        await app.workers.wait_for_complete()
        await pilot.pause()
        board = app.screen.board
        assert board is not None and board.complete
        assert set(board.nodes) == set(reference.nodes)
        for nid, node in reference.nodes.items():
            if node.score is not None:
                assert board.nodes[nid].score.criteria.aicc == pytest.approx(node.score.criteria.aicc, rel=1e-12)
        text = app.screen.query_one(NodeDetail).text
        assert "equal spread across levels (Bartlett)" in text
        assert app.screen.query_one(RemedyTreeView) is not None
        assert study.progress is None  # restored after the worker


async def test_scans_during_work_go_to_the_status_row(tmp_path):
    from bendwise.engine.backends.duckdb import make_sql_study
    from bendwise.engine.stats.transforms import Transform
    from bendwise.tui.app import make_app
    from bendwise.tui.widgets.grower import TreeGrower

    folder = _files(tmp_path)
    study = make_sql_study(str(folder), y="signal", x="conc", exact=True)
    study.progress = None
    app = make_app(request=DataRequest(str(folder), "signal", "conc"), study=study, depth=0)
    async with app.run_test(size=(100, 30)) as pilot:
        await app.workers.wait_for_complete()
        await pilot.pause()
        grower = app.screen.query_one(TreeGrower)
        posted: list = []
        real_post = grower.post_message
        grower.post_message = lambda m: posted.append(m) or real_post(m)  # type: ignore[method-assign]
        with grower._scans_reported(study):
            study._scan([Transform("boxcox", 0.3)])
        labels = [m.label for m in posted if isinstance(m, TreeGrower.Progressed)]
        assert any(lb.startswith("scanning 480 rows") for lb in labels), labels
        assert study.progress is None and study.exact_scans >= 1


def test_check_over_files_names_its_spread_test(tmp_path, capsys):
    folder = _files(tmp_path)
    assert main(["check", str(folder), "-y", "signal", "-x", "conc"]) == 0
    out = capsys.readouterr().out
    line = next(ln for ln in out.splitlines() if ln.strip().startswith("equal spread"))
    assert line.strip().startswith("equal spread (Bartlett): ")
    assert "Brown–Forsythe needs the rows: --engine memory" in out


def test_export_over_files_hands_on_the_same_model(tmp_path, capsys):
    # reference: the same rows read into memory and exported there; the spec validates against
    # the published JSON Schema (jsonschema package); the reproduction script refits it with
    # statsmodels on the files (all rows) and agrees
    import json
    import subprocess
    import sys

    import jsonschema
    from bendwise.engine.handon.specfile import schema_path

    folder = _files(tmp_path)
    out_sql, out_mem = tmp_path / "spec_sql", tmp_path / "spec_mem"
    args = ["-y", "signal", "-x", "conc", "--covariates", "temp", "--node", "root"]
    assert main(["export", str(folder), *args, "-o", str(out_sql)]) == 0
    whole = tmp_path / "whole.parquet"
    pd.concat([pd.read_parquet(f) for f in sorted(folder.glob("*.parquet"))]).to_parquet(whole)
    assert main(["export", str(whole), *args, "-o", str(out_mem), "--engine", "memory"]) == 0
    capsys.readouterr()
    a = json.loads((out_sql / "spec.json").read_text())
    b = json.loads((out_mem / "spec.json").read_text())
    jsonschema.Draft202012Validator(json.loads(schema_path().read_text())).validate(a)
    for ca, cb in zip(a["fit"]["coefficients"], b["fit"]["coefficients"], strict=True):
        assert ca["name"] == cb["name"] and ca["estimate"] == pytest.approx(cb["estimate"], rel=1e-9)
    assert a["fit"]["sigma"] == pytest.approx(b["fit"]["sigma"], rel=1e-9)
    for la, lb in zip(a["calibration"]["levels"], b["calibration"]["levels"], strict=True):
        assert la["n"] == lb["n"] and la["mean_y"] == pytest.approx(lb["mean_y"], rel=1e-12)
        assert la["sd_y"] == pytest.approx(lb["sd_y"], rel=1e-9)
    assert (a["calibration"]["y_min"], a["calibration"]["y_max"]) == (b["calibration"]["y_min"], b["calibration"]["y_max"])
    assert a["training"]["count"] == 480 and not a["training"]["sampled"]  # 480 rows: all of them
    assert sorted(a["training"]["residuals"]) == pytest.approx(sorted(b["training"]["residuals"]), abs=1e-9)
    assert a["provenance"]["data"]["reading"]["format"] == "parquet" and a["provenance"]["data"]["size_bytes"] > 0
    run = subprocess.run([sys.executable, str(out_sql / "reproduce.py")], capture_output=True, text=True, timeout=120)
    assert run.returncode == 0, run.stderr
    assert "OK" in run.stdout and "WARNING" not in run.stderr
    # a glob names the same files
    out_glob = tmp_path / "spec_glob"
    assert main(["export", str(folder / "*.parquet"), *args, "-o", str(out_glob)]) == 0
    g = json.loads((out_glob / "spec.json").read_text())
    assert g["provenance"]["data"]["sha256"] == a["provenance"]["data"]["sha256"]


def test_charts_over_files_use_a_seeded_sample(tmp_path):
    # reference: the same rows in memory; with a sample as large as the table every row is drawn,
    # so the level means of the residuals must be the in-memory ones
    import bendwise.engine as engine
    from bendwise.engine.backends.duckdb import make_sql_study
    from bendwise.engine.handon.chart_data import curve_chart, residual_chart

    folder = _files(tmp_path)
    tree = RemedyTree(make_sql_study(str(folder), y="signal", x="conc"))
    tree.grow(1)
    frame = pd.concat([pd.read_parquet(f) for f in sorted(folder.glob("*.parquet"))])
    mem = RemedyTree(engine.make_study(frame, y="signal", x="conc"))
    mem.grow(1)
    by_spec = {n.spec: n for n in mem.nodes.values()}  # a small table's Box–Cox λ may differ (grid vs exact)
    compared = 0
    for node in tree.nodes.values():
        small = residual_chart(tree.study, node.score, max_points=100)
        assert small.x.size == 100 and curve_chart(tree.study, node.score, max_points=100).x.size == 100
        if node.spec not in by_spec:
            continue
        compared += 1
        r = residual_chart(tree.study, node.score, max_points=1000)
        ref = residual_chart(mem.study, by_spec[node.spec].score, max_points=1000)
        assert r.x.size == 480 and np.allclose(r.level_mean, ref.level_mean, rtol=1e-9, atol=1e-12)
        assert np.allclose(np.sort(r.residual), np.sort(ref.residual), rtol=1e-9, atol=1e-12)
    assert compared >= 4
