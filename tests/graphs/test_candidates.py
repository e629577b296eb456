"""Candidate pairs and candidate recall, against brute-force counts written out here."""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd

from dochar import graphs
from dochar.data.word_table import Page
from dochar.graphs.candidates import CandidateOptions, candidate_pairs, missed_links
from dochar.graphs.diagnostics import candidate_recall
from dochar.tasks.links import word_entities
from dochar.tasks.segment_labels import segment_page


def _page(boxes, entities, labels=None) -> Page:
    boxes = np.asarray(boxes, dtype=float)
    return Page(doc_id="d", page=1, word_ids=np.arange(len(boxes)),
                texts=[f"w{i}" for i in range(len(boxes))], boxes=boxes, width=100.0,
                height=100.0, labels=labels or ["other"] * len(boxes), entity_ids=entities)


def test_candidate_recall_matches_a_brute_force_count():
    rng = np.random.default_rng(7)
    corners = rng.uniform(0, 90, size=(30, 2))
    boxes = np.column_stack([corners, corners + rng.uniform(1, 8, size=(30, 2))])
    entities = [f"e{i // 3}" for i in range(30)]              # ten entities of three words
    page = _page(boxes, entities)
    builder = graphs.make_graph_builder("knn", k=2)
    edges = builder(page)
    # brute force: a word's entity is recovered when the candidate edges inside the entity
    # connect its 3 words; an entity left in c pieces needs c - 1 of its 2 true links
    linked = {frozenset((int(a), int(b))) for a, b in edges.edge_index.T}
    found = 0
    for entity in range(10):
        words = [3 * entity, 3 * entity + 1, 3 * entity + 2]
        inside = [pair for pair in itertools.combinations(words, 2) if frozenset(pair) in linked]
        pieces = {w: {w} for w in words}
        for a, b in inside:
            merged = pieces[a] | pieces[b]
            for w in merged:
                pieces[w] = merged
        found += 2 - (len({frozenset(p) for p in pieces.values()}) - 1)
    recall = candidate_recall([page], builder)
    assert recall.true_links["same_entity"] == 20
    assert recall.found["same_entity"] == found
    assert 0 < found < 20          # the case is not trivial either way

    # key -> value on segments, directed: a true link is found when the builder has an edge
    # between the two segments in either direction (both orientations are candidates)
    links = pd.DataFrame({"doc_id": "d", "page": 1, "source": [f"e{i}" for i in range(0, 9, 2)],
                          "target": [f"e{i}" for i in range(1, 10, 2)], "kind": "key_value"})
    segments = candidate_recall([page], builder, links)
    seg = segment_page(page, word_entities(page), None)
    node = {entity: i for i, entity in enumerate(seg.entity_ids)}
    seg_edges = {frozenset((int(a), int(b))) for a, b in builder(seg).edge_index.T}
    expected = sum(frozenset((node[f"e{2 * i}"], node[f"e{2 * i + 1}"])) in seg_edges
                   for i in range(5))
    assert segments.true_links["key_value"] == 5
    assert segments.found["key_value"] == expected


def test_distance_candidates_are_the_pairs_within_reach():
    # boxes on a line, 10 units wide, gaps of 5, 15 and 1 between neighbours
    boxes = [[0, 0, 10, 5], [15, 0, 25, 5], [40, 0, 50, 5], [51, 0, 61, 5]]
    page = _page(boxes, ["a", "a", "b", "b"])
    diagonal = np.hypot(100, 100)
    pairs = candidate_pairs(page, CandidateOptions("distance", 6 / diagonal), directed=False)
    # gaps: 0-1 5, 1-2 15, 2-3 1, 0-2 30, 1-3 26, 0-3 41 -> within 6: (0,1) and (2,3)
    assert pairs.T.tolist() == [[0, 1], [2, 3]]
    directed = candidate_pairs(page, CandidateOptions("distance", 6 / diagonal), directed=True)
    assert sorted(map(tuple, directed.T.tolist())) == [(0, 1), (1, 0), (2, 3), (3, 2)]


def test_missed_links_when_candidates_split_an_entity():
    # entity a = words 0,1,2; candidates only 0-1: the entity is in 2 pieces ({0,1}, {2}),
    # so 1 link is missed, joining the first words of the pieces: (0, 2)
    entities = np.array(["a", "a", "a", "b"], dtype=object)
    true_links = np.array([[0, 1], [1, 2]])
    missed = missed_links(true_links, np.array([[0], [1]]), 4, False, entities)
    assert missed.T.tolist() == [[0, 2]]
