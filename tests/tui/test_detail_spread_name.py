"""The node detail names the spread test the engine ran: Brown–Forsythe from rows in memory,
Bartlett from level variances with the SQL engine."""

from __future__ import annotations

import bendwise.engine as engine
import numpy as np
import pandas as pd
import pytest
from bendwise.engine.tree.tree import RemedyTree
from bendwise.tui.messages import TreeSummary
from bendwise.tui.widgets.detail import render_node


def _frame() -> pd.DataFrame:
    rng = np.random.default_rng(3)
    x = np.repeat(np.arange(1.0, 7.0), 5)
    y = np.exp(0.5 + 0.2 * x + rng.normal(0, 0.05, x.size))
    return pd.DataFrame({"resp": y, "dose": x})


def _root_text(study) -> str:
    tree = RemedyTree(study)
    tree.grow(1)
    board = TreeSummary.take(tree, "aicc")
    return render_node(board, tree.root.id, width=120).plain


def test_memory_detail_names_brown_forsythe():
    text = _root_text(engine.make_study(_frame(), y="resp", x="dose"))
    assert "equal spread across levels (Brown–Forsythe): p = " in text


def test_sql_detail_names_bartlett(tmp_path):
    pytest.importorskip("duckdb")
    from bendwise.engine.backends.duckdb import make_sql_study

    path = tmp_path / "d.parquet"
    _frame().to_parquet(path)
    text = _root_text(make_sql_study(str(path), y="resp", x="dose"))
    assert "equal spread across levels (Bartlett): p = " in text
    assert "Brown–Forsythe" not in text.split("equal spread across levels")[1].splitlines()[0]
