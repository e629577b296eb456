"""Link scores: the perfect-prediction ceiling, a hand-worked case, grouping entity F1 and the
bootstrap over per-document counts.

Precision, recall and F1 are van Rijsbergen's F-measure with beta = 1 (common practice);
every expected value below is worked out by hand in the comments.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from dochar.metrics.intervals import bootstrap_scores
from dochar.metrics.links import GroupingF1, LinkScore
from dochar.models.objectives import best_threshold


def _rows(doc: str, pairs, entities, label, predicted, page_nodes, candidate=None):
    """Pair rows of one page: entities maps node -> true entity id."""
    n = len(pairs)
    return pd.DataFrame({
        "doc_id": doc, "page": 1, "source": [a for a, _ in pairs], "target": [b for _, b in pairs],
        "source_entity": [entities[a] for a, _ in pairs],
        "target_entity": [entities[b] for _, b in pairs],
        "candidate": [True] * n if candidate is None else candidate, "page_nodes": page_nodes,
        "label": label, "predicted": predicted})


def test_perfect_predictions_score_one():
    # page of 6 words, entities {0,1,2} {3,4} {5}; candidates chain the words 0-1-2-3-4-5
    entities = {0: "a", 1: "a", 2: "a", 3: "b", 4: "b", 5: "c"}
    pairs = [(0, 1), (1, 2), (2, 3), (3, 4), (4, 5), (0, 2)]
    truth = ["link" if entities[a] == entities[b] else "none" for a, b in pairs]
    frame = _rows("d1", pairs, entities, truth, truth, page_nodes=8)  # 2 words in no row
    assert LinkScore("f1")(frame) == 1.0
    assert LinkScore("precision")(frame) == 1.0
    assert LinkScore("recall")(frame) == 1.0
    assert GroupingF1()(frame) == 1.0


def test_hand_worked_link_counts():
    # document d1: labels  link link none none link   (the last one a missed true link)
    #              predict link none link none none
    #   TP = 1 (row 1), FP = 1 (row 3), FN = 2 (rows 2 and 5)
    # document d2: labels  link none ; predict link link  ->  TP = 1, FP = 1, FN = 0
    # pooled: TP = 2, FP = 2, FN = 2: precision = 2/4 = 0.5, recall = 2/4 = 0.5,
    #         F1 = 2*2 / (2*2 + 2 + 2) = 0.5
    # d1 alone: precision 1/2, recall 1/3, F1 = 2/(2+1+2) = 0.4
    entities = {i: f"e{i}" for i in range(10)}
    d1 = _rows("d1", [(0, 1), (1, 2), (2, 3), (3, 4), (4, 5)], entities,
               ["link", "link", "none", "none", "link"], ["link", "none", "link", "none", "none"],
               page_nodes=6, candidate=[True, True, True, True, False])
    d2 = _rows("d2", [(0, 1), (1, 2)], entities, ["link", "none"], ["link", "link"], 3)
    frame = pd.concat([d1, d2], ignore_index=True)
    assert LinkScore("precision")(frame) == pytest.approx(0.5)
    assert LinkScore("recall")(frame) == pytest.approx(0.5)
    assert LinkScore("f1")(frame) == pytest.approx(0.5)
    assert LinkScore("f1")(d1) == pytest.approx(0.4)
    groups, counts = LinkScore().group_counts(frame, "doc_id")
    assert list(groups) == ["d1", "d2"]
    assert counts.tolist() == [[1, 1, 2], [1, 1, 0]]


def test_grouping_entity_f1_by_hand():
    # words 0..5, true entities {0,1,2} {3,4} {5}; page has 7 words (word 6 in no row: a
    # single-word entity on both sides). Predicted links 0-1, 2-3, 3-4 give components
    # {0,1} {2,3,4} {5} {6}: correct {5} and {6} = 2; predicted 4; true 4 ({0,1,2} {3,4} {5} {6})
    # entity F1 = 2*2 / (4 + 4) = 0.5
    entities = {0: "a", 1: "a", 2: "a", 3: "b", 4: "b", 5: "c"}
    pairs = [(0, 1), (1, 2), (2, 3), (3, 4), (4, 5)]
    truth = ["link", "link", "none", "link", "none"]
    predicted = ["link", "none", "link", "link", "none"]
    frame = _rows("d1", pairs, entities, truth, predicted, page_nodes=7)
    assert GroupingF1()(frame) == pytest.approx(0.5)
    _, counts = GroupingF1().group_counts(frame, "doc_id")
    assert counts.tolist() == [[2, 4, 4]]


def test_bootstrap_from_counts_matches_rescoring():
    # the additive fast road and re-scoring each resample must agree (same draws)
    rng = np.random.default_rng(0)
    frames = []
    for d in range(6):
        n = 12
        label = rng.choice(["link", "none"], size=n)
        predicted = np.where(rng.random(n) < 0.7, label, rng.choice(["link", "none"], size=n))
        frames.append(_rows(f"d{d}", [(i, i + 1) for i in range(n)],
                            {i: f"e{i // 3}" for i in range(n + 1)}, label, predicted, n + 1))
    frame = pd.concat(frames, ignore_index=True)
    for scorer in (LinkScore("f1"), GroupingF1()):
        fast = bootstrap_scores(frame, scorer, n_resamples=20, seed=3)
        slow = bootstrap_scores(frame, lambda f, s=scorer: s(f), n_resamples=20, seed=3)
        np.testing.assert_allclose(fast, slow)


def test_best_threshold_counts_missed_links():
    # 4 candidates, probabilities .9 .8 .3 .2, labels 1 0 1 0, plus 1 missed true link.
    # cut .85: TP 1, FP 0, FN 2 -> F1 2/5 = 0.4; cut .25: TP 2, FP 1, FN 1 -> 4/6 = 0.667;
    # cut .5: TP 1 FP 1 FN 2 -> 2/6; cut .1: TP 2 FP 2 FN 1 -> 4/7 = 0.571
    threshold, f1 = best_threshold(np.array([.9, .8, .3, .2]), np.array([1, 0, 1, 0], bool),
                                   missed=1, grid=[0.85, 0.5, 0.25, 0.1])
    assert threshold == 0.25 and f1 == pytest.approx(4 / 6)


def test_precision_and_recall_differ_where_the_counts_say_so():
    # the pooled case above has FP = FN, so precision and recall agree there; here they do not.
    # rows: label    link link link none none
    #       predict  link none none link none  ->  TP = 1, FP = 1, FN = 2
    # precision = 1/2, recall = 1/3, F1 = 2/(2+1+2) = 0.4 (worked by hand)
    from sklearn.metrics import f1_score, precision_score, recall_score

    entities = {i: f"e{i}" for i in range(6)}
    label = ["link", "link", "link", "none", "none"]
    predicted = ["link", "none", "none", "link", "none"]
    frame = _rows("d1", [(i, i + 1) for i in range(5)], entities, label, predicted, 6)
    assert LinkScore("precision")(frame) == pytest.approx(1 / 2)
    assert LinkScore("recall")(frame) == pytest.approx(1 / 3)
    assert LinkScore("f1")(frame) == pytest.approx(0.4)
    # reference: scikit-learn's binary scores with "link" as the positive class
    for measure, reference in (("precision", precision_score), ("recall", recall_score),
                               ("f1", f1_score)):
        assert LinkScore(measure)(frame) == pytest.approx(
            reference(label, predicted, pos_label="link"))


def test_empty_denominators_score_zero_and_a_denominator_of_one_divides():
    # no predicted link: precision's denominator TP + FP = 0, so precision is 0 (module rule);
    # one true link found and nothing else: every denominator is 1 or 2, every score 1
    entities = {0: "a", 1: "a", 2: "b"}
    silent = _rows("d1", [(0, 1), (1, 2)], entities, ["link", "none"], ["none", "none"], 3)
    assert LinkScore("precision")(silent) == 0.0
    assert LinkScore("recall")(silent) == 0.0 and LinkScore("f1")(silent) == 0.0
    found = _rows("d1", [(0, 1)], entities, ["link"], ["link"], 3)
    assert LinkScore("precision")(found) == 1.0 and LinkScore("recall")(found) == 1.0
    nothing = _rows("d1", [(1, 2)], entities, ["none"], ["none"], 3)
    assert [LinkScore(m)(nothing) for m in ("precision", "recall", "f1")] == [0.0, 0.0, 0.0]


def test_grouping_of_a_page_without_predicted_links_and_of_one_row():
    # words 0..3, true entities {0,1} {2} {3}; one candidate row (0, 1), predicted none:
    # predicted entities {0} {1} {2} {3}: correct {2} {3} (words in no row count on both
    # sides) = 2; predicted 4; true 3 -> F1 = 2*2 / (4 + 3) = 4/7 (worked by hand)
    entities = {0: "a", 1: "a"}
    frame = _rows("d1", [(0, 1)], entities, ["link"], ["none"], page_nodes=4)
    assert GroupingF1()(frame) == pytest.approx(4 / 7)
    assert GroupingF1().group_counts(frame, "doc_id")[1].tolist() == [[2, 4, 3]]
    # the same row predicted a link: {0,1} {2} {3} on both sides: F1 = 1
    assert GroupingF1()(frame.assign(predicted="link")) == 1.0
    # the label column is not needed to group words (only predicted links and entity ids)
    assert GroupingF1()(frame.drop(columns=["label"])) == pytest.approx(4 / 7)


def test_link_scores_name_what_is_wrong():
    from dochar.metrics.words import MetricInputError

    with pytest.raises(MetricInputError, match="measure must be f1, precision or recall, not 'F1'"):
        LinkScore("F1")
    frame = _rows("d1", [(0, 1)], {0: "a", 1: "a"}, ["link"], ["link"], 2)
    with pytest.raises(MetricInputError, match="link scores need column 'predicted'"):
        LinkScore()(frame.drop(columns=["predicted"]))
    with pytest.raises(MetricInputError, match=r"grouping scores need column\(s\) \['page_nodes'\]"):
        GroupingF1()(frame.drop(columns=["page_nodes"]))
    with pytest.raises(MetricInputError, match=r"grouping needs column 'layout'; the frame has \["):
        LinkScore().group_counts(frame, "layout")


def test_link_scorers_follow_the_link_kind():
    from dochar.metrics.links import link_scorers

    # every links run gets link F1, precision and recall; word grouping adds entity F1
    scorers = link_scorers("same_entity")
    assert list(scorers) == ["link_f1", "link_precision", "link_recall", "entity_f1"]
    assert [repr(s) for s in scorers.values()] == [
        "LinkScore(f1)", "LinkScore(precision)", "LinkScore(recall)", "GroupingF1()"]
    assert list(link_scorers("key_value")) == ["link_f1", "link_precision", "link_recall"]
