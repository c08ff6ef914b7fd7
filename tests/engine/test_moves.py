"""Moves as data: every family speaks the one interface, says which departure it answers, and
prices itself honestly; a new family is one registration away."""

from __future__ import annotations

import bendwise.engine as engine
import pytest
from bendwise.engine.tree import tree as tree_module
from bendwise.engine.tree.moves import MOVES, Offer, Skip, cost
from bendwise.engine.tree.suggestion import move_family


def test_every_family_speaks_the_interface():
    assert len({type(f) for f in MOVES}) == len(MOVES) == 8
    for family in MOVES:
        assert isinstance(family.name, str) and family.name
        assert family.answers in {"response", "shape", "spread", "covariate"}
        assert callable(family.propose)


def _offers(tree, node):
    return [(family, item) for family in MOVES for item in family.propose(tree, node) if isinstance(item, Offer)]


def test_each_offer_answers_what_its_family_says(sensor_tree):
    seen = set()
    for node in list(sensor_tree.nodes.values())[:12]:
        for family, offer in _offers(sensor_tree, node):
            got = move_family(node.spec, offer.spec)
            assert got.split(":")[0] == family.answers, (family.name, offer.label, got)
            seen.add(family.answers)
    assert seen >= {"response", "shape", "covariate"}


def test_costs_along_a_path_add_up_to_k(sensor_tree):
    """k of a node = k of the straight line + the costs of the moves that reached it."""
    root_k = sensor_tree.root.score.k
    checked = 0
    for node in sensor_tree.nodes.values():
        if node.parent is None or node.score is None or node.score.fit.aliased:
            continue
        total, cur = 0, node
        while cur.parent is not None:
            parent = sensor_tree.nodes[cur.parent]
            total += cost(sensor_tree.study, parent.spec, cur.spec)
            cur = parent
        assert root_k + total == node.score.k, node.spec.label()
        checked += 1
    assert checked > 10


def test_the_tree_uses_only_the_offers_and_skips_it_is_given(sensor_tree):
    node = sensor_tree.root
    items = [item for family in MOVES for item in family.propose(sensor_tree, node)]
    offers, pruned = sensor_tree._moves(node)
    assert [o.label for o in offers] == [i.label for i in items if isinstance(i, Offer)]
    assert pruned == [(i.label, i.reason) for i in items if isinstance(i, Skip)]


class _CubeRootY:
    """A family written for this test only: y^(1/3)."""

    name = "cube root of y"
    answers = "response"

    def propose(self, tree, node):
        from bendwise.engine.stats.transforms import IDENTITY, boxcox

        if node.spec.response != IDENTITY or node.spec.weights is not None:
            return [Skip("∛y", "y is already transformed or weighted")]
        child = node.spec.with_(response=boxcox(1 / 3))
        return [Offer("∛y", child, cost(tree.study, node.spec, child))]


def test_a_new_family_is_one_registration(monkeypatch, sensor_study):
    monkeypatch.setattr(tree_module, "MOVES", MOVES + (_CubeRootY(),))
    tree = engine.grow(sensor_study, depth=1)
    labels = {n.move for n in tree.nodes.values()}
    assert "∛y" in labels
    node = next(n for n in tree.nodes.values() if n.move == "∛y")
    assert node.score is not None and node.score.k == tree.root.score.k + 1


@pytest.mark.parametrize("family", MOVES, ids=lambda f: f.name)
def test_families_propose_on_a_replicate_free_line(family):
    """No family raises on a set with one row per setting (they skip, with reasons)."""
    import pandas as pd

    frame = pd.DataFrame({"x": [1.0, 2.0, 3.0, 4.0, 5.0], "y": [2.1, 3.9, 6.2, 7.8, 10.1]})
    tree = engine.grow(engine.make_study(frame, y="y", x="x"), depth=0)
    for item in family.propose(tree, tree.root):
        assert isinstance(item, (Offer, Skip)) and item.label
