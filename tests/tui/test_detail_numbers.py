"""The detail pane reads typed engine results and writes their numbers through engine.numfmt."""

from __future__ import annotations

from pathlib import Path

import bendwise.engine as engine
import pandas as pd
from bendwise.engine.numfmt import fmt_num, p_clause
from bendwise.engine.tree.tree import RemedyTree
from bendwise.tui.messages import TreeSummary
from bendwise.tui.widgets.detail import render_node

DATA = Path(__file__).resolve().parents[2] / "datasets"


def test_detail_shows_typed_values_formatted_once():
    study = engine.make_study(pd.read_csv(DATA / "sensor_calibration.csv"), y="signal_mv", x="conc_mg_l")
    tree = RemedyTree(study)
    tree.grow(2)
    board = TreeSummary.take(tree, "aicc")
    bc_node = next(n for n in tree.nodes.values() if n.detail.boxcox is not None and n.score is not None)
    text = render_node(board, bc_node.id, width=120).plain
    prof = bc_node.detail.boxcox
    assert f"λ̂ = {fmt_num(prof.lam_hat, 4)}, 95% interval ({fmt_num(prof.low, 3)}, {fmt_num(prof.high, 3)})" in text
    s = bc_node.score
    assert fmt_num(s.criteria.aicc, 6) in text and fmt_num(s.criteria.bic, 6) in text
    assert f"nested test against {bc_node.parent}: {bc_node.nested.summary()}" in text
    assert f"equal spread across levels ({s.spread.method}): {p_clause(s.spread.p)}" in text
    assert "choice(s)" not in text and "k counts 1 choice made from the data" in text
