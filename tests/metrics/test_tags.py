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
from seqeval.metrics import classification_report, f1_score
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
    assert scores.f1 == pytest.approx(2 / 3)
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
    report = classification_report(truth, repaired, output_dict=True, zero_division=0, **strict)
    for label in ("key", "value"):
        assert ours.per_class.loc[label, "f1"] == pytest.approx(report[label]["f1-score"])
        assert ours.per_class.loc[label, "support"] == report[label]["support"]
    # the additive scorer gives the same figure from per-document counts
    assert TagEntityF1(scheme)(frame) == pytest.approx(ours.f1)


@pytest.mark.parametrize("scheme", ["bio", "bioes"])
def test_perfect_predictions_score_exactly_one(scheme):
    truth, _ = random_sequences(np.random.default_rng(7), scheme)
    frame = frame_of(truth, truth)
    assert tag_entity_scores(frame, tag_classes(LABELS, ["other"], scheme), scheme).f1 == 1.0
    value, low, high = bootstrap_interval(frame, TagEntityF1(scheme), n_resamples=50)
    assert value == low == high == 1.0


@pytest.mark.parametrize("scheme", ["bio", "bioes"])
def test_perfect_tags_of_funsd_score_exactly_one(funsd_root, scheme):
    from dochar.data.importers.form_json import import_form_json
    from dochar.data.word_table import iter_pages, validate_word_table

    frame, _ = import_form_json([funsd_root / "testing_data" / "annotations"])
    table = validate_word_table(frame).table
    task = EntityTags(scheme)
    frames = []
    for page in list(iter_pages(table))[:15]:
        tags = task.nodes(page).labels
        frames.append(pd.DataFrame({"doc_id": page.doc_id, "page": page.page,
                                    "word_id": page.word_ids, "x0": page.boxes[:, 0],
                                    "y0": page.boxes[:, 1], "x1": page.boxes[:, 2],
                                    "y1": page.boxes[:, 3], "label": tags, "predicted": tags}))
    frame = pd.concat(frames, ignore_index=True)
    scores = tag_entity_scores(frame, task.classes(["header", "question", "answer", "other"]),
                               scheme)
    assert scores.n_true > 100 and scores.f1 == 1.0


def test_headline_scorers_pick_the_tag_scorer_for_entity_tags():
    scorers = headline_scorers(tag_classes(LABELS, ["other"], "bioes"), task=EntityTags("bioes"))
    assert isinstance(scorers["entity_f1"], TagEntityF1) and scorers["entity_f1"].scheme == "bioes"
