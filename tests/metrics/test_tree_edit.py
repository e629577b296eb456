"""The Zhang–Shasha distance of records against the ``zss`` package (the reference
implementation of Zhang & Shasha 1989) on random ordered trees, with unit costs and with the
record costs (a leaf's length to insert or delete, character edit distance to change)."""

from __future__ import annotations

import random

import pytest
import zss

from dochar.metrics.records import _insert_cost, _label_cost, tree_distance, to_tree
from dochar.metrics.tree_edit import PostorderTree, tree_edit_distance


def _random_tree(rng: random.Random, depth: int = 0) -> tuple[str, list]:
    kids = [] if depth >= 3 else [_random_tree(rng, depth + 1)
                                  for _ in range(rng.choice([0, 0, 1, 2, 3]))]
    return rng.choice("abcde"), kids


def _as_zss(node: tuple[str, list]) -> zss.Node:
    out = zss.Node(node[0])
    for kid in node[1]:
        out.addkid(_as_zss(kid))
    return out


def _postorder(node: tuple[str, list]) -> PostorderTree:
    return PostorderTree.build(node, children=lambda n: n[1], label=lambda n: n[0])


@pytest.mark.parametrize("seed", range(40))
def test_unit_cost_distance_matches_zss_on_random_trees(seed):
    rng = random.Random(seed)
    a, b = _random_tree(rng), _random_tree(rng)
    expected = zss.simple_distance(_as_zss(a), _as_zss(b))   # unit insert, delete, relabel
    got = tree_edit_distance(_postorder(a), _postorder(b), lambda _: 1,
                             lambda x, y: int(x != y))
    assert got == expected


def test_zhang_shasha_worked_example():
    # Zhang & Shasha (1989), Fig. 1 as reproduced in zss's README: f(d(a c(b)) e) against
    # f(c(d(a b)) e) is 2 with unit costs (delete c under d, insert c above d; figure and value quoted
    # from memory, and checked by the zss comparisons below).
    first = ("f", [("d", [("a", []), ("c", [("b", [])])]), ("e", [])])
    second = ("f", [("c", [("d", [("a", []), ("b", [])])]), ("e", [])])
    assert tree_edit_distance(_postorder(first), _postorder(second), lambda _: 1,
                              lambda x, y: int(x != y)) == 2


@pytest.mark.parametrize("seed", range(10))
def test_record_distance_matches_zss_with_record_costs(seed):
    rng = random.Random(100 + seed)
    words = ["7.2", "mg/L", "pass", "lead", "ISO 17294", "2026-03-01", "LOT-41"]

    def record() -> dict:
        out = {f"f{i}": rng.choice(words) for i in range(rng.randint(0, 4))}
        out["items"] = [{c: rng.choice(words) for c in rng.sample(["a", "b", "c"], 2)}
                        for _ in range(rng.randint(0, 3))]
        return out

    pred, true = record(), record()
    expected = zss.distance(_as_zss(to_tree(pred)), _as_zss(to_tree(true)),
                            get_children=zss.Node.get_children,
                            insert_cost=lambda n: _insert_cost(n.label),
                            remove_cost=lambda n: _insert_cost(n.label),
                            update_cost=lambda x, y: _label_cost(x.label, y.label))
    assert tree_distance(pred, true) == expected
