"""The command line says exactly what is wrong, in one line, and nothing else on stderr."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import bendwise.engine as engine
import numpy as np
import pandas as pd
import pytest
from bendwise.engine.tree.tree import RemedyTree
from bendwise.tui.cli import main
from bendwise.tui.messages import TreeSummary
from bendwise.tui.widgets.detail import render_node

REPO = Path(__file__).resolve().parents[2]
LINE = str(REPO / "datasets" / "straight_line.csv")


def _run(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture
def denormal(tmp_path):
    """Responses around 1e-310: below the smallest normal float, where numpy warns at every turn."""
    rng = np.random.default_rng(1)
    x = np.repeat(np.arange(1.0, 6.0), 3)
    y = (1.0 + 0.5 * x + rng.normal(0, 0.1, x.size)) * 1e-310
    path = tmp_path / "tiny.csv"
    path.write_text("x,y\n" + "".join(f"{a},{float(b)!r}\n" for a, b in zip(x, y, strict=True)), encoding="utf-8")
    return path


@pytest.mark.parametrize("command", ["check", "grow", "export"])
def test_numpy_warnings_never_reach_stderr(denormal, tmp_path, command):
    args = [command, str(denormal), "-y", "y", "-x", "x"]
    if command == "export":
        args += ["--node", "root", "-o", str(tmp_path / "exp")]
    done = subprocess.run([sys.executable, "-m", "bendwise.tui.cli", *args], capture_output=True, text=True, timeout=180,
                          cwd=REPO)
    assert "Warning" not in done.stderr and "warn" not in done.stderr.lower(), done.stderr
    # stderr holds at most the one-line error
    assert done.stderr.count("\n") <= 1, done.stderr
    if done.returncode != 0:
        assert done.returncode == 2 and done.stderr.startswith("bendwise: error: ")


@pytest.mark.parametrize("value", ["-5%", "-0.5", "-inf"])
def test_a_negative_tolerance_is_read_as_a_value_and_refused_with_the_reason(capsys, value):
    code, _, err = _run(capsys, "check", LINE, "-y", "response_au", "-x", "dose_ug", "--tolerance", value)
    assert code == 2
    assert f"tolerance {value!r} must be a finite number ≥ 0" in err and err.count("\n") == 1


def test_an_infinite_weight_is_called_non_finite_not_missing(tmp_path, capsys):
    path = tmp_path / "w.csv"
    path.write_text("x,y,w\n1,2,1\n1,2.1,1\n2,3,inf\n2,3.2,1\n3,4,1\n3,4.1,1\n", encoding="utf-8")
    code, _, err = _run(capsys, "check", str(path), "-y", "y", "-x", "x", "--weights", "w")
    assert code == 2 and "1 non-finite value(s) (rows 3)" in err and "missing" not in err
    path.write_text("x,y,w\n1,2,1\n1,2.1,\n2,3,inf\n2,3.2,1\n3,4,1\n3,4.1,1\n", encoding="utf-8")
    code, _, err = _run(capsys, "check", str(path), "-y", "y", "-x", "x", "--weights", "w")
    assert code == 2 and "1 missing and 1 non-finite value(s) (rows 2, 3)" in err


def _collinear_under_weights() -> pd.DataFrame:
    """All but one setting weighted 1e-300: under these weights x has no spread of its own."""
    x = np.repeat([1.0, 2.0, 3.0, 4.0], 2)
    y = 1.0 + x + np.tile([0.0, 0.1], 4)
    w = np.where(x == 3.0, 1.0, 1e-300)
    return pd.DataFrame({"x": x, "y": y, "w": w})


def test_weights_that_make_a_column_collinear_are_named_as_the_cause(tmp_path, capsys):
    path = tmp_path / "wc.csv"
    _collinear_under_weights().to_csv(path, index=False)
    code, out, _ = _run(capsys, "check", str(path), "-y", "y", "-x", "x", "--weights", "w")
    assert code == 0
    assert "with these weights x is collinear with the other terms" in out and "dropped as collinear" not in out
    code, _, err = _run(capsys, "export", str(path), "-y", "y", "-x", "x", "--weights", "w", "--node", "root",
                        "-o", str(tmp_path / "exp"))
    assert code == 2 and "with these weights x is collinear" in err
    # the app's detail pane says the same
    tree = RemedyTree(engine.make_study(_collinear_under_weights(), y="y", x="x", weights="w"))
    tree.grow(0)
    text = render_node(TreeSummary.take(tree, "aicc"), tree.root.id, width=120).plain
    assert "with these weights x is collinear" in text and "dropped as collinear" not in text
