"""The complete builder (dochar/graphs/complete.py) against a brute-force oracle: a plain loop
over every ordered pair, the radius and the nearest-first cap restated directly."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import dochar.graphs.complete as complete_module
from dochar.graphs import GraphBuilderError, make_graph_builder
from benchmarks.pages import text_page
from tests.graphs.test_builders import edge_set, grid_pages, make_page, random_page

DIRS = ("above", "below", "left", "right")


def oracle_complete(page, radius=None, cap=None) -> set[tuple[int, int, str]]:
    n, (width, height) = len(page), (page.width, page.height)
    c = page.centres
    out = set()
    for t in range(n):
        found = []
        for s in range(n):
            if s == t:
                continue
            dx, dy = c[s, 0] - c[t, 0], c[s, 1] - c[t, 1]
            d2 = (dx / width) ** 2 + (dy / height) ** 2
            if radius is not None and d2 > radius ** 2:
                continue
            # direction by the dominant axis, vertical on ties, coincident centres 'below'
            kind = (("above" if dy < 0 else "below") if abs(dy) >= abs(dx)
                    else ("left" if dx < 0 else "right"))
            found.append((d2, int(page.word_ids[s]), s, kind))
        found.sort()                                      # nearest first, then smaller word_id
        out |= {(s, t, kind) for _, _, s, kind in (found if cap is None else found[:cap])}
    return out


@settings(max_examples=80, deadline=None)
@given(page=grid_pages(), radius=st.sampled_from([None, 0.1, 0.25]),
       cap=st.sampled_from([None, 1, 3, 20]))
def test_complete_matches_brute_force(page, radius, cap):
    got = make_graph_builder("complete", radius=radius, max_neighbours=cap)(page)
    assert edge_set(got) == oracle_complete(page, radius, cap)


@pytest.mark.parametrize("seed", range(3))
def test_complete_matches_brute_force_across_row_blocks(seed, monkeypatch):
    # two target rows ranked at a time: the cap and the radius must hold across blocks
    monkeypatch.setattr(complete_module, "row_blocks",
                        lambda n: (slice(a, min(n, a + 2)) for a in range(0, n, 2)))
    page = random_page(np.random.default_rng(seed), 30)
    for radius, cap in ((None, None), (0.3, None), (None, 5), (0.2, 4)):
        assert edge_set(make_graph_builder("complete", radius=radius, max_neighbours=cap)(page)) \
            == oracle_complete(page, radius, cap), (radius, cap)


def test_the_cap_bounds_the_edge_count_on_a_long_page():
    page = text_page(3000, seed=1)
    edges = make_graph_builder("complete", max_neighbours=16)(page)
    per_target = np.bincount(edges.edge_index[1], minlength=len(page))
    assert edges.num_edges == 16 * 3000 and per_target.max() == 16
    small = make_page([(0, 0, 1, 1), (5, 5, 6, 6), (9, 0, 10, 1)])
    assert make_graph_builder("complete", max_neighbours=16)(small).num_edges == 3 * 2


def test_a_long_page_without_bounds_is_refused_with_the_options(monkeypatch):
    monkeypatch.setattr(complete_module, "MAX_UNCAPPED_EDGES", 10)
    page = make_page([(i, 0, i + 1, 1) for i in range(5)])   # 5 words, 20 ordered pairs
    with pytest.raises(GraphBuilderError, match=r"doc#p1: 5 words make 20 edges.*max_neighbours"):
        make_graph_builder("complete")(page)
    assert make_graph_builder("complete", max_neighbours=2)(page).num_edges == 10


def test_a_pair_exactly_at_the_radius_is_kept():
    # page 40 x 40: centres 10 apart along x are 10 / 40 = 0.25 apart, 0.25^2 exact in binary
    page = make_page([(0, 0, 0, 0), (10, 0, 10, 0), (20, 0, 20, 0)], width=40, height=40)
    got = edge_set(make_graph_builder("complete", radius=0.25)(page))
    assert got == {(1, 0, "right"), (0, 1, "left"), (2, 1, "right"), (1, 2, "left")}


def test_bad_bounds_are_refused():
    with pytest.raises(GraphBuilderError, match="radius must be a positive"):
        make_graph_builder("complete", radius=0)
    with pytest.raises(GraphBuilderError, match="max_neighbours must be a positive integer"):
        make_graph_builder("complete", max_neighbours=2.5)
