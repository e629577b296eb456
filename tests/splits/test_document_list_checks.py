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
    assert {a.protocol for a in assignments} == {protocol}
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


def test_too_few_layouts_without_validation_name_only_train_and_test():
    # val_size 0: 2 layouts needed (train, test); one layout given
    docs = pd.DataFrame({"doc_id": ["d0", "d1"], "layout_id": ["L0", "L0"]})
    with pytest.raises(SplitError) as error:
        make_splits(docs, "layout_held_out", seed=0, val_size=0)
    assert str(error.value) == ("protocol 'layout_held_out' needs at least 2 distinct layouts "
                                "(train, test); the documents have 1")


# ------------------------------------------- make_splits on a raw document frame (public API)
# make_splits may be given a frame that never passed through documents_of; its own checks and
# normalisation (doc ids as text, blank layout and split values read as none, one row per
# document, at least one document) are worked out by hand below.

PROTOCOL_NAMES = ("['random', 'fixed', 'layout_held_out', 'layout_kfold', "
                  "'leave_one_layout_out', 'seen_and_unseen_layouts']")


def test_an_unknown_protocol_is_named_with_the_choices():
    with pytest.raises(SplitError) as error:
        make_splits(five_layouts(), "by_colour", seed=0)
    assert str(error.value) == f"unknown split protocol 'by_colour'; choose one of {PROTOCOL_NAMES}"


@pytest.mark.parametrize("option, value, message", [
    ("test_size", 0, "test_size must be a fraction in (0, 1), got 0"),
    ("test_size", 1, "test_size must be a fraction in (0, 1), got 1"),
    ("test_size", 1.5, "test_size must be a fraction in (0, 1), got 1.5"),
    ("val_size", 1, "val_size must be a fraction in [0, 1), got 1"),
    ("val_size", -0.1, "val_size must be a fraction in [0, 1), got -0.1"),
])
def test_sizes_outside_their_range_are_refused_with_the_range(option, value, message):
    """test_size is a fraction in (0, 1), val_size in [0, 1) (0 means no validation): the rule
    of the module docstring, the interval written out by hand."""
    with pytest.raises(SplitError) as error:
        make_splits(five_layouts(), "random", seed=0, **{option: value})
    assert str(error.value) == message


def test_a_frame_without_doc_id_is_refused_with_its_columns():
    with pytest.raises(SplitError) as error:
        make_splits(pd.DataFrame({"layout_id": ["L1"], "split": ["train"]}), "random", seed=0)
    assert str(error.value) == ("the document list needs a 'doc_id' column; it has "
                                "['layout_id', 'split']")


def test_numeric_doc_ids_come_back_as_sorted_text():
    docs = pd.DataFrame({"doc_id": [10, 2, 1, 3]})
    (split,) = make_splits(docs, "random", seed=0, val_size=0)
    assert sorted(split.train + split.test) == ["1", "10", "2", "3"]   # text order, by hand
    assert all(isinstance(doc, str) for doc in split.train + split.test)
    assert split.train == sorted(split.train) and len(split.test) == 1


def test_a_frame_without_layouts_splits_at_random_and_gives_no_sides():
    """No layout_id column: every layout is "" and no test document has a side."""
    (split,) = make_splits(pd.DataFrame({"doc_id": ["d0", "d1", "d2", "d3"]}), "random",
                           seed=0, val_size=0)
    assert split.test_sides == dict.fromkeys(split.test, "") and len(split.test) == 1


def test_blank_and_missing_layout_values_read_as_no_layout():
    docs = pd.DataFrame({"doc_id": [f"d{i}" for i in range(6)],
                         "layout_id": ["L0", " ", None, "L1", "L2", "\t"]})
    with pytest.raises(SplitError) as error:
        make_splits(docs, "layout_held_out", seed=0)
    assert str(error.value) == (
        "protocol 'layout_held_out' needs a layout_id for every document; 3 of 6 have none "
        "(e.g. ['d1', 'd2', 'd5']). Fill the column with inferred layout families: "
        "dochar.splits.layout_families.infer_layout_families(pages, threshold), or in a run set "
        "split.infer_layouts=true (e.g. split=inferred_layouts)")


def test_layout_values_with_stray_spaces_name_one_layout():
    # " L0" is L0 and "L1 " is L1: two layouts, so leave-one-layout-out makes two folds
    docs = pd.DataFrame({"doc_id": ["d0", "d1", "d2", "d3"],
                         "layout_id": ["L0", " L0", "L1 ", "L1"]})
    folds = make_splits(docs, "leave_one_layout_out", seed=0, val_size=0)
    assert sorted(fold.test_layouts[0] for fold in folds) == ["L0", "L1"]
    assert sorted(fold.test for fold in folds) == [["d0", "d1"], ["d2", "d3"]]


def test_split_values_with_stray_spaces_name_their_parts():
    docs = pd.DataFrame({"doc_id": ["d0", "d1", "d2", "d3"],
                         "split": [" train", "train ", "\tval", "TEST\n"]})
    (split,) = make_splits(docs, "fixed", seed=0)
    assert (split.train, split.val, split.test) == (["d0", "d1"], ["d2"], ["d3"])


@pytest.mark.parametrize("docs, message", [
    (pd.DataFrame({"doc_id": ["d0", "d1", "d2"]}),
     "protocol 'fixed' needs a split value for every document; 3 of 3 have none "
     "(e.g. ['d0', 'd1', 'd2'])"),
    (pd.DataFrame({"doc_id": ["d0", "d1", "d2", "d3"], "split": ["train", None, " ", "test"]}),
     "protocol 'fixed' needs a split value for every document; 2 of 4 have none "
     "(e.g. ['d1', 'd2'])"),
])
def test_fixed_names_documents_without_a_split_value(docs, message):
    with pytest.raises(SplitError) as error:
        make_splits(docs, "fixed", seed=0)
    assert str(error.value) == message


def test_repeated_doc_ids_are_named_ten_at_most():
    ids = [f"d{i:02d}" for i in range(11)]
    with pytest.raises(SplitError) as error:
        make_splits(pd.DataFrame({"doc_id": ids + ids}), "random", seed=0)
    assert str(error.value) == (f"the document list has repeated doc ids {ids[:10]}; "
                                "give one row per document")


def test_a_number_and_its_text_are_one_doc_id():
    with pytest.raises(SplitError) as error:
        make_splits(pd.DataFrame({"doc_id": [1, "1", 2, 3]}), "random", seed=0)
    assert str(error.value) == ("the document list has repeated doc ids ['1']; "
                                "give one row per document")


def test_an_empty_document_list_is_refused():
    with pytest.raises(SplitError) as error:
        make_splits(pd.DataFrame({"doc_id": []}), "random", seed=0)
    assert str(error.value) == "no documents to split"


@pytest.mark.parametrize("n_docs, val_size, message", [
    (1, 0.0, "protocol 'random' needs at least 2 documents; got 1"),
    (2, 0.15, "protocol 'random' needs at least 3 documents; got 2"),
])
def test_random_counts_the_documents_it_needs(n_docs, val_size, message):
    """Train and test need a document each, validation (val_size > 0) one more."""
    docs = pd.DataFrame({"doc_id": [f"d{i}" for i in range(n_docs)]})
    with pytest.raises(SplitError) as error:
        make_splits(docs, "random", seed=0, val_size=val_size)
    assert str(error.value) == message


def test_a_frame_carrying_old_index_columns_splits_as_without_them():
    """A frame reset twice holds `level_0` and `index` columns; they are not document fields,
    so the split is the one of the same frame without them."""
    plain = five_layouts()
    for protocol in ("random", "layout_held_out"):
        (expected,) = make_splits(plain, protocol, seed=0)
        (split,) = make_splits(plain.reset_index().reset_index(), protocol, seed=0)
        assert (split.train, split.val, split.test) == (expected.train, expected.val,
                                                        expected.test)


def test_a_zero_seen_test_fraction_is_refused_with_its_range():
    with pytest.raises(SplitError) as error:
        make_splits(five_layouts(), "seen_and_unseen_layouts", seed=0, seen_test_fraction=0)
    assert str(error.value) == "seen_test_fraction must be a fraction in (0, 1), got 0"


def test_layout_kfold_refuses_fewer_than_two_folds_and_other_protocols_ignore_n_folds():
    with pytest.raises(SplitError) as error:
        make_splits(five_layouts(), "layout_kfold", seed=0, n_folds=1)
    assert str(error.value) == "layout_kfold needs n_folds >= 2, got 1"
    (split,) = make_splits(five_layouts(), "layout_held_out", seed=0, n_folds=1)
    assert split.test
