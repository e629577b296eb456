"""Candidate pairs and candidate recall, against brute-force counts written out here."""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest

from dochar import graphs
from dochar.data.word_table import Page
from dochar.graphs.base import GraphBuilderError
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


def _brute_force_gap(a, b) -> float:
    """Shortest Euclidean distance between two boxes with integer corners: over every integer
    point of both boxes (closest points of two axis-aligned boxes lie on integer coordinates
    when the corners do), 0 when they share a point. Common practice: the distance of two sets
    is the least distance of their points."""
    from scipy.spatial.distance import cdist

    def points(box):
        xs, ys = np.arange(box[0], box[2] + 1), np.arange(box[1], box[3] + 1)
        return np.array([(x, y) for x in xs for y in ys], dtype=float)

    return float(cdist(points(a), points(b)).min())


def test_distance_candidates_match_a_brute_force_euclidean_gap():
    # by hand first: boxes 3 apart across and 4 apart down are 5 apart (Pythagoras), not 4
    page = _page([[0, 0, 10, 10], [13, 14, 20, 20]], ["a", "b"])
    diagonal = np.hypot(100, 100)
    assert candidate_pairs(page, CandidateOptions("distance", 4.9 / diagonal),
                           directed=False).shape == (2, 0)
    assert candidate_pairs(page, CandidateOptions("distance", 5 / diagonal),
                           directed=False).T.tolist() == [[0, 1]]
    # random integer boxes against the brute-force gap
    rng = np.random.default_rng(3)
    corners = rng.integers(0, 80, size=(14, 2))
    boxes = np.column_stack([corners, corners + rng.integers(1, 12, size=(14, 2))])
    page = _page(boxes, [f"e{i}" for i in range(14)])
    for reach in (0.0, 4.0, 9.0):
        expected = [[i, j] for i, j in itertools.combinations(range(14), 2)
                    if _brute_force_gap(boxes[i], boxes[j]) <= reach]
        pairs = candidate_pairs(page, CandidateOptions("distance", reach / diagonal),
                                directed=False)
        assert pairs.T.tolist() == expected
        assert len(expected) > 0


def test_touching_boxes_are_candidates_at_distance_zero():
    # boxes 0 and 1 share the edge x = 10, box 2 overlaps box 1; box 3 is 1 unit away.
    # Their gap is 0 ("0 when they touch", module docstring), within a reach of 0.
    page = _page([[0, 0, 10, 5], [10, 0, 20, 5], [15, 2, 25, 8], [26, 0, 30, 5]],
                 ["a", "a", "a", "b"])
    pairs = candidate_pairs(page, CandidateOptions("distance", 0.0), directed=False)
    assert pairs.T.tolist() == [[0, 1], [1, 2]]


def test_directed_candidates_hold_both_orientations_of_every_edge():
    from dochar.graphs.base import TypedEdges

    # the builder gave one orientation of each edge (0 -> 1, 2 -> 1) and a self-loop
    page = _page([[0, 0, 10, 5], [20, 0, 30, 5], [40, 0, 50, 5]], ["a", "a", "b"])
    edges = TypedEdges(np.array([[0, 2, 1], [1, 1, 1]]), np.zeros(3, dtype=np.int64), ("near",))
    directed = candidate_pairs(page, CandidateOptions("graph"), directed=True, edges=edges)
    assert sorted(map(tuple, directed.T.tolist())) == [(0, 1), (1, 0), (1, 2), (2, 1)]
    undirected = candidate_pairs(page, CandidateOptions("graph"), directed=False, edges=edges)
    assert undirected.T.tolist() == [[0, 1], [1, 2]]


# ------------------------------------------------ pair keys, orientations, refusals (by hand)

def test_pair_keys_by_hand():
    from dochar.graphs.candidates import pair_keys

    # key = source · n + target; undirected pairs put the lower index first: with n = 5 the
    # pair (2, 1) is 1·5 + 2 = 7 undirected and 2·5 + 1 = 11 directed, (1, 2) is 7 either way
    pairs = np.array([[2, 1], [1, 2]])
    assert pair_keys(pairs, 5, directed=False).tolist() == [7, 7]
    assert pair_keys(pairs, 5, directed=True).tolist() == [11, 7]


def test_a_directed_link_is_supplied_only_by_its_own_orientation():
    from dochar.graphs.candidates import candidate_hits

    link, reversed_link = np.array([[2], [1]]), np.array([[1], [2]])
    for true, candidates in ((link, reversed_link), (reversed_link, link)):
        assert candidate_hits(true, candidates, 5, directed=True).tolist() == [False]
        assert candidate_hits(true, candidates, 5, directed=False).tolist() == [True]
    assert missed_links(link, reversed_link, 5, directed=True).tolist() == [[2], [1]]
    assert missed_links(link, reversed_link, 5, directed=False).shape == (2, 0)


def test_missed_links_of_split_entities_are_integer_node_pairs():
    # entity "a" = nodes 0, 1, 2 with only the candidate pair (0, 1): pieces {0, 1} and {2},
    # one missed link joining their first words, (0, 2)
    missed = missed_links(np.array([[0, 1], [1, 2]]), np.array([[0], [1]]), 3,
                          directed=False, entities=np.array(["a", "a", "a"]))
    assert missed.tolist() == [[0], [2]] and missed.dtype == np.int64


def test_candidate_settings_and_sources_are_refused_with_the_reason():
    with pytest.raises(GraphBuilderError, match=r"^task\.candidates\.source='nearby': choose "
                                                r"one of \['graph', 'distance'\]$"):
        CandidateOptions(source="nearby")
    with pytest.raises(GraphBuilderError, match=r"^task\.candidates\.max_distance must be >= 0, "
                                                r"got -0\.5$"):
        CandidateOptions(source="distance", max_distance=-0.5)
    page = _page([[0, 0, 10, 10], [20, 0, 30, 10]], ["a", "b"])
    with pytest.raises(GraphBuilderError, match=r"^graph candidates need the page's edges or a "
                                                r"builder$"):
        candidate_pairs(page, CandidateOptions(), directed=False)
