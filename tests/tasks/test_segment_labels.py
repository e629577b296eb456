"""Segment pages: union boxes, joined text and targets worked out by hand; lines cut at gaps;
predictions mapped back onto every word."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from dochar.data.word_table import Page, line_segments
from dochar.tasks import SegmentLabels, TaskError, from_config

# A hand-made certificate header: "Lot No:" (key, entity k), "QX 17" (value, entity v) on one
# line with a wide gap between them, and "Orchard" (blank entity) below.
BOXES = np.array([[60, 10, 90, 22],     # 0 "No:"     entity k
                  [10, 12, 50, 20],     # 1 "Lot"     entity k (read first: further left)
                  [300, 11, 330, 21],   # 2 "QX"      entity v
                  [335, 10, 360, 22],   # 3 "17"      entity v
                  [10, 50, 80, 62]],    # 4 "Orchard" no entity
                 dtype=float)
PAGE = Page("coa-3", 1, np.array([5, 6, 7, 8, 9]), ["No:", "Lot", "QX", "17", "Orchard"], BOXES,
            400.0, 100.0, labels=["key", "key", "value", "value", "lab_name"],
            entity_ids=["k", "k", "v", "v", ""], layout_id="L1", split="test")


def test_entity_segments_hand_worked():
    nodes = SegmentLabels("entities").nodes(PAGE)
    assert nodes.texts == ["Lot No:", "QX 17", "Orchard"]
    # union boxes, by hand: k = [min x0 10, min y0 10, max x1 90, max y1 22]
    np.testing.assert_array_equal(nodes.boxes, [[10, 10, 90, 22], [300, 10, 360, 22],
                                                [10, 50, 80, 62]])
    assert nodes.labels == ["key", "value", "lab_name"]
    assert nodes.word_ids.tolist() == [0, 1, 2]
    assert [m.tolist() for m in nodes.members] == [[1, 0], [2, 3], [4]]
    assert (nodes.layout_id, nodes.split, nodes.width) == ("L1", "test", 400.0)


def test_line_segments_cut_at_the_gap():
    # median word height 12; the gap 90 -> 300 is 210 > 12, the others are below it
    assert line_segments(BOXES, np.arange(5)).tolist() == [0, 0, 1, 1, 2]
    nodes = SegmentLabels("lines").nodes(PAGE)
    assert nodes.texts == ["Lot No:", "QX 17", "Orchard"]
    # with a gap allowance wider than the gap, the first line stays whole
    whole = SegmentLabels("lines", max_gap=30.0).nodes(PAGE)
    assert whole.texts == ["Lot No: QX 17", "Orchard"]
    assert whole.labels[0] == "key"      # 2 key, 2 value: the tie goes to the first word read


def test_given_segments_refuse_mixed_labels():
    page = Page("coa-4", 1, np.arange(2), ["a", "b"], BOXES[:2], 400.0, 100.0,
                labels=["key", "value"], entity_ids=["e", "e"])
    with pytest.raises(TaskError, match=r"coa-4#p1, entity 'e'.*different labels"):
        SegmentLabels().nodes(page)


def test_word_predictions_give_each_word_its_segment_label():
    task = SegmentLabels()
    nodes = task.nodes(PAGE)
    frame = pd.DataFrame({"doc_id": "coa-3", "page": 1, "word_id": [0, 1, 2],
                          "predicted": ["key", "key", "other"]})
    words = task.word_predictions([nodes], frame)
    assert words["word_id"].tolist() == [5, 6, 7, 8, 9]
    assert words["predicted"].tolist() == ["key", "key", "key", "key", "other"]
    assert words["label"].tolist() == PAGE.labels


def test_from_config_builds_segment_options():
    task = from_config({"name": "segment_labels", "segments": "lines", "max_gap": 2.0})
    assert (task.segments, task.max_gap) == ("lines", 2.0)
    with pytest.raises(TaskError, match="segments must be one of"):
        from_config({"name": "segment_labels", "segments": "paragraphs"})
