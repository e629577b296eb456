"""Rows as a link kind: row truth from ``row`` links, row F1 worked out by hand, the key ->
value kind leaving row links out, and candidate recall of row links per builder.

Row F1 counts a predicted row (a connected component of predicted links, two segments or
more) as correct only when its set of segments equals a true row's (the exact-match rule of
entity F1, common practice); every expected value is worked out by hand in the comments.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from dochar.data.word_table import Page
from dochar.graphs.candidates import missed_links
from dochar.graphs.diagnostics import candidate_recall
from dochar.graphs.reading_order import ReadingOrderBuilder
from dochar.metrics.evaluate import SCORER_KINDS, headline_names
from dochar.metrics.intervals import bootstrap_scores
from dochar.metrics.links import RowF1
from dochar.models.objectives import best_threshold, row_f1_at
from dochar.tasks.links import LinkTaskError, Links, link_pages


def _frame(doc: str, pairs, rows, predicted, page_nodes: int) -> pd.DataFrame:
    """Pair rows of one page; ``rows`` maps node -> true row (a lone node names its own)."""
    return pd.DataFrame({
        "doc_id": doc, "page": 1, "source": [a for a, _ in pairs],
        "target": [b for _, b in pairs],
        "source_entity": [rows[a] for a, _ in pairs], "target_entity": [rows[b] for _, b in pairs],
        "candidate": True, "page_nodes": page_nodes,
        "label": ["link" if rows[a] == rows[b] else "none" for a, b in pairs],
        "predicted": predicted})


# nodes a..e = 0..4, true rows {a,b} {c,d,e}; node 5 is a total line in no row
ROWS = {0: "r1", 1: "r1", 2: "r2", 3: "r2", 4: "r2", 5: "l5"}
PAIRS = [(0, 1), (1, 2), (2, 3), (3, 4), (4, 5)]


def test_row_f1_by_hand():
    # predicted links a-b, c-d only: components {a,b} {c,d} {e} {5}
    # rows of two or more: predicted {a,b} {c,d} (2), true {a,b} {c,d,e} (2); correct {a,b} = 1
    # precision 1/2, recall 1/2, row F1 = 2*1 / (2 + 2) = 0.5
    frame = _frame("d1", PAIRS, ROWS, ["link", "none", "link", "none", "none"], page_nodes=9)
    assert RowF1()(frame) == pytest.approx(0.5)
    _, counts = RowF1().group_counts(frame, "doc_id")
    assert counts.tolist() == [[1, 2, 2]]   # lone nodes (e, 5, 3 outside) are no rows


def test_row_f1_one_false_link_merges_two_rows():
    # every true link found plus the false b-c: one component {a,b,c,d,e}; correct 0,
    # predicted 1, true 2: row F1 = 0 / 3 = 0 (link F1 stays high: 4 TP, 1 FP)
    frame = _frame("d1", PAIRS, ROWS, ["link", "link", "link", "link", "none"], page_nodes=6)
    assert RowF1()(frame) == 0.0
    perfect = _frame("d1", PAIRS, ROWS, ["link", "none", "link", "link", "none"], 6)
    assert RowF1()(perfect) == 1.0


def test_row_counts_add_up_over_documents():
    # d1 as in the hand-worked case (1, 2, 2); d2 all right: rows {0,1} found (1, 1, 1)
    # pooled: 2 correct, 3 predicted, 3 true: row F1 = 4 / 6
    d1 = _frame("d1", PAIRS, ROWS, ["link", "none", "link", "none", "none"], 6)
    d2 = _frame("d2", [(0, 1), (1, 2)], {0: "r", 1: "r", 2: "x"}, ["link", "none"], 3)
    frame = pd.concat([d1, d2], ignore_index=True)
    assert RowF1()(frame) == pytest.approx(4 / 6)
    scorer = SCORER_KINDS["row_grouping"](Links(link_kind="rows"), [], [])
    # a resample of two documents from counts: d1 twice 2*1 / (4 + 4) = 0.5, d2 twice 1.0,
    # one of each 4/6; with 200 resamples all three occur and nothing else
    draws = bootstrap_scores(frame, scorer, n_resamples=200, seed=0)
    assert sorted(set(np.round(draws, 6))) == [0.5, round(4 / 6, 6), 1.0]


def _page() -> Page:
    # segments (entities) of a receipt: two items, each name | count | price on one printed row,
    # and a total line with its key; entity ids as the receipt importer writes them
    boxes = np.array([[10, 10, 60, 20], [100, 10, 110, 20], [150, 10, 190, 20],
                      [10, 30, 60, 40], [100, 30, 110, 40], [150, 30, 190, 40],
                      [10, 60, 50, 70], [150, 60, 190, 70]], dtype=float)
    return Page("r1", 1, np.arange(8), ["Tea", "1", "9,000", "Rice", "2", "30,000", "TOTAL",
                                        "39,000"], boxes, 200.0, 100.0,
                labels=["menu.nm", "menu.cnt", "menu.price"] * 2 + ["key", "total.total_price"],
                entity_ids=["l0", "l1", "l2", "l3", "l4", "l5", "l6.key", "l6"])


LINKS = pd.DataFrame({"doc_id": "r1", "page": 1,
                      "source": ["l0", "l1", "l3", "l4", "l6.key"],
                      "target": ["l1", "l2", "l4", "l5", "l6"],
                      "kind": ["row", "row", "row", "row", "key_value"]})


def test_rows_page_groups_segments_by_row_links():
    (page,) = link_pages([_page()], "rows", LINKS)
    assert page.nodes.entity_ids == ["l0", "l1", "l2", "l3", "l4", "l5", "l6.key", "l6"]
    rows = page.entities
    # {l0, l1, l2} one row, {l3, l4, l5} another; the total's key and value are rows of their own
    assert rows[0] == rows[1] == rows[2] != rows[3] == rows[4] == rows[5]
    assert rows[6:] == ["l6.key", "l6"]
    assert page.true_links.shape == (2, 4) and not page.directed


def test_key_value_leaves_row_links_out():
    (page,) = link_pages([_page()], "key_value", LINKS)
    assert page.true_links.T.tolist() == [[6, 7]]   # only l6.key -> l6
    rows_only = LINKS[LINKS["kind"] == "row"]
    with pytest.raises(LinkTaskError, match="only 'row' links"):
        link_pages([_page()], "key_value", rows_only)
    with pytest.raises(LinkTaskError, match="kind 'row'"):
        link_pages([_page()], "rows", LINKS[LINKS["kind"] != "row"])


def test_rows_task_scores_row_f1_first():
    assert list(Links(link_kind="rows").scores)[0] == "row_f1"
    assert "row_f1" not in Links(link_kind="key_value").scores
    assert "row_f1" in headline_names()      # what the gate may watch


def test_candidate_recall_reports_row_links():
    # reading order over the 8 segments chains 0-1-2-3-4-5-6-7 (next / previous): every row
    # link (0-1, 1-2, 3-4, 4-5) is a candidate, so recall 4/4; the key -> value link l6.key -> l6
    # (6 -> 7) is one as well
    recall = candidate_recall([_page()], ReadingOrderBuilder(), LINKS).to_dict()
    assert recall["true_links_rows"] == 4
    assert recall["candidate_recall_rows"] == 1.0
    assert recall["true_links_key_value"] == 1


def test_link_cut_chosen_by_row_f1():
    # two pages kept apart by node offsets: page 1 nodes 0..2 (true row {0,1}, 2 alone),
    # page 2 nodes 3..5 (true row {3,4,5})
    pairs = np.array([[0, 1, 3, 4], [1, 2, 4, 5]])
    truth = np.array([True, False, True, True])
    probability = np.array([0.9, 0.7, 0.8, 0.6])
    # cut 0.65: links 0-1, 1-2, 3-4 -> rows {0,1,2} {3,4}: no true row matched, F1 0
    assert row_f1_at(probability, truth, pairs, 0.65) == 0.0
    # cut 0.5: every link -> {0,1,2} {3,4,5}: {3,4,5} right, F1 = 2*1 / (2 + 2) = 0.5
    assert row_f1_at(probability, truth, pairs, 0.5) == 0.5
    # cut 0.75: links 0-1, 3-4 -> {0,1} right, {3,4} wrong: F1 = 2*1 / (2 + 2) = 0.5
    # cut 0.85: link 0-1 only -> {0,1} right, nothing else: F1 = 2*1 / (1 + 2) = 2/3 (best)
    # cut 0.95: no link, no predicted row: F1 = 0 / (0 + 2) = 0
    # on the grid 0.05, 0.10 .. 0.95 the cuts in (0.8, 0.9] give 2/3: the first is 0.85
    threshold, score = best_threshold(probability, truth, rows=pairs)
    assert threshold == pytest.approx(0.85) and score == pytest.approx(2 / 3)
    # link F1 picks another cut: 0.05 gives TP 3, FP 1: 6/7; 0.85 gives TP 1, FN 2: 2/4
    assert best_threshold(probability, truth) == (pytest.approx(0.05), pytest.approx(6 / 7))


def test_rows_that_interleave_in_node_order_miss_their_links():
    # nodes 0..3 in rows a = {0, 2} and b = {1, 3} (a table read column by column); the only
    # candidates join 0-1 and 2-3, across rows: each row is split in two pieces, so one link
    # per row is missed, reported as the pair of its pieces' first nodes: (0, 2) and (1, 3)
    missed = missed_links(np.zeros((2, 0), np.int64), np.array([[0, 2], [1, 3]]), 4,
                          directed=False, entities=np.array(["a", "b", "a", "b"], object))
    assert sorted(map(tuple, missed.T.tolist())) == [(0, 2), (1, 3)]
