"""Edge features (dochar/graphs/transforms/edge_features.py): a two-box page worked by hand,
properties every pair of mirrored edges must keep, and the box gap against a brute-force oracle.

Sources: the expected values are worked out by hand in the comments beside them; the gap oracle
samples every integer point of two integer boxes; that a relative offset flips sign when the edge
is reversed while distances, gaps and overlaps stay is common practice (it follows from the
definitions); the same-line rule is dochar's own (dochar.data.word_table.line_ids).
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from dochar.graphs import GraphBuilderError, make_graph_builder
from dochar.graphs.base import TypedEdges
from dochar.graphs.transforms import EDGE_FEATURE_GROUPS, EdgeFeatures
from tests.graphs.test_builders import grid_pages, make_page

EVERY_GROUP = list(EDGE_FEATURE_GROUPS)


def features_by_edge(page, groups=EVERY_GROUP) -> dict[tuple[int, int], dict[str, float]]:
    """(source, target) -> {feature name: value} on the complete graph of the page."""
    edges = make_graph_builder("complete", edge_features=groups)(page)
    return {(int(s), int(t)): dict(zip(edges.edge_attr_names, map(float, row)))
            for s, t, row in zip(*edges.edge_index, edges.edge_attr)}


def test_two_box_page_by_hand():
    # page 200 x 100; word 0 = A (10, 20, 50, 30): w 40, h 10, centre (30, 25)
    #                 word 1 = B (80, 22, 100, 38): w 20, h 16, centre (90, 30)
    page = make_page([(10, 20, 50, 30), (80, 22, 100, 38)], width=200, height=100)
    edges = make_graph_builder("complete", edge_features=EVERY_GROUP)(page)
    # canonical order: by target, so B -> A (target 0) first, then A -> B
    assert edges.edge_index.tolist() == [[1, 0], [0, 1]]
    assert [edges.relations[t] for t in edges.edge_type] == ["right", "left"]
    assert edges.edge_attr.dtype == np.float32 and edges.edge_attr.shape == (2, 16)
    length = math.sqrt(60 ** 2 + 5 ** 2)          # |(60, 5)| = sqrt(3625) in page units
    b_to_a = {
        # source B, target A: dx = 90 - 30 = 60, dy = 30 - 25 = 5
        "dx_page": 60 / 200, "dy_page": 5 / 100,            # 0.3, 0.05
        "dx_height": 60 / 10, "dy_height": 5 / 10,          # target A is 10 high: 6, 0.5
        "distance": math.sqrt(0.3 ** 2 + 0.05 ** 2),        # sqrt(0.0925) = 0.30414
        # x-gap = 80 - 50 = 30, the y-ranges [22, 38] and [20, 30] overlap: gap = 30 / 200
        "gap": 0.15,
        "direction_sin": 5 / length, "direction_cos": 60 / length,   # 0.08305, 0.99655
        "log_width_ratio": math.log(20 / 40), "log_height_ratio": math.log(16 / 10),
        "log_aspect_source": math.log(20 / 16),             # B is 20 wide, 16 high
        "overlap_x": 0.0,                                   # [80, 100] and [10, 50] are apart
        "overlap_y": 8 / 10,                                # min(38, 30) - max(22, 20) = 8 of 10
        "same_line": 1.0,                                   # 8 >= half the smaller height (5)
        "same_column": 0.0,
        # one line, read left to right: A at 0, B at 1; (1 - 0) / 2 words
        "reading_distance": 0.5,
    }
    a_to_b = {
        # source A, target B: dx = -60, dy = -5; B is 16 high
        "dx_page": -0.3, "dy_page": -0.05, "dx_height": -60 / 16, "dy_height": -5 / 16,
        "distance": math.sqrt(0.0925), "gap": 0.15,
        "direction_sin": -5 / length, "direction_cos": -60 / length,
        "log_width_ratio": math.log(40 / 20), "log_height_ratio": math.log(10 / 16),
        "log_aspect_source": math.log(40 / 10),             # A is 40 wide, 10 high
        "overlap_x": 0.0, "overlap_y": 0.8, "same_line": 1.0, "same_column": 0.0,
        "reading_distance": -0.5,                           # (0 - 1) / 2
    }
    for row, expected in zip(edges.edge_attr, (b_to_a, a_to_b)):
        assert set(expected) == set(edges.edge_attr_names)
        got = dict(zip(edges.edge_attr_names, row.tolist()))
        for name, value in expected.items():
            assert got[name] == pytest.approx(value, rel=1e-6, abs=1e-7), name


def test_column_neighbours_and_coincident_centres_by_hand():
    # page 100 x 100; word 0 (10, 10, 30, 20) and word 1 (12, 40, 28, 50) share a column:
    # x-ranges [10, 30] and [12, 28] overlap by 16 = all of the smaller width 16
    # word 2 (10, 10, 30, 20) is a copy of word 0: same centre, no direction
    page = make_page([(10, 10, 30, 20), (12, 40, 28, 50), (10, 10, 30, 20)])
    got = features_by_edge(page, ["direction", "overlap", "alignment", "distance"])
    assert got[(1, 0)]["overlap_x"] == 1.0 and got[(1, 0)]["same_column"] == 1.0
    assert got[(1, 0)]["same_line"] == 0.0 and got[(1, 0)]["gap"] == pytest.approx(0.2)  # 40 - 20
    assert got[(1, 0)]["direction_sin"] == 1.0 and got[(1, 0)]["direction_cos"] == 0.0   # below
    assert got[(2, 0)] == {"direction_sin": 0.0, "direction_cos": 0.0, "overlap_x": 1.0,
                           "overlap_y": 1.0, "same_line": 1.0, "same_column": 1.0,
                           "distance": 0.0, "gap": 0.0}


def brute_force_gap(a, b, width, height) -> float:
    """Least page-normalised distance between the integer points of two integer boxes: exact,
    since the nearest points of two axis-aligned boxes sit at integer coordinates here."""
    points = [np.array([(x, y) for x in range(int(x0), int(x1) + 1)
                        for y in range(int(y0), int(y1) + 1)], float) for x0, y0, x1, y1 in (a, b)]
    dx = (points[0][:, None, 0] - points[1][None, :, 0]) / width
    dy = (points[0][:, None, 1] - points[1][None, :, 1]) / height
    return float(np.sqrt(dx ** 2 + dy ** 2).min())


@settings(max_examples=60, deadline=None)
@given(page=grid_pages())
def test_gap_matches_brute_force_point_sampling(page):
    for (s, t), row in features_by_edge(page, ["distance"]).items():
        expected = brute_force_gap(page.boxes[s], page.boxes[t], page.width, page.height)
        assert row["gap"] == pytest.approx(expected, rel=1e-6, abs=1e-7), (s, t)


ANTISYMMETRIC = ("dx_page", "dy_page", "direction_sin", "direction_cos", "log_width_ratio",
                 "log_height_ratio", "reading_distance")
SYMMETRIC = ("distance", "gap", "overlap_x", "overlap_y", "same_line", "same_column")


@settings(max_examples=60, deadline=None)
@given(page=grid_pages())
def test_mirrored_edges_negate_offsets_and_keep_distances(page):
    got = features_by_edge(page)
    floor = 1e-3 * page.height                 # MIN_EXTENT of the page height
    height = np.maximum(page.boxes[:, 3] - page.boxes[:, 1], floor)
    for (s, t), forward in got.items():
        backward = got[(t, s)]
        for name in ANTISYMMETRIC:
            assert forward[name] == pytest.approx(-backward[name], abs=1e-6), name
        for name in SYMMETRIC:
            assert forward[name] == pytest.approx(backward[name], abs=1e-6), name
        # dx/h_target: the same offset measured in the other word's height
        assert forward["dx_height"] * height[t] == pytest.approx(-backward["dx_height"] * height[s],
                                                                 rel=1e-5, abs=1e-4)
        assert all(math.isfinite(v) for v in forward.values())
        assert 0 <= forward["overlap_x"] <= 1 and forward["same_line"] in (0.0, 1.0)
        assert forward["direction_sin"] ** 2 + forward["direction_cos"] ** 2 == pytest.approx(
            1.0 if forward["distance"] > 0 else 0.0, abs=1e-6)


@settings(max_examples=60, deadline=None)
@given(box=st.tuples(st.integers(0, 20), st.integers(0, 20), st.integers(0, 6), st.integers(0, 4)),
       side=st.sampled_from(["right", "below", "corner", "inside"]),
       size=st.tuples(st.integers(0, 6), st.integers(0, 4)))
def test_touching_or_overlapping_boxes_have_no_gap(box, side, size):
    x, y, w, h = box
    u, v = size
    start = {"right": (x + w, y), "below": (x, y + h), "corner": (x + w, y + h),
             "inside": (x, y)}[side]
    page = make_page([(x, y, x + w, y + h), (start[0], start[1], start[0] + u, start[1] + v)],
                     width=30, height=40)
    got = features_by_edge(page, ["distance"])
    assert got[(0, 1)]["gap"] == 0.0 and got[(1, 0)]["gap"] == 0.0


def test_attributes_follow_the_canonical_edges_of_every_builder():
    page = make_page([(10, 10, 30, 20), (40, 10, 60, 20), (10, 40, 30, 50), (45, 45, 50, 60)])
    for name in ("sector", "knn", "delaunay", "line_of_sight", "reading_order", "complete"):
        plain = make_graph_builder(name, reverse_edges=True, self_loops=True)
        with_attrs = make_graph_builder(name, reverse_edges=True, self_loops=True,
                                        edge_features=["offsets", "distance"])
        edges = with_attrs(page)
        assert np.array_equal(edges.edge_index, plain(page).edge_index), name
        assert edges.edge_attr_names == with_attrs.edge_attr_names == (
            "dx_page", "dy_page", "dx_height", "dy_height", "distance", "gap")
        centres = page.centres
        expected_dx = (centres[edges.edge_index[0], 0] - centres[edges.edge_index[1], 0]) / 100
        np.testing.assert_allclose(edges.edge_attr[:, 0], expected_dx, atol=1e-7)
        loops = edges.edge_index[0] == edges.edge_index[1]
        assert loops.sum() == 4 and not edges.edge_attr[loops].any()   # a self-loop: all zeros


def test_typed_edges_check_attribute_shapes():
    index, types = np.array([[0, 1], [1, 0]]), np.array([0, 0])
    with pytest.raises(GraphBuilderError, match=r"edge_attr must have shape \(2, 1\)"):
        TypedEdges(index, types, ("r",), np.zeros((3, 1)), ("a",))
    with pytest.raises(GraphBuilderError, match="without edge_attr"):
        TypedEdges(index, types, ("r",), None, ("a",))
    edges = TypedEdges(index, types, ("r",), np.array([[1.0], [2.0]]), ("a",))
    assert edges.edge_attr.dtype == np.float32
    kept = edges.subset(np.array([False, True]))
    assert kept.edge_index.tolist() == [[1], [0]] and kept.edge_attr.tolist() == [[2.0]]


def test_unknown_or_repeated_groups_are_refused_with_the_choices():
    with pytest.raises(GraphBuilderError, match=r"\['angles'\] unknown.*'offsets'"):
        EdgeFeatures(groups=("angles",))
    with pytest.raises(GraphBuilderError, match="twice"):
        EdgeFeatures(groups=("offsets", "offsets"))
    with pytest.raises(GraphBuilderError, match="list of groups"):
        make_graph_builder("knn", edge_features="offsets")
    assert make_graph_builder("knn", edge_features=[]).edge_attr_names == ()


def test_every_group_names_distinct_features():
    names = list(itertools.chain.from_iterable(EDGE_FEATURE_GROUPS.values()))
    assert len(names) == len(set(names)) == 16
