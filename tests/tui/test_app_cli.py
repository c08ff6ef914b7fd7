"""Launching the app: data errors come BEFORE the app (one line, exit 2); the first frame
imports no heavy library."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest
from bendwise.tui.cli import main

DATA = Path(__file__).resolve().parents[2] / "datasets" / "sensor_calibration.csv"


@pytest.fixture
def terminal(monkeypatch):
    """As if run in a terminal (pytest captures the standard streams; the app refuses without one)."""
    monkeypatch.setattr("bendwise.tui.commands.open.terminal_problem", lambda *a, **k: None)
    monkeypatch.setattr("bendwise.tui.commands.demo.terminal_problem", lambda *a, **k: None)


@pytest.mark.parametrize(
    ("argv", "needle"),
    [
        (["open", "no-such-file.csv", "-y", "a", "-x", "b"], "file not found"),
        ([str(DATA), "-y", "signal", "-x", "conc_mg_l"], "did you mean 'signal_mv'"),
        ([str(DATA), "-y", "standard_id", "-x", "conc_mg_l"], "not numeric"),
        ([str(DATA), "-y", "signal_mv"], "give both -y and -x"),
        ([str(DATA), "-y", "signal_mv", "-x", "conc_mg_l", "--covariates", "nope"], "covariate column 'nope'"),
    ],
)
def test_data_errors_are_one_line_before_the_app(capsys, terminal, argv, needle):
    assert main(argv) == 2
    out, err = capsys.readouterr()
    assert out == "" and err.count("\n") == 1 and needle in err and err.startswith("bendwise: error:")


def test_depth_is_checked_by_the_parser(capsys):
    assert main(["demo", "--depth", "9"]) == 2
    assert "depth 9 is out of range" in capsys.readouterr().err


def test_demo_without_datasets_is_one_clear_line(capsys, monkeypatch, tmp_path, terminal):
    import bendwise.tui.reading as data
    monkeypatch.setattr(data, "datasets_dir", lambda: tmp_path / "datasets")
    assert main(["demo"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "demo data not found" in err


def test_first_frame_imports_no_heavy_library():
    """The app module, its screens and widgets load without pandas, scipy or statsmodels."""
    code = (
        "import sys\n"
        "import bendwise.tui.app, tui.screens.main, tui.screens.start, tui.screens.compare, tui.screens.help\n"
        "import bendwise.tui.widgets.detail, tui.widgets.charts, tui.widgets.status, tui.dialogs, tui.exporting\n"
        "import bendwise.tui.commands.open, tui.commands.demo\n"
        "heavy = [m for m in ('pandas', 'scipy', 'statsmodels', 'plotext') if m in sys.modules]\n"
        "print(','.join(heavy))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True,
                         cwd=Path(__file__).resolve().parents[2])
    assert out.stdout.strip() == ""


def test_make_app_defaults_to_the_demo():
    from bendwise.tui.app import make_app

    app = make_app()
    assert app.request.path.endswith("sensor_calibration.csv")
    assert (app.request.y, app.request.x, app.request.covariates) == ("signal_mv", "conc_mg_l", ("run_day", "temp_c"))


def test_demo_starts_the_app_before_any_heavy_import():
    """`bendwise demo` hands the app no study: the table is read in the app's worker, so pandas,
    scipy and statsmodels load after the first frame is painted, not before it."""
    code = (
        "import sys\n"
        "import bendwise.tui.commands.demo as demo\n"
        "seen = {}\n"
        "def launch(req, **kw):\n"
        "    seen['heavy'] = [m for m in ('pandas', 'scipy', 'statsmodels', 'pyarrow') if m in sys.modules]\n"
        "    seen['study'] = kw.get('study')\n"
        "    return 0\n"
        "demo.launch = launch\n"
        "demo.terminal_problem = lambda *a, **k: None\n"
        "from bendwise.tui.cli import main\n"
        "assert main(['demo']) == 0\n"
        "print(','.join(seen['heavy']), seen['study'] is None)\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True,
                         cwd=Path(__file__).resolve().parents[2])
    assert out.stdout.split() == ["True"], out.stdout


def test_check_loads_no_app_machinery(tmp_path):
    """`bendwise check` is a short process: it imports neither Textual nor asyncio (the app's)."""
    table = tmp_path / "small.csv"
    table.write_text("x,y\n1,2\n1,2.1\n2,3\n2,3.2\n3,4.1\n3,3.9\n4,5.5\n4,5.3\n")
    code = (
        "import sys\n"
        "from bendwise.tui.cli import main\n"
        f"code = main(['check', {str(table)!r}, '-y', 'y', '-x', 'x'])\n"
        "print(code in (0, 1), [m for m in ('asyncio', 'textual', 'rich', 'plotext') if m in sys.modules])\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True,
                         cwd=Path(__file__).resolve().parents[2])
    assert out.stdout.strip().splitlines()[-1] == "True []", out.stdout
