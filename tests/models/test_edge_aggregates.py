"""The forest's view of edge attributes: mean and max of each word's incoming edge attributes,
appended by ``to_matrix`` after the neighbour aggregates (dochar/models/baselines.py)."""

from __future__ import annotations

import numpy as np

from dochar.data.word_table import Page
from dochar.features import WordFeaturizer
from dochar.graphs import make_graph_builder
from dochar.models.baselines import edge_attr_aggregates
from dochar.models.inputs import PageSet, to_matrix


def one_line_page() -> Page:
    # page 100 x 100, one line: A (0, 0, 10, 10), B (20, 0, 30, 10), C (60, 0, 70, 10)
    boxes = np.array([(0, 0, 10, 10), (20, 0, 30, 10), (60, 0, 70, 10)], float)
    return Page("doc", 1, np.arange(3), ["a", "b", "c"], boxes, 100.0, 100.0)


def matrix(page: Page, neighbour_features: bool, edge_features: list[str]) -> np.ndarray:
    builder = make_graph_builder("reading_order", edge_features=edge_features)
    featurizer = WordFeaturizer(groups=["geometry"]).fit([page])
    return to_matrix(PageSet.build([page], builder), featurizer, hash_features=8,
                     neighbour_features=neighbour_features)


def test_to_matrix_appends_incoming_edge_attribute_aggregates_worked_by_hand():
    page = one_line_page()
    # reading order links A <-> B and B <-> C; [distance, gap] of each incoming edge:
    #   B -> A: centres 25 - 5 = 20 apart -> 0.2; gap 20 - 10 = 10 -> 0.1
    #   A -> B: the same (0.2, 0.1);  C -> B: 65 - 25 = 40 -> 0.4, gap 60 - 30 = 30 -> 0.3
    #   B -> C: (0.4, 0.3)
    # columns: mean distance, mean gap, max distance, max gap
    expected = np.array([[0.2, 0.1, 0.2, 0.1],
                         [0.3, 0.2, 0.4, 0.3],        # B: mean of (0.2, 0.1) and (0.4, 0.3)
                         [0.4, 0.3, 0.4, 0.3]])
    with_attrs = matrix(page, True, ["distance"])
    without = matrix(page, True, [])
    assert with_attrs.shape[1] == without.shape[1] + 4
    np.testing.assert_array_equal(with_attrs[:, :without.shape[1]], without)
    np.testing.assert_allclose(with_attrs[:, -4:], expected, atol=1e-6)
    # without neighbour features the forest sees the words alone, edges or not
    np.testing.assert_array_equal(matrix(page, False, ["distance"]), matrix(page, False, []))


def test_a_word_without_in_edges_gets_zeros_and_negative_maxima_stay():
    attrs = np.array([[-3.0], [-1.0]])
    out = edge_attr_aggregates(attrs, np.array([1, 1]), 3)
    np.testing.assert_array_equal(out, [[0, 0], [-2.0, -1.0], [0, 0]])
