"""Record scores on hand-worked records.

Field-level F1 follows Kim et al., "OCR-free Document Understanding Transformer", ECCV 2022
(JSONParseEvaluator: flatten to (path, value) pairs, F1 = TP / (TP + (FP + FN) / 2)); TED
accuracy follows Hwang et al., EMNLP 2021, max(0, 1 - TED(pred, truth) / TED(empty, truth)),
with the leaf costs as Kim et al.'s code uses them (from memory). Every expected value below is
counted by hand in the comment beside it.
"""

from __future__ import annotations

import pytest

from dochar.metrics.intervals import bootstrap_interval
from dochar.metrics.records import (
    FIELD_F1,
    ROW_F1,
    STRAIGHT_THROUGH,
    TED_ACCURACY,
    field_accuracy,
    field_counts,
    record_frame,
    record_scorers,
    row_counts,
    same_record,
    ted_accuracy,
    tree_distance,
)

TRUE = {"cert_no": "A-1", "date": ["2024-01-02", "2024-01-05"],
        "results": [{"analyte": "Lead", "result": "0.5"}, {"analyte": "Zinc", "result": "1.2"}]}
# one wrong character, a missing date, the items in another order and one extra item
PRED = {"cert_no": "A-l", "date": ["2024-01-02"],
        "results": [{"analyte": "Zinc", "result": "1.2"}, {"analyte": "Lead", "result": "0.5"},
                    {"analyte": "Iron", "result": "3"}]}
LABELS = ["cert_no", "date", "analyte", "result"]


def test_field_f1_counts_pairs_as_kim_et_al_define_them():
    # true pairs: cert_no, 2 dates, 2 analytes, 2 results = 7; predicted: cert_no A-l (FP),
    # date 2024-01-02 (TP), Zinc, 1.2, Lead, 0.5 (4 TP), Iron, 3 (2 FP): TP 5, FP 3, FN 7-5 = 2
    assert field_counts(PRED, TRUE) == (5, 3, 2)
    frame = record_frame({"d": PRED}, {"d": TRUE}, LABELS, "results")
    # F1 = 5 / (5 + (3 + 2) / 2) = 5 / 7.5
    assert record_scorers()[FIELD_F1](frame) == pytest.approx(5 / 7.5)


def test_a_repeated_value_is_matched_once():
    # truth has the date once; predicting it twice is one TP and one FP
    assert field_counts({"date": ["x", "x"]}, {"date": "x"}) == (1, 1, 0)


def test_row_f1_counts_a_row_only_when_every_cell_is_right():
    # predicted 3 rows, 2 true, 2 identical: F1 = 2 * 2 / (3 + 2) = 0.8
    assert row_counts(PRED, TRUE, "results") == (2, 3, 2)
    frame = record_frame({"d": PRED}, {"d": TRUE}, LABELS, "results")
    assert record_scorers()[ROW_F1](frame) == pytest.approx(0.8)
    one_cell_off = {"results": [{"analyte": "Lead", "result": "0.6"}]}
    assert row_counts(one_cell_off, {"results": [{"analyte": "Lead", "result": "0.5"}]},
                      "results") == (0, 1, 1)


def test_tree_distance_by_hand_on_tiny_trees():
    true = {"a": "xy"}
    # empty -> truth: insert node a (1) and leaf "xy" (2 characters) = 3
    assert tree_distance({}, true) == 3
    assert ted_accuracy({"a": "xz"}, true) == pytest.approx(1 - 1 / 3)   # one character
    assert ted_accuracy({"b": "xy"}, true) == pytest.approx(1 - 1 / 3)   # rename a -> b
    assert ted_accuracy({}, true) == 0.0
    # an extra field c with leaf "q": insert c (1) + q (1) = 2
    assert ted_accuracy({"a": "xy", "c": "q"}, true) == pytest.approx(1 - 2 / 3)
    # extra cost 1 + 4 = 5 > 3: clipped at 0
    assert ted_accuracy({"a": "xy", "c": "qqqq"}, true) == 0.0


def test_tree_distance_of_a_missing_line_item():
    true = {"items": [{"n": "a"}, {"n": "b"}]}
    # empty -> truth: items (1) + 2 x (<item> 1 + n 1 + leaf 1) = 7
    assert tree_distance({}, true) == 7
    # delete the first item's subtree: 3 (cheaper than changing a -> b and deleting the other: 4)
    assert tree_distance({"items": [{"n": "b"}]}, true) == 3
    assert ted_accuracy({"items": [{"n": "b"}]}, true) == pytest.approx(4 / 7)


def test_the_perfect_record_scores_one_on_every_measure():
    frame = record_frame({"d": TRUE}, {"d": TRUE}, LABELS, "results")
    for name, scorer in record_scorers().items():
        assert scorer(frame) == 1.0, name
    assert set(field_accuracy(frame).values()) == {1.0}


def test_empty_records_agree_and_a_missing_prediction_is_an_empty_record():
    frame = record_frame({}, {"e": {}, "d": TRUE}, LABELS, "results")
    # e: nothing to find, nothing found: right; d: nothing found of 7 pairs
    assert frame.set_index("doc_id")["straight_through"].to_dict() == {"e": 1.0, "d": 0.0}
    assert record_scorers()[FIELD_F1](frame) == 0.0   # TP 0, FN 7
    assert record_scorers()[TED_ACCURACY](frame) == pytest.approx(0.5)   # (1 + 0) / 2


def test_straight_through_rate_on_three_documents():
    swapped = dict(TRUE, results=TRUE["results"][::-1])       # items in another order: right
    typo = dict(TRUE, cert_no="A-7")                           # one wrong character: wrong
    frame = record_frame({"a": TRUE, "b": swapped, "c": typo},
                         {"a": TRUE, "b": TRUE, "c": TRUE}, LABELS, "results")
    assert same_record(swapped, TRUE, "results") and not same_record(typo, TRUE, "results")
    assert record_scorers()[STRAIGHT_THROUGH](frame) == pytest.approx(2 / 3)
    # per field: cert_no right in a and b only; the rest right everywhere
    assert field_accuracy(frame) == pytest.approx({"cert_no": 2 / 3, "date": 1.0,
                                                   "analyte": 1.0, "result": 1.0})


def test_per_field_accuracy_of_the_worked_record():
    frame = record_frame({"d": PRED}, {"d": TRUE}, LABELS, "results")
    # cert_no wrong, a date missing, an extra analyte Iron and result 3
    assert field_accuracy(frame) == {"cert_no": 0.0, "date": 0.0, "analyte": 0.0, "result": 0.0}


def test_record_scores_resample_by_document():
    frame = record_frame({"a": TRUE, "b": PRED}, {"a": TRUE, "b": TRUE}, LABELS, "results")
    point, low, high = bootstrap_interval(frame, record_scorers()[STRAIGHT_THROUGH],
                                          n_resamples=200)
    # a right, b wrong: 0.5; a resample holds 0, 1 or 2 copies of a
    assert point == 0.5 and low == 0.0 and high == 1.0


def test_the_distance_from_the_empty_record_is_what_zss_finds():
    # the shortcut (sum of insert costs) against zss's own search on the same trees
    from dochar.metrics.records import distance_from_empty

    for tree in (TRUE, PRED, {"a": "xy"}, {"items": [{"n": "a"}, {"n": "b"}]}, {}):
        assert distance_from_empty(tree) == tree_distance({}, tree)
