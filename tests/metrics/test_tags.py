"""Chunk F1 of boundary tags (task entity_tags) against seqeval, and its ceiling of 1.0.

Reference: seqeval 1.2.2 (``f1_score`` / ``classification_report`` with ``mode="strict"`` and
the IOB2 / IOBES schemes; default mode for raw, unrepaired tags). The tag sequences the
reference scores are written by the tests in an order they lay out themselves (a hand-made page,
a grid filled row by row), never taken from dochar's reading order.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from seqeval.metrics import classification_report, f1_score, precision_score, recall_score
from seqeval.scheme import IOB2, IOBES

from dochar.metrics.evaluate import headline_scorers
from dochar.metrics.intervals import bootstrap_interval
from dochar.metrics.tags import TagEntityF1, tag_entity_scores
from dochar.tasks import EntityTags
from dochar.tasks.entity_tags import encode, repair, tag_classes

SCHEMES = {"bio": IOB2, "bioes": IOBES}
LABELS = ["key", "value", "other"]


def frame_of(sequences, predictions, width=6):
    """Pages laid out as grids read row by row: word k of page p at row k // width."""
    rows = []
    for page, (true, pred) in enumerate(zip(sequences, predictions)):
        for k, (t, p) in enumerate(zip(true, pred)):
            line, column = divmod(k, width)
            rows.append(dict(doc_id=f"coa-{page // 2}", page=page % 2 + 1, word_id=k,
                             x0=column * 80.0, x1=column * 80.0 + 60, y0=line * 20.0,
                             y1=line * 20.0 + 12, label=t, predicted=p))
    # rows shuffled: the scorer must rebuild the order from the boxes
    return pd.DataFrame(rows).sample(frac=1.0, random_state=1).reset_index(drop=True)


def test_hand_made_page_against_seqeval_strict():
    true = ["B-key", "I-key", "B-value", "O", "B-key", "B-value", "I-value"]
    pred = ["B-key", "I-key", "B-value", "B-value", "I-key", "B-value", "O"]
    # true chunks: [key 0-1] [value 2] [key 4] [value 5-6]; repaired prediction: [key 0-1]
    # [value 2] [value 3] [key 4] (I-key after B-value opens a chunk) [value 5]; correct:
    # 0-1, 2, 4 → P = 3/5, R = 3/4, F1 = 2·3/(5+4) = 2/3 (worked by hand)
    frame = frame_of([true], [pred], width=4)
    scores = tag_entity_scores(frame, tag_classes(LABELS, ["other"], "bio"), "bio")
    assert (scores.n_true, scores.n_pred, scores.n_correct) == (4, 5, 3)
    assert (scores.precision, scores.recall) == (pytest.approx(3 / 5), pytest.approx(3 / 4))
    assert scores.f1 == pytest.approx(2 / 3)
    # per label, by hand: key true {0-1, 4}, predicted {0-1, 4}: P = R = 1; value true {2, 5-6},
    # predicted {2, 3, 5}: 1 correct, P = 1/3, R = 1/2
    value = scores.per_class.loc["value"]
    assert (value["precision"], value["recall"]) == (pytest.approx(1 / 3), pytest.approx(1 / 2))
    assert TagEntityF1("bio")(frame) == pytest.approx(2 / 3)
    assert scores.f1 == pytest.approx(f1_score([true], [repair(pred, "bio")], mode="strict",
                                               scheme=IOB2))
    assert scores.f1 == pytest.approx(f1_score([true], [pred]))        # default mode, raw


def random_sequences(rng, scheme, n_pages=8, length=30):
    truth, guesses = [], []
    task_prefixes = "BI" if scheme == "bio" else "BIES"
    for _ in range(n_pages):
        chunks, position = [], 0
        while position < length:
            size = int(rng.integers(1, 4))
            label = str(rng.choice(LABELS))
            end = min(position + size, length) - 1
            if label != "other":
                chunks.append((position, end, label))
            position = end + 1
        true = encode(chunks, length, scheme)
        noisy = [t if rng.random() < 0.7 else
                 str(rng.choice(["O"] + [f"{p}-{x}" for p in task_prefixes
                                         for x in ("key", "value")])) for t in true]
        truth.append(true)
        guesses.append(noisy)
    return truth, guesses


@pytest.mark.parametrize("scheme", ["bio", "bioes"])
@pytest.mark.parametrize("seed", range(4))
def test_random_pages_match_seqeval(scheme, seed):
    rng = np.random.default_rng(seed)
    truth, guesses = random_sequences(rng, scheme)
    frame = frame_of(truth, guesses)
    tags = tag_classes(LABELS, ["other"], scheme)
    ours = tag_entity_scores(frame, tags, scheme)
    repaired = [repair(g, scheme) for g in guesses]
    strict = dict(mode="strict", scheme=SCHEMES[scheme])
    assert ours.f1 == pytest.approx(f1_score(truth, repaired, **strict))
    assert ours.precision == pytest.approx(precision_score(truth, repaired, **strict))
    assert ours.recall == pytest.approx(recall_score(truth, repaired, **strict))
    assert ours.precision != pytest.approx(ours.recall)       # a swap of the two would show
    report = classification_report(truth, repaired, output_dict=True, zero_division=0, **strict)
    for label in ("key", "value"):
        for ours_name, seqeval_name in (("f1", "f1-score"), ("precision", "precision"),
                                        ("recall", "recall")):
            assert ours.per_class.loc[label, ours_name] == pytest.approx(
                report[label][seqeval_name])
        assert ours.per_class.loc[label, "support"] == report[label]["support"]
    # the additive scorer against seqeval itself, pooled and document by document (pages 2d
    # and 2d + 1 are document coa-d): its (correct, predicted, true) counts give seqeval's F1
    assert TagEntityF1(scheme)(frame) == pytest.approx(f1_score(truth, repaired, **strict))
    groups, counts = TagEntityF1(scheme).group_counts(frame, "doc_id")
    assert list(groups) == [f"coa-{d}" for d in range(len(truth) // 2)]
    for d, (correct, predicted, true) in enumerate(counts):
        pages = slice(2 * d, 2 * d + 2)
        expected = f1_score(truth[pages], repaired[pages], **strict)
        assert 2 * correct / (predicted + true) == pytest.approx(expected)
        assert correct / predicted == pytest.approx(
            precision_score(truth[pages], repaired[pages], **strict))


@pytest.mark.parametrize("scheme", ["bio", "bioes"])
def test_perfect_predictions_score_exactly_one(scheme):
    truth, _ = random_sequences(np.random.default_rng(7), scheme)
    frame = frame_of(truth, truth)
    assert tag_entity_scores(frame, tag_classes(LABELS, ["other"], scheme), scheme).f1 == 1.0
    value, low, high = bootstrap_interval(frame, TagEntityF1(scheme), n_resamples=50)
    assert value == low == high == 1.0


@pytest.mark.parametrize("scheme", ["bio", "bioes"])
def test_tags_of_funsd_spell_its_annotated_entities(funsd_root, scheme):
    """The encoder against FUNSD's own annotations, read by seqeval's chunking: in dochar's
    reading order, the chunks seqeval finds in the tags are exactly the runs of consecutive
    words of one annotated entity (label not ``other``), with that entity's label. Then a
    prediction that cuts the last word off every answer is scored against seqeval."""
    from itertools import groupby

    from seqeval.metrics.sequence_labeling import get_entities

    from dochar.data.importers.form_json import import_form_json
    from dochar.data.word_table import iter_pages, reading_order, validate_word_table

    frame, _ = import_form_json([funsd_root / "testing_data" / "annotations"])
    table = validate_word_table(frame).table
    task = EntityTags(scheme)
    truth, guesses, frames, n_entities = [], [], [], 0
    for page in list(iter_pages(table))[:15]:
        order = reading_order(page.boxes, page.word_ids)
        tags = [task.nodes(page).labels[i] for i in order]
        entities = [page.entity_ids[i] for i in order]
        labels = [page.labels[i] for i in order]
        runs = []
        for entity, members in groupby(range(len(order)), key=lambda i: entities[i]):
            members = list(members)
            if labels[members[0]] != "other":
                runs.append((labels[members[0]], members[0], members[-1]))
        found = sorted(get_entities(tags))
        assert found == sorted(runs), page.doc_id
        n_entities += len({e for e, label in zip(entities, labels) if label != "other"})
        # the prediction: every answer chunk loses its last word (a one-word answer vanishes)
        guess = list(tags)
        for label, first, last in found:
            if label == "answer":
                guess[last] = "O"
                if last > first and scheme == "bioes":
                    guess[last - 1] = "S-answer" if last - 1 == first else "E-answer"
        truth.append(tags)
        guesses.append(guess)
        words = [page.word_ids[i] for i in order]
        frames.append(pd.DataFrame({"doc_id": page.doc_id, "page": page.page, "word_id": words,
                                    "x0": page.boxes[order, 0], "y0": page.boxes[order, 1],
                                    "x1": page.boxes[order, 2], "y1": page.boxes[order, 3],
                                    "label": tags, "predicted": guess}))
    assert n_entities > 100
    scored = tag_entity_scores(pd.concat(frames, ignore_index=True),
                               task.classes(["header", "question", "answer", "other"]), scheme)
    strict = dict(mode="strict", scheme=SCHEMES[scheme])
    assert scored.n_true == sum(len(get_entities(tags)) for tags in truth)
    assert scored.f1 == pytest.approx(f1_score(truth, guesses, **strict))
    assert scored.precision == pytest.approx(precision_score(truth, guesses, **strict))
    assert scored.recall == pytest.approx(recall_score(truth, guesses, **strict))
    assert 0.3 < scored.f1 < 0.95         # not a degenerate case


def test_headline_scorers_pick_the_tag_scorer_for_entity_tags():
    scorers = headline_scorers(tag_classes(LABELS, ["other"], "bioes"), task=EntityTags("bioes"))
    assert isinstance(scorers["entity_f1"], TagEntityF1) and scorers["entity_f1"].scheme == "bioes"


def test_tag_chunks_read_the_label_and_predicted_columns_by_default():
    from dochar.metrics.tags import tag_chunks

    # the hand-made page of the first test: true chunks key, value, key, value; predicted key
    # (correct), value (correct), value (wrong), key (correct), value (wrong: 5 alone)
    true = ["B-key", "I-key", "B-value", "O", "B-key", "B-value", "I-value"]
    pred = ["B-key", "I-key", "B-value", "B-value", "I-key", "B-value", "O"]
    frame = frame_of([true], [pred], width=4)
    truth, predicted = tag_chunks(frame, "bio")
    assert truth["label"].tolist() == ["key", "value", "key", "value"]
    assert predicted["label"].tolist() == ["key", "value", "value", "key", "value"]
    assert predicted["correct"].tolist() == [True, True, False, True, False]
    # one word is enough to score
    one = tag_chunks(frame_of([["B-key"]], [["B-key"]]), "bio")[1]
    assert one["correct"].tolist() == [True]


def test_tag_chunks_name_what_is_missing():
    from dochar.metrics.tags import tag_chunks
    from dochar.metrics.words import MetricInputError

    frame = frame_of([["B-key", "O"]], [["B-key", "O"]])
    with pytest.raises(MetricInputError, match=r"tag scores need column\(s\) \['x0'\]"):
        tag_chunks(frame.drop(columns=["x0"]), "bio")
    with pytest.raises(MetricInputError, match=r"tag scores need column\(s\) \['layout'\]"):
        tag_chunks(frame, "bio", group_col="layout")
    with pytest.raises(MetricInputError, match="^no words to score$"):
        tag_chunks(frame.iloc[:0], "bio")


# --- the edges of the counting: word-id ties, absent labels, empty documents, other columns ---

def test_words_in_one_box_are_read_in_word_id_order():
    # two words with the same box: dochar's reading order breaks the tie by word_id
    # (dochar.data.word_table.reading_order), whatever the row order. Truth B-key I-key is one
    # chunk; the prediction B-key B-key is two, none right: F1 = 0 (by hand). Read in row order
    # (word 1 first) both would be two one-word chunks and F1 would be 1.
    box = dict(doc_id="coa-0", page=1, x0=10.0, y0=10.0, x1=60.0, y1=22.0)
    frame = pd.DataFrame([{**box, "word_id": 1, "label": "I-key", "predicted": "B-key"},
                          {**box, "word_id": 0, "label": "B-key", "predicted": "B-key"}])
    scores = tag_entity_scores(frame, tag_classes(LABELS, ["other"], "bio"), "bio")
    assert (scores.n_true, scores.n_pred, scores.n_correct) == (1, 2, 0)


def test_labels_without_chunks_get_zero_counts_in_the_per_label_table():
    # 'value' is never true and predicted once (wrong); 'date' appears nowhere. By hand:
    # key: 1 true, 1 predicted, 1 correct; value: 0, 1, 0; date: 0, 0, 0
    frame = frame_of([["B-key", "O"]], [["B-key", "B-value"]])
    scores = tag_entity_scores(frame, tag_classes(["key", "value", "date"], [], "bio"), "bio")
    table = scores.per_class
    assert table.index.name == "label" and table.index.tolist() == ["key", "value", "date"]
    assert list(table.columns) == ["precision", "recall", "f1", "support", "n_pred", "n_correct"]
    assert table[["support", "n_pred", "n_correct"]].to_numpy().tolist() == [
        [1, 1, 1], [0, 1, 0], [0, 0, 0]]
    assert table["precision"].tolist() == pytest.approx([1.0, 0.0, 0.0])


def test_other_truth_and_prediction_columns_are_read_when_named():
    # the default columns hold no chunk at all; the named ones the hand-made page of the first
    # test (P = 3/5, R = 3/4, F1 = 2/3): only the named ones may count
    true = ["B-key", "I-key", "B-value", "O", "B-key", "B-value", "I-value"]
    pred = ["B-key", "I-key", "B-value", "B-value", "I-key", "B-value", "O"]
    frame = frame_of([["O"] * 7], [["O"] * 7], width=4)
    frame["gold"] = frame_of([true], [pred], width=4)["label"]
    frame["guess"] = frame_of([true], [pred], width=4)["predicted"]
    scores = tag_entity_scores(frame, tag_classes(LABELS, ["other"], "bio"), "bio",
                               true_col="gold", pred_col="guess")
    assert (scores.n_true, scores.n_pred, scores.n_correct) == (4, 5, 3)
    assert TagEntityF1("bio", true_col="gold", pred_col="guess")(frame) == pytest.approx(2 / 3)


def test_per_document_counts_keep_documents_without_chunks():
    # by hand, per document (correct, predicted, true): coa-0 B-key I-key predicted right
    # (1, 1, 1); coa-1 a true key predicted O (0, 0, 1); coa-2 nothing true, nothing
    # predicted (0, 0, 0); coa-3 one word, predicted right (1, 1, 1)
    rows = []
    for doc, words in {"coa-0": [("B-key", "B-key"), ("I-key", "I-key")],
                       "coa-1": [("B-key", "O"), ("O", "O")],
                       "coa-2": [("O", "O"), ("O", "O")],
                       "coa-3": [("B-value", "B-value")]}.items():
        rows += [dict(doc_id=doc, page=1, word_id=k, x0=80.0 * k, x1=80.0 * k + 60, y0=0.0,
                      y1=12.0, label=t, predicted=p) for k, (t, p) in enumerate(words)]
    frame = pd.DataFrame(rows)
    groups, counts = TagEntityF1("bio").group_counts(frame, "doc_id")
    assert groups.tolist() == ["coa-0", "coa-1", "coa-2", "coa-3"]
    assert counts.tolist() == [[1, 1, 1], [0, 0, 1], [0, 0, 0], [1, 1, 1]]
    # all words of the run: 2 correct of 2 predicted and 3 true, F1 = 2·2 / (2 + 3) = 0.8
    assert TagEntityF1("bio")(frame) == pytest.approx(0.8)
    # document ids as a category with one more, unused, category (a filtered frame): the
    # unused category is no document of the frame and scores nothing
    frame["doc_id"] = pd.Categorical(frame["doc_id"], categories=[*groups, "coa-9"])
    assert TagEntityF1("bio")(frame) == pytest.approx(0.8)
    assert TagEntityF1("bio").group_counts(frame, "doc_id")[1].tolist() == counts.tolist()
