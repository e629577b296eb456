"""The document list a split is made from, and what the split records about itself: the word
table's per-document columns read and checked for agreement (`documents_of`), the side of a
test document without a layout, the fold number of each assignment, and the located errors when
the layouts are too few. Expected values and messages are written out by hand from the rules the
docstrings state (rule of the house: bad input gets a located error naming what and where)."""

from __future__ import annotations

import pandas as pd
import pytest

from dochar.splits.protocols import SplitError, documents_of, layout_sides, make_splits


def words(rows: list[tuple[str, str | None, str | None]], columns=("layout_id", "split")
          ) -> pd.DataFrame:
    """One word per (doc_id, layout_id, split) row; a column left out of ``columns`` is absent."""
    frame = pd.DataFrame(rows, columns=["doc_id", "layout_id", "split"])
    return frame[["doc_id", *columns]]


def test_a_word_table_without_doc_id_is_refused_with_its_name():
    with pytest.raises(SplitError) as error:
        documents_of(pd.DataFrame({"layout_id": ["L1"]}))
    assert str(error.value) == "the word table has no 'doc_id' column"


def test_a_missing_layout_column_gives_empty_layouts_and_the_split_column_is_still_read():
    table = words([("d1", None, "train"), ("d1", None, "train"), ("d2", None, "test")],
                  columns=("split",))
    docs = documents_of(table)
    assert docs.to_dict("list") == {"doc_id": ["d1", "d2"], "layout_id": ["", ""],
                                    "split": ["train", "test"]}


def test_a_missing_split_column_gives_empty_splits():
    docs = documents_of(words([("d1", "L1", None), ("d2", "L2", None)], columns=("layout_id",)))
    assert docs["split"].tolist() == ["", ""]


def test_a_blank_layout_value_reads_as_no_layout():
    docs = documents_of(words([("d1", None, "train"), ("d2", "L2", "train")]))
    assert docs["layout_id"].tolist() == ["", "L2"]


def test_a_document_with_two_layouts_is_named():
    table = words([("a0", "L1", ""), ("a0", "L1", ""), ("d1", "L1", ""), ("d1", "L2", "")])
    with pytest.raises(SplitError) as error:
        documents_of(table)
    assert str(error.value) == ("documents ['d1'] have more than one 'layout_id' value; "
                                "one value per document is needed")


def test_at_most_five_disagreeing_documents_are_named_in_order():
    rows = [("a0", "L1", "train")]        # agrees with itself: never named
    for doc in ("d6", "d5", "d4", "d3", "d2", "d1"):
        rows += [(doc, "L1", "train"), (doc, "L1", "test")]
    with pytest.raises(SplitError) as error:
        documents_of(words(rows))
    assert str(error.value) == ("documents ['d1', 'd2', 'd3', 'd4', 'd5'] have more than one "
                                "'split' value; one value per document is needed")


def test_a_test_document_without_a_layout_has_no_side():
    # d9 is absent from the mapping, d8 maps to "": neither side is known. L1 has a training
    # document, so t1 is seen; "XXXX" has none (the training document d7 has no layout), unseen.
    layout_of = {"d1": "L1", "d8": "", "t1": "L1", "t2": "XXXX"}
    sides = layout_sides(["d1", "d7"], ["t1", "t2", "d8", "d9"], layout_of)
    assert sides == {"t1": "seen", "t2": "unseen", "d8": "", "d9": ""}


def five_layouts() -> pd.DataFrame:
    return pd.DataFrame({"doc_id": [f"d{i}" for i in range(15)],
                         "layout_id": [f"L{i % 5}" for i in range(15)], "split": ""})


@pytest.mark.parametrize("protocol, options", [("leave_one_layout_out", {}),
                                               ("layout_kfold", {"n_folds": 3})])
def test_each_fold_records_its_own_number(protocol, options):
    assignments = make_splits(five_layouts(), protocol, seed=0, val_size=0, **options)
    assert [a.fold for a in assignments] == list(range(len(assignments)))
    assert len(assignments) == (5 if protocol == "leave_one_layout_out" else 3)


def test_one_split_protocols_record_no_fold():
    (assignment,) = make_splits(five_layouts(), "layout_held_out", seed=0)
    assert assignment.fold is None


def test_too_few_layouts_are_counted_in_the_error():
    # layout_kfold, 5 folds, with validation: 5 + 1 layouts needed; the documents have 5
    with pytest.raises(SplitError) as error:
        make_splits(five_layouts(), "layout_kfold", seed=0, n_folds=5)
    assert str(error.value) == ("protocol 'layout_kfold' needs at least 6 distinct layouts "
                                "(train, test, validation; 5 folds); the documents have 5")


def test_a_fold_too_small_for_a_validation_cut_is_named():
    # 3 layouts in 2 folds: one fold tests 2 layouts, its training pool keeps 1 layout, from
    # which no validation layout can be carved; the message names that fold's pool
    docs = five_layouts()
    docs = docs[docs["layout_id"].isin(["L0", "L1", "L2"])]
    with pytest.raises(SplitError, match=r"^cannot carve a validation set by layout from the "
                                         r"training pool of fold [01] with 1 layout\(s\); need "
                                         r"at least 2 \(use more layouts, fewer folds, or "
                                         r"val_size=0\)$"):
        make_splits(docs, "layout_kfold", seed=0, n_folds=2, val_size=0.5)
