"""The app on a table whose rows stay in files (the DuckDB engine): `bendwise open` builds the
SQL study before the app starts, the app grows the same tree as the engine, and scans that
happen while the app runs are reported in its status row, never on the terminal behind it."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from engine.remedies import RemedyTree
from tui.cli import main
from tui.screens.data import DataRequest

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
    import tui.commands.open as open_cmd

    folder = _files(tmp_path)
    seen = {}

    def fake_launch(req, **kw):
        seen["req"], seen["study"] = req, kw["study"]
        return 0

    monkeypatch.setattr(open_cmd, "launch", fake_launch)
    # a folder goes through DuckDB with --engine auto
    assert main(["open", str(folder), "-y", "signal", "-x", "conc", "--covariates", "temp"]) == 0
    study = seen["study"]
    assert type(study).__name__ == "SqlStudy" and study.n == 480 and study.progress is None
    assert study._info["series"] is not None  # clean, positive: the one-scan path


def test_open_with_duckdb_needs_the_columns(tmp_path, capsys):
    folder = _files(tmp_path)
    assert main(["open", str(folder)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "give -y and -x" in err[0]


async def test_app_grows_the_engine_tree_over_files(tmp_path):
    from engine.sql import make_sql_study
    from tui.app import make_app
    from tui.widgets.detail import NodeDetail
    from tui.widgets.remedy_tree import RemedyTreeView

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
    from engine.sql import make_sql_study
    from engine.transforms import Transform
    from tui.app import make_app
    from tui.messages import ScoringProgressed

    folder = _files(tmp_path)
    study = make_sql_study(str(folder), y="signal", x="conc", exact=True)
    study.progress = None
    app = make_app(request=DataRequest(str(folder), "signal", "conc"), study=study, depth=0)
    async with app.run_test(size=(100, 30)) as pilot:
        await app.workers.wait_for_complete()
        await pilot.pause()
        screen = app.screen
        posted: list = []
        real_post = screen.post_message
        screen.post_message = lambda m: posted.append(m) or real_post(m)  # type: ignore[method-assign]
        with screen._scans_reported():
            study._scan([Transform("boxcox", 0.3)])
        labels = [m.label for m in posted if isinstance(m, ScoringProgressed)]
        assert any(lb.startswith("scanning 480 rows") for lb in labels), labels
        assert study.progress is None and study.exact_scans >= 1


def test_check_over_files_names_its_spread_test(tmp_path, capsys):
    folder = _files(tmp_path)
    assert main(["check", str(folder), "-y", "signal", "-x", "conc"]) == 0
    out = capsys.readouterr().out
    line = next(ln for ln in out.splitlines() if ln.strip().startswith("equal spread"))
    assert line.strip().startswith("equal spread (Bartlett): ")
    assert "Brown–Forsythe needs the rows: --engine memory" in out


def test_export_over_files_says_it_needs_the_rows(tmp_path, capsys):
    from engine.remedies import RemedyTree
    from engine.sql import make_sql_study
    from tui.exporting import export_node

    folder = _files(tmp_path)
    out = tmp_path / "spec"
    assert main(["export", str(folder), "-y", "signal", "-x", "conc", "--suggested", "-o", str(out)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "export needs the rows in memory" in err[0] and "--engine memory" in err[0]
    assert not out.exists()
    # the app's export action gets the same one-line reason (its dialog shows ValueError messages)
    tree = RemedyTree(make_sql_study(str(folder), y="signal", x="conc"))
    with pytest.raises(ValueError, match="export needs the rows in memory"):
        export_node(tree, "root", out, data_path=str(folder))
