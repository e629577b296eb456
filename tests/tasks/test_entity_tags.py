"""Boundary tags: hand-worked BIO / BIOES encodings, the repair rule against seqeval's own
chunking, and the perfect-prediction ceiling of 1.0.

Sources: the IOB2 and IOBES conventions (Ramshaw & Marcus 1995; Ratinov & Roth 2009); the
repair rule is conlleval's chunking, which seqeval's default mode (``get_entities``) implements.
"""

from __future__ import annotations

import numpy as np
import pytest
from seqeval.metrics.sequence_labeling import get_entities

from dochar.data.word_table import Page
from dochar.tasks import EntityTags, TaskError, from_config
from dochar.tasks.entity_tags import decode, encode, repair, tag_classes


def test_tag_classes_put_outside_first_and_skip_outside_labels():
    assert tag_classes(["question", "answer", "other"], ["other"], "bio") == [
        "O", "B-question", "I-question", "B-answer", "I-answer"]
    assert len(tag_classes(["question", "answer", "other"], ["other"], "bioes")) == 1 + 2 * 4


def test_encode_hand_worked():
    # words 0..6: [0 1] question, 2 other, [3] answer, [4 5 6] answer
    chunks = [(0, 1, "question"), (3, 3, "answer"), (4, 6, "answer")]
    assert encode(chunks, 7, "bio") == ["B-question", "I-question", "O", "B-answer",
                                        "B-answer", "I-answer", "I-answer"]
    assert encode(chunks, 7, "bioes") == ["B-question", "E-question", "O", "S-answer",
                                          "B-answer", "I-answer", "E-answer"]


@pytest.mark.parametrize("tags,chunks", [
    # BIO: an I- that opens a chunk is read as B- (conlleval); a type change cuts the chunk
    (["I-a", "I-a", "O", "I-b", "B-b", "I-a"], [(0, 1, "a"), (3, 3, "b"), (4, 4, "b"),
                                                (5, 5, "a")]),
    (["B-a", "I-b", "I-b"], [(0, 0, "a"), (1, 2, "b")]),
    (["O", "O"], []),
])
def test_bio_repair_hand_worked(tags, chunks):
    assert decode(tags, "bio") == chunks


@pytest.mark.parametrize("tags,chunks", [
    # an unclosed B-/I- chunk ends where it stops; a lone E- or I- opens one
    (["B-a", "I-a", "O", "E-a", "I-b", "E-b", "S-a", "E-a"],
     [(0, 1, "a"), (3, 3, "a"), (4, 5, "b"), (6, 6, "a"), (7, 7, "a")]),
    (["B-a", "B-a", "E-a"], [(0, 0, "a"), (1, 2, "a")]),
    (["S-a", "I-a", "E-a"], [(0, 0, "a"), (1, 2, "a")]),
])
def test_bioes_repair_hand_worked(tags, chunks):
    assert decode(tags, "bioes") == chunks
    assert decode(repair(tags, "bioes"), "bioes") == chunks   # repaired tags are a fixed point


@pytest.mark.parametrize("scheme,prefixes", [("bio", "BI"), ("bioes", "BIES")])
@pytest.mark.parametrize("seed", range(5))
def test_repair_rule_is_seqevals_default_chunking(scheme, prefixes, seed):
    rng = np.random.default_rng(seed)
    vocabulary = ["O"] + [f"{p}-{t}" for p in prefixes for t in ("a", "b")]
    tags = [str(t) for t in rng.choice(vocabulary, size=60)]
    # reference: seqeval.metrics.sequence_labeling.get_entities (conlleval chunking)
    expected = sorted((start, end, label) for label, start, end in get_entities(tags))
    assert sorted(decode(tags, scheme)) == expected


def test_page_tags_follow_reading_order_not_word_ids():
    # the table lists "12" before "Date:", but "Date:" is read first (left of it on one line)
    boxes = np.array([[60, 10, 80, 20], [10, 10, 50, 20], [10, 40, 50, 50]], float)
    page = Page("coa-1", 1, np.arange(3), ["12", "Date:", "Lab"], boxes, 100.0, 100.0,
                labels=["answer", "question", "question"], entity_ids=["a", "q", "q"])
    # read: Date:(q) 12(a) / Lab(q): entity q is split by "12" into two pieces
    assert EntityTags("bio").tags(page) == ["B-answer", "B-question", "B-question"]
    assert EntityTags("bioes").tags(page) == ["S-answer", "S-question", "S-question"]


def test_from_config_refuses_unknown_names_and_options():
    with pytest.raises(TaskError, match="choose one of"):
        from_config({"name": "pairs"})
    with pytest.raises(TaskError, match="unknown option"):
        from_config({"name": "entity_tags", "schema": "bio"})
    with pytest.raises(TaskError, match="scheme must be one of"):
        from_config({"name": "entity_tags", "scheme": "iob1"})


def test_words_with_a_blank_entity_id_are_chunks_of_their_own():
    # one line: "Lot" "No." (both key, no entity id) then "42" "mg" (value, entity v). By the
    # module rule a blank id stands alone: two one-word key chunks, one two-word value chunk.
    boxes = np.array([[0, 0, 20, 10], [25, 0, 45, 10], [50, 0, 70, 10], [75, 0, 95, 10]], float)
    page = Page("coa-2", 1, np.arange(4), ["Lot", "No.", "42", "mg"], boxes, 100.0, 100.0,
                labels=["key", "key", "value", "value"], entity_ids=["", "", "v", "v"])
    bio = EntityTags("bio").tags(page)
    assert bio == ["B-key", "B-key", "B-value", "I-value"]
    assert EntityTags("bioes").tags(page) == ["S-key", "S-key", "B-value", "E-value"]
    # reference: seqeval's chunking of those tags finds the three chunks
    assert sorted(get_entities(bio)) == [("key", 0, 0), ("key", 1, 1), ("value", 2, 3)]


def test_word_predictions_give_every_word_of_a_decoded_chunk_its_label():
    # one page, one line of six words listed out of reading order (word ids 5, 3, 0, 1, 4, 2;
    # x positions put them in the order of their ids). Predicted tags in reading order:
    #   word 0 B-key, 1 I-key, 2 O, 3 I-value (opens a chunk), 4 I-value, 5 B-key
    # decoded chunks: key {0, 1}, value {3, 4}, key {5}: word labels by hand below
    import pandas as pd

    ids = [5, 3, 0, 1, 4, 2]
    tags = {0: "B-key", 1: "I-key", 2: "O", 3: "I-value", 4: "I-value", 5: "B-key"}
    truth = {0: "B-key", 1: "I-key", 2: "B-value", 3: "I-value", 4: "I-value", 5: "O"}
    frame = pd.DataFrame({"doc_id": "coa-3", "page": 1, "word_id": ids,
                          "x0": [15.0 * w for w in ids], "y0": 0.0,
                          "x1": [15.0 * w + 10 for w in ids], "y1": 10.0,
                          "label": [truth[w] for w in ids], "predicted": [tags[w] for w in ids]})
    words = EntityTags("bio").word_predictions([], frame).set_index("word_id").sort_index()
    assert words["predicted"].tolist() == ["key", "key", "other", "value", "value", "key"]
    assert words["label"].tolist() == ["key", "key", "value", "value", "value", "other"]


def test_word_predictions_whole_table_by_hand():
    # two pages given in the order coa-9 then coa-1 (kept); on coa-9 the words 1 and 0 share
    # one box, so the smaller word id (0) is read first; coa-1 has one word, outside.
    # coa-9 in reading order: word 0 B-total_mass, word 1 I-total_mass, word 2 O:
    # one chunk starting at reading position 0, "chunk0"; word 2 gets the fallback label
    import pandas as pd

    box = {"x0": 0.0, "y0": 0.0, "x1": 20.0, "y1": 10.0}
    frame = pd.DataFrame([
        {"doc_id": "coa-9", "page": 2, "word_id": 1, **box, "label": "I-total_mass",
         "predicted": "I-total_mass", "confidence": 0.8},
        {"doc_id": "coa-9", "page": 2, "word_id": 2, "x0": 40.0, "y0": 0.0, "x1": 60.0,
         "y1": 10.0, "label": "O", "predicted": "O", "confidence": 0.7},
        {"doc_id": "coa-9", "page": 2, "word_id": 0, **box, "label": "B-total_mass",
         "predicted": "B-total_mass", "confidence": 0.9},
        {"doc_id": "coa-1", "page": 1, "word_id": 0, **box, "label": "O", "predicted": "O",
         "confidence": 0.6}])
    words = EntityTags("bio").word_predictions([], frame)
    assert list(words.columns) == ["doc_id", "page", "word_id", "label", "predicted", "entity",
                                   "confidence"]
    assert words.index.equals(pd.RangeIndex(4))
    assert words.drop(columns="confidence").values.tolist() == [
        ["coa-9", 2, 1, "total_mass", "total_mass", "chunk0"],
        ["coa-9", 2, 2, "other", "other", ""],
        ["coa-9", 2, 0, "total_mass", "total_mass", "chunk0"],
        ["coa-1", 1, 0, "other", "other", ""]]
    assert words["confidence"].tolist() == [0.8, 0.7, 0.9, 0.6]
    # with no outside label the words outside chunks get O
    bare = EntityTags("bio", outside=()).word_predictions([], frame.drop(columns="confidence"))
    assert bare["predicted"].tolist() == ["total_mass", "O", "total_mass", "O"]
    assert "confidence" not in bare.columns


def test_page_tags_without_entity_ids_tie_breaks_and_hyphenated_labels():
    from dochar.tasks.entity_tags import split_tag

    # no entity ids: every word stands alone, so two adjacent key words are two chunks; words
    # 1 and 0 share a box and are read in word-id order (0 first)
    boxes = np.array([[0, 0, 20, 10], [0, 0, 20, 10], [30, 0, 50, 10]], float)
    page = Page("coa-4", 1, np.array([1, 0, 2]), ["No.", "Lot", "7"], boxes, 100.0, 100.0,
                labels=["lot-key", "other", "lot-key"])
    assert EntityTags("bio").tags(page) == ["B-lot-key", "O", "B-lot-key"]
    assert EntityTags("bioes").tags(page) == ["S-lot-key", "O", "S-lot-key"]
    tied = Page("coa-5", 1, np.array([1, 0]), ["mg", "12"], boxes[:2], 100.0, 100.0,
                labels=["unit", "unit"], entity_ids=["u", "u"])
    assert EntityTags("bioes").tags(tied) == ["E-unit", "B-unit"]   # word 0 read first
    assert split_tag("B-lot-key") == ("B", "lot-key") and split_tag("O") == ("O", None)
    with pytest.raises(TaskError, match=r"^page coa-4#p1: task 'entity_tags' needs"):
        EntityTags("bio").tags(Page("coa-4", 1, np.array([0]), ["x"], boxes[:1], 100.0, 100.0))
    # the outside labels are kept as a tuple, so the task stays hashable (a frozen dataclass)
    assert EntityTags("bio", outside=["other"]).outside == ("other",)
    assert hash(EntityTags("bio", outside=["other"])) == hash(EntityTags("bio"))
