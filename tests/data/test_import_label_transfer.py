"""Label transfer by box IoU: the overlap formula by hand, one-to-one matching against a
brute-force oracle over every assignment, and a page in two units."""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest

from dochar.data.importers.label_transfer import (
    TransferSettings,
    box_iou,
    match_boxes,
    transfer_labels,
)


def test_iou_by_hand() -> None:
    a = np.array([[0.0, 0.0, 2.0, 2.0]])
    b = np.array([[1.0, 1.0, 3.0, 3.0], [2.0, 0.0, 4.0, 2.0], [0.0, 0.0, 2.0, 2.0]])
    # overlap 1 x 1, union 4 + 4 - 1 = 7; touching edges share no area; identical boxes give 1
    assert box_iou(a, b).tolist() == [[1 / 7, 0.0, 1.0]]


def oracle(iou: np.ndarray, min_iou: float) -> float:
    """Best total IoU over every one-to-one assignment, counting only pairs >= min_iou."""
    n, m = iou.shape
    best = 0.0
    for chosen in itertools.permutations(range(m), min(n, m)) if n <= m else \
            itertools.permutations(range(n), m):
        pairs = zip(range(n), chosen) if n <= m else zip(chosen, range(m))
        best = max(best, sum(iou[r, c] for r, c in pairs if iou[r, c] >= min_iou))
    return best


def test_hungarian_reaches_the_oracle_and_greedy_can_fall_short() -> None:
    # Worked by hand: greedy takes (0, 0) = 0.9 first, leaving word 1 with nothing >= 0.5;
    # the best assignment is (0, 1) + (1, 0) = 0.6 + 0.6 = 1.2, two words labelled.
    iou = np.array([[0.9, 0.6], [0.6, 0.0]])
    assert match_boxes(iou, 0.5, "greedy") == [(0, 0)]
    assert sorted(match_boxes(iou, 0.5, "hungarian")) == [(0, 1), (1, 0)]
    rng = np.random.default_rng(7)
    for _ in range(30):
        iou = rng.random((int(rng.integers(1, 5)), int(rng.integers(1, 5))))
        pairs = match_boxes(iou, 0.5, "hungarian")
        assert sum(iou[r, c] for r, c in pairs) == pytest.approx(oracle(iou, 0.5))
        assert len({r for r, _ in pairs}) == len(pairs) == len({c for _, c in pairs})


def page(doc: str, words: list[tuple], scale: float, **columns) -> pd.DataFrame:
    rows = [{"doc_id": doc, "page": 1, "word_id": i, "text": t, "x0": x0 * scale,
             "y0": y0 * scale, "x1": x1 * scale, "y1": y1 * scale, "page_width": 100 * scale,
             "page_height": 50 * scale} for i, (t, x0, y0, x1, y1) in enumerate(words)]
    frame = pd.DataFrame(rows)
    for name, values in columns.items():
        frame[name] = values
    return frame


def test_labels_move_across_units_and_the_unmatched_are_listed() -> None:
    labelled = page("d", [("Lot", 10, 10, 20, 15), ("B-5", 25, 10, 40, 15),
                          ("Tel.", 60, 30, 70, 35)], 1.0, label=["key", "result", "other"],
                    entity_id=["e1", "e2", "e3"], layout_id="fam", split="train")
    # The same page read in pixels at twice the scale: Lot exact, B-5 shifted a little
    # (IoU by hand: overlap 13 x 5 = 65, union 75 + 75 - 65 = 85, 65 / 85 = 0.765),
    # a stray mark that matches nothing, and Tel. missed.
    imported = page("d", [("Lot", 10, 10, 20, 15), ("B-5", 27, 10, 42, 15),
                          ("~", 80, 5, 85, 8)], 2.0)
    table, report = transfer_labels(imported, labelled, TransferSettings(min_iou=0.5))
    assert table.text.tolist() == ["Lot", "B-5"]
    assert table.label.tolist() == ["key", "result"]
    assert table.entity_id.tolist() == ["e1", "e2"]
    assert set(table.layout_id) == {"fam"} and set(table.split) == {"train"}
    assert (report.matched, report.labelled_words) == (2, 3)
    assert report.unmatched_imported == ["d#p1/w2 '~'"]
    assert report.unmatched_labelled == ["d#p1/w2 'Tel.'"]

    strict, report = transfer_labels(imported, labelled, TransferSettings(min_iou=0.8))
    assert strict.text.tolist() == ["Lot"]           # 0.765 < 0.8
    kept, _ = transfer_labels(imported, labelled, TransferSettings(unmatched_label="other"))
    assert kept.label.tolist() == ["key", "result", "other"]


def test_pages_on_one_side_only_are_counted() -> None:
    labelled = page("a", [("x", 1, 1, 2, 2)], 1.0, label=["other"])
    imported = page("b", [("x", 1, 1, 2, 2)], 1.0)
    table, report = transfer_labels(imported, labelled)
    assert table.empty
    assert report.pages_without_labels == ["b#p1"]
    assert report.labelled_pages_not_imported == ["a#p1"]
    with pytest.raises(ValueError, match="matching must be one of"):
        TransferSettings(matching="closest")
