"""Word scores, entity scores and calibration against hand-worked cases and reference libraries."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from seqeval.metrics import classification_report as seqeval_report
from seqeval.metrics import f1_score as seqeval_f1
from seqeval.metrics import precision_score as seqeval_precision
from seqeval.metrics import recall_score as seqeval_recall
from sklearn.metrics import (
    accuracy_score,
    classification_report,
    confusion_matrix,
    f1_score,
)

from dochar.metrics import (
    MetricInputError,
    entity_scores,
    expected_calibration_error,
    line_order,
    macro_f1_from_confusion,
    per_group_scores,
    reliability_curve,
    score_words,
    to_bio,
)

# ---------------------------------------------------------------- word scores

# 3 classes, 10 words.
#   true: a a a a b b b c c c
#   pred: a a b c b b a c c b
# confusion (rows true a,b,c; columns predicted a,b,c):  a [2 1 1]  b [1 2 0]  c [0 1 2]
# TP a=2 b=2 c=2; predicted counts a=3 b=4 c=3; true counts a=4 b=3 c=3
# P: a 2/3, b 2/4, c 2/3     R: a 2/4, b 2/3, c 2/3
# F1 = 2TP/(2TP+FP+FN): a 4/(4+1+2)=4/7, b 4/(4+2+1)=4/7, c 4/(4+1+1)=2/3
# macro = (4/7 + 4/7 + 2/3)/3 = (38/21)/3 = 38/63;  micro = accuracy = 6/10
# weighted = (4·4/7 + 3·4/7 + 3·2/3)/10 = (4 + 2)/10 = 0.6
HAND_TRUE = list("aaaabbbccc")
HAND_PRED = list("aabcbbaccb")


def test_score_words_hand_worked():
    scores = score_words(HAND_TRUE, HAND_PRED, ["a", "b", "c"])
    assert scores.per_class.loc["a", "precision"] == pytest.approx(2 / 3)
    assert scores.per_class.loc["b", "precision"] == pytest.approx(2 / 4)
    assert scores.per_class.loc["a", "recall"] == pytest.approx(2 / 4)
    assert scores.per_class.loc["c", "recall"] == pytest.approx(2 / 3)
    assert scores.per_class["f1"].tolist() == pytest.approx([4 / 7, 4 / 7, 2 / 3])
    assert scores.per_class["support"].tolist() == [4, 3, 3]
    assert scores.macro_f1 == pytest.approx(38 / 63)
    assert scores.micro_f1 == pytest.approx(0.6)
    assert scores.accuracy == pytest.approx(0.6)
    assert scores.weighted_f1 == pytest.approx(0.6)
    assert scores.confusion.tolist() == [[2, 1, 1], [1, 2, 0], [0, 1, 2]]
    assert scores.confusion_normalised[0].tolist() == pytest.approx([0.5, 0.25, 0.25])


def test_macro_over_present_and_all():
    # label "d" is neither true nor predicted: "present" leaves it out (38/63, as above),
    # "all" averages four classes: (38/21)/4 = 38/84
    labels = ["a", "b", "c", "d"]
    assert score_words(HAND_TRUE, HAND_PRED, labels).macro_f1 == pytest.approx(38 / 63)
    assert score_words(HAND_TRUE, HAND_PRED, labels,
                       macro_over="all").macro_f1 == pytest.approx(38 / 84)
    assert score_words(HAND_TRUE, HAND_PRED, labels).confusion_normalised[3].tolist() == [0] * 4
    # a class predicted but never true stays in with F1 = 0: one c→d swap
    # a 4/7, b 4/7, c 2TP/(2TP+FP+FN) = 2/(2+1+2) = 2/5, d 0 → (4/7+4/7+2/5+0)/4
    pred = HAND_PRED[:-2] + ["d", "b"]
    assert score_words(HAND_TRUE, pred, labels).macro_f1 == pytest.approx(
        (4 / 7 + 4 / 7 + 2 / 5) / 4)


@pytest.mark.parametrize("seed", range(5))
def test_score_words_matches_sklearn(seed):
    rng = np.random.default_rng(seed)
    labels = ["lab_name", "date", "analyte", "result", "unit", "other"]
    y_true = rng.choice(labels[:-1], 300).tolist()        # "other" may be only predicted
    y_pred = [t if rng.random() < 0.6 else rng.choice(labels) for t in y_true]
    ours = score_words(y_true, y_pred, labels)
    # reference: sklearn.metrics.classification_report(output_dict=True), confusion_matrix
    report = classification_report(y_true, y_pred, labels=labels, output_dict=True,
                                   zero_division=0)
    for label in labels:
        for key in ("precision", "recall", "f1-score", "support"):
            column = "f1" if key == "f1-score" else key
            assert ours.per_class.loc[label, column] == pytest.approx(report[label][key])
    assert ours.weighted_f1 == pytest.approx(report["weighted avg"]["f1-score"])
    assert score_words(y_true, y_pred, labels, macro_over="all").macro_f1 == pytest.approx(
        report["macro avg"]["f1-score"])
    present = sorted(set(y_true) | set(y_pred))
    assert ours.macro_f1 == pytest.approx(f1_score(y_true, y_pred, labels=present,
                                                   average="macro", zero_division=0))
    assert ours.micro_f1 == pytest.approx(accuracy_score(y_true, y_pred))
    assert (ours.confusion == confusion_matrix(y_true, y_pred, labels=labels)).all()


def test_macro_f1_from_confusion_vectorised_matches_sklearn():
    rng = np.random.default_rng(7)
    labels = list("abcd")
    stacks, expected = [], []
    for _ in range(6):
        y_true, y_pred = rng.choice(labels[:3], 40), rng.choice(labels, 40)
        stacks.append(confusion_matrix(y_true, y_pred, labels=labels))
        present = sorted(set(y_true) | set(y_pred))   # sklearn.metrics.f1_score reference
        expected.append(f1_score(y_true, y_pred, labels=present, average="macro",
                                 zero_division=0))
    assert macro_f1_from_confusion(np.stack(stacks)) == pytest.approx(expected)


def test_to_flat_names_every_class():
    flat = score_words(HAND_TRUE, HAND_PRED, ["a", "b", "c"]).to_flat("test/")
    assert flat["test/macro_f1"] == pytest.approx(38 / 63)
    assert flat["test/f1/c"] == pytest.approx(2 / 3)
    assert flat["test/support/a"] == 4
    assert {"test/precision/b", "test/recall/b", "test/micro_f1"} <= set(flat)


def test_score_words_refuses_bad_input():
    with pytest.raises(MetricInputError, match=r"outside the label set"):
        score_words(["a", "zz"], ["a", "a"], ["a", "b"])
    with pytest.raises(MetricInputError, match=r"3 words but y_pred has 2"):
        score_words(["a"] * 3, ["a"] * 2, ["a"])
    with pytest.raises(MetricInputError, match="no words"):
        score_words([], [], ["a"])


def test_per_group_scores_match_sklearn_per_layout():
    rng = np.random.default_rng(3)
    labels = ["key", "value", "other"]
    frame = pd.DataFrame({"doc_id": rng.choice([f"d{i}" for i in range(8)], 200),
                          "label": rng.choice(labels, 200), "predicted": rng.choice(labels, 200)})
    frame["layout_id"] = frame["doc_id"].map(lambda d: "L1" if d < "d4" else "L2")
    table = per_group_scores(frame, labels)
    for layout, words in frame.groupby("layout_id"):
        present = sorted(set(words["label"]) | set(words["predicted"]))
        assert table.loc[layout, "macro_f1"] == pytest.approx(f1_score(   # sklearn reference
            words["label"], words["predicted"], labels=present, average="macro"))
        assert table.loc[layout, "micro_f1"] == pytest.approx(
            accuracy_score(words["label"], words["predicted"]))
        assert table.loc[layout, "n_words"] == len(words)
        assert table.loc[layout, "n_docs"] == words["doc_id"].nunique()


# ---------------------------------------------------------------- entity scores

LABELS = ["lab_name", "key", "date", "value", "other"]


def _line_words(rows):
    """rows: (text, line, entity, true, predicted); words placed left to right per line."""
    records, x_by_line = [], {}
    for word_id, (text, line, entity, true, predicted) in enumerate(rows):
        x = x_by_line.get(line, 10.0)
        x_by_line[line] = x + 60
        records.append(dict(doc_id="c1", page=1, word_id=word_id, text=text, x0=x,
                            y0=20.0 + 30 * line, x1=x + 50, y1=32.0 + 30 * line,
                            entity_id=entity, label=true, predicted=predicted))
    frame = pd.DataFrame(records)
    # rows shuffled: entity scores must rebuild reading order from geometry alone
    return frame.sample(frac=1.0, random_state=0).reset_index(drop=True)


def test_entity_scores_hand_worked():
    frame = _line_words([
        ("Orchard", 0, "e1", "lab_name", "lab_name"),   # e1 exact run           → correct
        ("Labs", 0, "e1", "lab_name", "lab_name"),
        ("Reported:", 0, "e2", "key", "key"),           # e2 exact run           → correct
        ("12", 0, "e3", "date", "date"),                # e3 only partly labelled → wrong
        ("May", 0, "e3", "date", "other"),
        ("note", 1, "e4", "other", "other"),            # ignored
        ("Lot:", 1, "e5", "key", "key"),                # run [Lot:, QX] over-extends e5 → wrong
        ("QX", 1, "e6", "value", "key"),                # e6 missed
    ])
    scores = entity_scores(frame, LABELS)
    # true scored: e1 e2 e3 e5 e6 = 5; predicted runs: [Orchard Labs] [Reported:] [12]
    # [Lot: QX] = 4; correct 2 → P = 2/4, R = 2/5, F1 = 2·2/(4+5) = 4/9
    assert (scores.n_true, scores.n_pred, scores.n_correct) == (5, 4, 2)
    assert scores.precision == pytest.approx(0.5)
    assert scores.recall == pytest.approx(0.4)
    assert scores.f1 == pytest.approx(4 / 9)
    # key: 2 true (e2, e5), 2 predicted, 1 correct → 0.5; date: 1 true, 1 predicted, 0 correct
    assert scores.per_class.loc["key", ["precision", "recall", "f1"]].tolist() == [0.5] * 3
    assert scores.per_class.loc["date", "f1"] == 0
    assert scores.per_class.loc["lab_name", "f1"] == 1
    assert "other" not in scores.per_class.index
    # same numbers from seqeval (default mode) on the BIO tags of to_bio
    true_tags, pred_tags = to_bio(frame)
    assert true_tags == [["B-lab_name", "I-lab_name", "B-key", "B-date", "I-date",
                          "O", "B-key", "B-value"]]
    assert seqeval_f1(true_tags, pred_tags) == pytest.approx(4 / 9)


def test_adjacent_same_label_entities_merge_into_one_wrong_run():
    frame = _line_words([("Sulphur", 0, "a", "value", "value"),
                         ("Lead", 0, "b", "value", "value")])
    scores = entity_scores(frame, LABELS)
    # one run of two words matches neither single-word entity: 0 of 1 predicted, 0 of 2 true
    assert (scores.n_true, scores.n_pred, scores.n_correct) == (2, 1, 0)
    assert seqeval_f1(*to_bio(frame)) == 0.0   # seqeval agrees


def test_fragmented_entity_counts_as_missed():
    # entity "q" has words on both sides of "A" in reading order: never a single run
    frame = _line_words([("Date", 0, "q", "key", "key"), ("A", 0, "v", "value", "value"),
                         ("of", 0, "q", "key", "key")])
    scores = entity_scores(frame, LABELS)
    assert scores.n_true_fragmented == 1
    assert (scores.n_true, scores.n_pred, scores.n_correct) == (2, 3, 1)


def _random_pages(seed: int, n_docs: int = 6):
    """Grids of words with entities contiguous in reading order; noisy predictions."""
    rng = np.random.default_rng(seed)
    records = []
    for doc in range(n_docs):
        for page in (1, 2):
            position, entity = 0, 0
            while position < 36:
                size, label = int(rng.integers(1, 4)), str(rng.choice(LABELS))
                for _ in range(min(size, 36 - position)):
                    line, column = divmod(position, 6)
                    predicted = label if rng.random() < 0.75 else str(rng.choice(LABELS))
                    records.append(dict(doc_id=f"d{doc}", page=page, word_id=position,
                                        x0=column * 80.0, x1=column * 80.0 + 60,
                                        y0=line * 20.0, y1=line * 20.0 + 12,
                                        entity_id=f"{entity}", label=label, predicted=predicted))
                    position += 1
                entity += 1
    return pd.DataFrame(records).sample(frac=1.0, random_state=seed).reset_index(drop=True)


@pytest.mark.parametrize("seed", range(6))
def test_entity_scores_match_seqeval(seed):
    frame = _random_pages(seed)
    ours = entity_scores(frame, LABELS)
    true_tags, pred_tags = to_bio(frame)
    assert ours.n_true_fragmented == 0
    # reference: seqeval.metrics f1/precision/recall_score, default (conlleval-like) mode
    assert ours.f1 == pytest.approx(seqeval_f1(true_tags, pred_tags))
    assert ours.precision == pytest.approx(seqeval_precision(true_tags, pred_tags))
    assert ours.recall == pytest.approx(seqeval_recall(true_tags, pred_tags))
    report = seqeval_report(true_tags, pred_tags, output_dict=True, zero_division=0)
    for label in ours.per_class.index:
        if label in report:
            assert ours.per_class.loc[label, "f1"] == pytest.approx(report[label]["f1-score"])
            assert ours.per_class.loc[label, "support"] == report[label]["support"]


def test_order_col_overrides_geometry():
    frame = _line_words([("x", 0, "a", "key", "key"), ("y", 0, "a", "key", "key")])
    frame["rank"] = frame["word_id"].map({0: 0, 1: 1})
    assert entity_scores(frame, LABELS, order_col="rank").n_correct == 1


def test_line_order_reads_lines_then_left_to_right():
    # two lines; the second word of line 0 sits a little lower but within the first word's band
    boxes = np.array([[200, 52, 240, 62],    # line 1, right
                      [10, 10, 50, 20],      # line 0, left
                      [100, 13, 140, 23],    # line 0, right (centre 18 inside [10, 20])
                      [10, 50, 50, 60]])     # line 1, left
    assert line_order(boxes).tolist() == [1, 2, 3, 0]


def test_entity_scores_refuse_mixed_labels_and_missing_columns():
    frame = _line_words([("a", 0, "e", "key", "key"), ("b", 0, "e", "value", "key")])
    with pytest.raises(MetricInputError, match=r"entity 'e' \(doc_id=c1, page=1\).*different"):
        entity_scores(frame, LABELS)
    with pytest.raises(MetricInputError, match="entity_id"):
        entity_scores(frame.drop(columns="entity_id"), LABELS)


# ---------------------------------------------------------------- calibration

def test_ece_hand_worked():
    # Guo et al., ICML 2017, eq. 3, 5 equal-width bins ((0,.2], (.2,.4], … (.8,1]):
    #   (.8,1]:  0.95, 0.85 → conf 0.9,   acc 1/2 → 2/5 · 0.4   = 0.16
    #   (.6,.8]: 0.65, 0.62 → conf 0.635, acc 1/2 → 2/5 · 0.135 = 0.054
    #   (.2,.4]: 0.30       → conf 0.3,   acc 0   → 1/5 · 0.3   = 0.06
    #   ECE = 0.274
    confidence = np.array([0.95, 0.85, 0.65, 0.62, 0.30])
    correct = np.array([1, 0, 1, 0, 0])
    assert expected_calibration_error(confidence, correct, n_bins=5) == pytest.approx(0.274)
    # perfectly calibrated bins give 0 (same equation)
    assert expected_calibration_error(np.full(4, 0.5), np.array([1, 0, 1, 0]), 10) == 0


def test_reliability_curve_matches_brute_force_bins():
    rng = np.random.default_rng(0)
    confidence = np.concatenate([rng.random(500), [0.0, 1.0, 0.2, 0.4]])
    correct = rng.random(len(confidence)) < confidence
    curve = reliability_curve(confidence, correct, n_bins=5)
    assert curve["count"].sum() == len(confidence)
    for row in curve.itertuples():   # brute force: B_m = (lower, upper], 0 in the first bin
        inside = (confidence > row.lower) & (confidence <= row.upper)
        if row.bin == 0:
            inside |= confidence == 0
        assert row.count == inside.sum()
        assert row.accuracy == pytest.approx(correct[inside].mean())
        assert row.mean_confidence == pytest.approx(confidence[inside].mean())


def test_calibration_refuses_bad_input():
    with pytest.raises(MetricInputError, match=r"position 1 has 1.5"):
        expected_calibration_error(np.array([0.2, 1.5]), np.array([1, 0]))
    with pytest.raises(MetricInputError, match="2 confidences but 1"):
        reliability_curve(np.array([0.2, 0.5]), np.array([1]))
