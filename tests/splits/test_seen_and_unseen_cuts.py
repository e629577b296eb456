"""`seen_and_unseen_layouts` on small inputs whose parts are counted by hand from the rules of
dochar/splits/protocols.py: cut sizes are round(fraction * n), at least 1, leaving at least
``min_kept``; the test cut must leave two layouts when validation is asked for."""

from __future__ import annotations

import pandas as pd
import pytest

from dochar.splits.protocols import make_splits


def _docs(layouts: int, per_layout: int) -> pd.DataFrame:
    return pd.DataFrame({"doc_id": [f"coa-{l}-{d}" for l in range(layouts)
                                    for d in range(per_layout)],
                         "layout_id": [f"L{l}" for l in range(layouts) for _ in range(per_layout)]})


@pytest.mark.parametrize("per_layout, sizes", [(4, (2, 5, 5)), (3, (1, 4, 4))])
def test_a_large_test_share_still_leaves_a_layout_for_training_and_one_for_validation(
        per_layout, sizes):
    """3 layouts of n documents, test_size 0.9, val_size 0.3, seen_test_fraction 0.25:
    unseen test layouts min(max(1, round(2.7)), 3 - 2) = 1; validation layouts of the 2 left
    min(max(1, round(0.6)), 2 - 1) = 1. n = 4: of the last layout's 4 documents
    min(max(1, round(1.0)), 3) = 1 moves to test, then of 3 left min(max(1, round(0.9)), 2) = 1
    to validation: train 2, validation 4 + 1, test 4 + 1. n = 3: min(max(1, round(0.75)), 2)
    = 1 to test, then of 2 left min(max(1, round(0.6)), 1) = 1 to validation: train 1,
    validation 3 + 1, test 3 + 1."""
    (split,) = make_splits(_docs(3, per_layout), "seen_and_unseen_layouts", seed=0,
                           test_size=0.9, val_size=0.3, seen_test_fraction=0.25)
    assert split.protocol == "seen_and_unseen_layouts"
    assert (len(split.train), len(split.val), len(split.test)) == sizes
    layout = {doc: doc.split("-")[1] for doc in split.test}
    assert sorted(split.test_sides.values()) == ["seen"] + ["unseen"] * per_layout
    trained = {doc.split("-")[1] for doc in split.train}
    assert all((layout[doc] in trained) == (side == "seen")
               for doc, side in split.test_sides.items())
    assert len(trained) == 1


@pytest.mark.parametrize("protocol", ["seen_and_unseen_layouts", "layout_held_out"])
def test_the_split_is_a_function_of_the_seed(protocol):
    """Same seed, same parts (five seeds, each cut drawn from several layouts or documents, so
    an unseeded cut would show); over ten seeds the unseen layouts of 12 are not all the same."""
    docs = _docs(12, 3)
    for seed in range(5):
        first = make_splits(docs, protocol, seed=seed)[0]
        again = make_splits(docs, protocol, seed=seed)[0]
        assert (first.train, first.val, first.test) == (again.train, again.val, again.test)
    unseen = {tuple(sorted(doc for doc, side in s.test_sides.items() if side == "unseen"))
              for seed in range(10)
              for s in make_splits(docs, protocol, seed=seed)}
    assert len(unseen) > 1


@pytest.mark.parametrize("protocol", ["layout_held_out", "seen_and_unseen_layouts"])
def test_without_validation_one_training_layout_is_enough(protocol):
    """2 layouts of 4, val_size 0, test_size 0.9: min(max(1, round(1.8)), 2 - 1) = 1 test
    layout; of the other's 4 documents, 1 moves to test (seen side) and none to validation."""
    (split,) = make_splits(_docs(2, 4), protocol, seed=0, test_size=0.9, val_size=0.0)
    assert split.val == []
    assert len({doc.split("-")[1] for doc in split.train}) == 1
    assert "unseen" in split.test_sides.values()


def test_the_seen_test_documents_are_drawn_layout_by_layout():
    """4 layouts of 2 documents, test_size 0.25, no validation: min(max(1, round(1.0)), 4 - 1)
    = 1 layout goes unseen (2 documents); each of the 3 others moves min(max(1, round(0.5)),
    2 - 1) = 1 document to test, so every training layout keeps exactly one document and has
    exactly one on the seen side (drawn from all 6 at once it would be round(0.25 · 6) = 2)."""
    (split,) = make_splits(_docs(4, 2), "seen_and_unseen_layouts", seed=0, test_size=0.25,
                           val_size=0.0, seen_test_fraction=0.25)
    trained = sorted(doc.split("-")[1] for doc in split.train)
    seen = sorted(doc.split("-")[1] for doc, side in split.test_sides.items() if side == "seen")
    assert len(trained) == 3 and trained == seen
    assert sorted(split.test_sides.values()) == ["seen"] * 3 + ["unseen"] * 2


def test_layout_held_out_test_cut_leaves_a_layout_for_training_and_one_for_validation():
    """3 layouts of 2, test_size 0.9, val_size 0.3: test layouts min(max(1, round(2.7)),
    3 - 2) = 1; validation layouts of the 2 left min(max(1, round(0.6)), 2 - 1) = 1."""
    (split,) = make_splits(_docs(3, 2), "layout_held_out", seed=0, test_size=0.9, val_size=0.3)
    assert split.protocol == "layout_held_out"
    assert (len(split.train), len(split.val), len(split.test)) == (2, 2, 2)
    parts = [{doc.split("-")[1] for doc in part} for part in (split.train, split.val, split.test)]
    assert sorted(len(layouts) for layouts in parts) == [1, 1, 1]
    assert set().union(*parts) == {"0", "1", "2"}
    assert split.test_layouts == [f"L{layout}" for layout in parts[2]]
