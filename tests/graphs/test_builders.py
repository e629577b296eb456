"""Graph builders against brute-force oracles (plain loops over all pairs) and properties.

Oracles restate each builder's documented rule as directly as possible; ranking compares
squared distances, as the builders do, so ties are exact on both sides.
"""

from __future__ import annotations

import itertools
from unittest import mock

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.spatial import cKDTree

from benchmarks.pages import text_page
from benchmarks.reference_builders import REFERENCE_BUILDERS
import dochar.graphs.knn as knn_module
from dochar.data.word_table import Page
from dochar.graphs import BUILDERS, GraphBuilderError, make_graph_builder
from dochar.graphs.gutters import crossing, find_gutters

DIRS = ("above", "below", "left", "right")


def make_page(boxes, word_ids=None, width=100.0, height=100.0) -> Page:
    boxes = np.asarray(boxes, dtype=np.float64).reshape(-1, 4)
    n = len(boxes)
    ids = np.arange(n, dtype=np.int64) if word_ids is None else np.asarray(word_ids, np.int64)
    return Page("doc", 1, ids, [f"w{i}" for i in range(n)], boxes, width, height)


def random_page(rng: np.random.Generator, n: int) -> Page:
    """Words on a few shared rows (ties, overlaps, row structure) plus free-floating ones."""
    rows = rng.choice([10.0, 30.0, 50.0, 70.0], size=n) + rng.uniform(-3, 3, n) * (rng.random(n) < .5)
    y0 = np.where(rng.random(n) < .7, rows, rng.uniform(0, 80, n))
    x0 = rng.uniform(0, 85, n)
    w, h = rng.uniform(0, 14, n), rng.uniform(0, 8, n)
    return make_page(np.column_stack([x0, y0, x0 + w, y0 + h]), word_ids=rng.permutation(n) * 3)


@st.composite
def grid_pages(draw, max_words: int = 14) -> Page:
    """Small integer boxes: many exact ties, overlaps, duplicates and flat boxes."""
    n = draw(st.integers(0, max_words))
    coords = st.tuples(st.integers(0, 20), st.integers(0, 20), st.integers(0, 6), st.integers(0, 4))
    cells = draw(st.lists(coords, min_size=n, max_size=n))
    boxes = [(x, y, x + w, y + h) for x, y, w, h in cells]
    ids = draw(st.permutations(range(n)))
    return make_page(boxes, word_ids=ids, width=30, height=40)   # diagonal exactly 50


@st.composite
def adversarial_pages(draw, max_words: int = 40) -> Page:
    """Hard cases for window searches: copies of a few boxes, words on one line (a row, a column
    or a diagonal), zero-size boxes, and boxes as large as the page mixed with tiny ones."""
    n = draw(st.integers(2, max_words))
    shape = draw(st.sampled_from(["copies", "row", "column", "diagonal", "giants"]))
    if shape == "copies":
        pool = draw(st.lists(st.tuples(st.integers(0, 30), st.integers(0, 30), st.integers(0, 8),
                                       st.integers(0, 8)), min_size=1, max_size=4))
        cells = [pool[draw(st.integers(0, len(pool) - 1))] for _ in range(n)]
    else:
        steps = draw(st.lists(st.integers(0, 3), min_size=n, max_size=n))
        sizes = draw(st.lists(st.tuples(st.integers(0, 6), st.integers(0, 3)), min_size=n,
                              max_size=n))
        along = np.cumsum(steps)
        cells = [{"row": (a, 5, w, h), "column": (5, a, h, w), "diagonal": (a, a, w, w),
                  "giants": (a % 30, (3 * a) % 30, w, h)}[shape] for a, (w, h) in zip(along, sizes)]
        if shape == "giants":
            giants = min(draw(st.integers(1, 3)), n)
            cells[:giants] = [(0, 0, 60, 60), (10, 0, 45, 2), (0, 10, 2, 45)][:giants]
    boxes = [(x, y, x + w, y + h) for x, y, w, h in cells]
    ids = draw(st.permutations(range(n)))
    return make_page(boxes, word_ids=ids, width=150, height=150)


def edge_set(edges) -> set[tuple[int, int, str]]:
    return {(int(s), int(t), edges.relations[r])
            for (s, t), r in zip(edges.edge_index.T, edges.edge_type)}


# --- plain restatements of the rules -----------------------------------------------------

def centre(b):
    return (b[0] + b[2]) / 2, (b[1] + b[3]) / 2


def direction(dx, dy) -> str:
    if abs(dy) >= abs(dx):
        return "above" if dy < 0 else "below"
    return "left" if dx < 0 else "right"


def offset(page, i, j):
    (ci_x, ci_y), (cj_x, cj_y) = centre(page.boxes[i]), centre(page.boxes[j])
    return cj_x - ci_x, cj_y - ci_y


def gap2(a, b) -> float:
    gx = max(0.0, b[0] - a[2], a[0] - b[2])
    gy = max(0.0, b[1] - a[3], a[1] - b[3])
    return gx * gx + gy * gy


def rank_key(page, i, j):
    dx, dy = offset(page, i, j)
    return gap2(page.boxes[i], page.boxes[j]), dx * dx + dy * dy, int(page.word_ids[j])


def oracle_sector(page, max_distance=None):
    limit = None if max_distance is None else (max_distance * np.hypot(page.width, page.height)) ** 2
    out = set()
    for i in range(len(page)):
        for sector in DIRS:
            cands = [j for j in range(len(page)) if j != i and direction(*offset(page, i, j)) == sector
                     and (limit is None or gap2(page.boxes[i], page.boxes[j]) <= limit)]
            if cands:
                out.add((min(cands, key=lambda j: rank_key(page, i, j)), i, sector))
    return out


def oracle_knn(page, k):
    out = set()
    for i in range(len(page)):
        others = sorted((j for j in range(len(page)) if j != i), key=lambda j: rank_key(page, i, j))
        out |= {(j, i, direction(*offset(page, i, j))) for j in others[:k]}
    return out


def sees_horizontally(boxes, a, b) -> bool:
    A, B = boxes[a], boxes[b]
    lo, hi = max(A[1], B[1]), min(A[3], B[3])
    if hi < lo or (hi == lo and min(A[3] - A[1], B[3] - B[1]) > 0):
        return False
    gap_lo, gap_hi = min(A[2], B[2]), max(A[0], B[0])
    if gap_hi <= gap_lo:
        return True
    return not any(K[0] < gap_hi and K[2] > gap_lo and K[1] < hi and K[3] > lo
                   for k, K in enumerate(boxes) if k not in (a, b))


def oracle_line_of_sight(page):
    boxes = [tuple(b) for b in page.boxes]
    swapped = [(b[1], b[0], b[3], b[2]) for b in boxes]
    out = set()
    for i, j in itertools.permutations(range(len(page)), 2):
        h, v = sees_horizontally(boxes, i, j), sees_horizontally(swapped, i, j)
        dx, dy = offset(page, i, j)          # j is the source, i the target
        if h and v:
            out.add((j, i, direction(dx, dy)))
        elif h:
            out.add((j, i, "left" if dx < 0 else "right"))
        elif v:
            out.add((j, i, "above" if dy < 0 else "below"))
    return out


def oracle_reading_order(page):
    n, b = len(page), page.boxes
    parent = list(range(n))

    def root(a):
        while parent[a] != a:
            a = parent[a]
        return a
    for i, j in itertools.combinations(range(n), 2):
        overlap = min(b[i][3], b[j][3]) - max(b[i][1], b[j][1])
        if overlap >= 0 and overlap >= 0.5 * min(b[i][3] - b[i][1], b[j][3] - b[j][1]):
            parent[root(i)] = root(j)
    lines: dict[int, list[int]] = {}
    for i in range(n):
        lines.setdefault(root(i), []).append(i)
    ordered = sorted(lines.values(), key=lambda ws: (sum(centre(b[w])[1] for w in ws) / len(ws),
                                                     min(int(page.word_ids[w]) for w in ws)))
    order = [w for ws in ordered
             for w in sorted(ws, key=lambda w: (centre(b[w])[0], int(page.word_ids[w])))]
    return ({(a, c, "previous") for a, c in zip(order, order[1:])}
            | {(c, a, "next") for a, c in zip(order, order[1:])})


def in_circle(a, b, c, d) -> float:
    """> 0 when d is strictly inside the circle through a, b, c taken counter-clockwise
    (Guibas & Stolfi, ACM Trans. Graphics 4(2), 1985, the InCircle determinant)."""
    rows = [(p[0] - d[0], p[1] - d[1], (p[0] - d[0]) ** 2 + (p[1] - d[1]) ** 2) for p in (a, b, c)]
    return float(np.linalg.det(np.array(rows)))


def oracle_delaunay_pairs(points) -> set[frozenset]:
    """Edges of every triangle whose circumcircle holds no other point (points in general
    position: then the Delaunay triangulation is unique)."""
    out = set()
    for a, b, c in itertools.combinations(range(len(points)), 3):
        pa, pb, pc = points[a], points[b], points[c]
        turn = (pb[0] - pa[0]) * (pc[1] - pa[1]) - (pb[1] - pa[1]) * (pc[0] - pa[0])
        if turn < 0:
            pb, pc = pc, pb
        if all(in_circle(pa, pb, pc, points[d]) <= 0 for d in range(len(points)) if d not in (a, b, c)):
            out |= {frozenset(e) for e in ((a, b), (b, c), (a, c))}
    return out


# --- builders against their oracles ------------------------------------------------------

ORACLES = {
    "sector": lambda page: oracle_sector(page),
    "knn": lambda page: oracle_knn(page, 6),
    "line_of_sight": oracle_line_of_sight,
    "reading_order": oracle_reading_order,
}


def knn_searches():
    """Run the loop body once with kNN's grid search and once with its all-pairs search (small
    pages take the latter by default, so each oracle test covers both)."""
    for dense_up_to in (0, 10**9):
        with mock.patch.object(knn_module, "DENSE_UP_TO", dense_up_to):
            yield dense_up_to


@pytest.mark.parametrize("name", sorted(ORACLES))
@pytest.mark.parametrize("seed", range(4))
def test_builder_matches_oracle_on_random_pages(name, seed):
    rng = np.random.default_rng(seed)
    page = random_page(rng, int(rng.integers(15, 40)))
    for search in knn_searches():
        assert edge_set(make_graph_builder(name)(page)) == ORACLES[name](page), search


@settings(max_examples=60, deadline=None)
@given(page=grid_pages())
def test_builders_match_oracles_on_tied_grid_pages(page):
    for name, oracle in ORACLES.items():
        assert edge_set(make_graph_builder(name)(page)) == oracle(page), name
    assert edge_set(make_graph_builder("sector", max_distance=0.1)(page)) == oracle_sector(page, 0.1)
    for search in knn_searches():
        assert edge_set(make_graph_builder("knn", k=2)(page)) == oracle_knn(page, 2), search
        assert edge_set(make_graph_builder("knn")(page)) == oracle_knn(page, 6), search


@settings(max_examples=40, deadline=None)
@given(page=adversarial_pages())
def test_window_searches_match_oracles_on_adversarial_pages(page):
    # sector, kNN and line of sight search growing windows of grid cells; the oracles rank or
    # test every pair, so any window that stops too early shows up as a missing edge
    for name in ("sector", "knn", "line_of_sight"):
        assert edge_set(make_graph_builder(name)(page)) == ORACLES[name](page), name
    for search in knn_searches():
        assert edge_set(make_graph_builder("knn", k=1)(page)) == oracle_knn(page, 1), search
        assert edge_set(make_graph_builder("knn", k=15)(page)) == oracle_knn(page, 15), search
    assert edge_set(make_graph_builder("sector", max_distance=0.05)(page)) == \
        oracle_sector(page, 0.05)


def dense_page(seed: int, aligned: bool) -> Page:
    """A page of 1,000 words in lines, so each window sees a small part of the page; aligned
    pages put every word of a line on the same baseline and flatten one word in twenty."""
    page = text_page(1000, seed)
    boxes = page.boxes.copy()
    if aligned:
        rng = np.random.default_rng(seed)
        boxes[:, 1] = np.round(boxes[:, 1] / 14) * 14
        boxes[:, 3] = boxes[:, 1] + np.where(rng.random(len(boxes)) < 0.05, 0, 10)
    return make_page(boxes, word_ids=page.word_ids, width=page.width, height=page.height)


@pytest.mark.parametrize("aligned", [False, True])
@pytest.mark.parametrize("seed", range(2))
def test_window_searches_match_brute_force_on_dense_pages(seed, aligned):
    # the reference builders rank or test every pair (benchmarks/reference_builders.py)
    page = dense_page(seed, aligned)
    for name, options in (("sector", {}), ("sector", {"max_distance": 0.01}), ("knn", {"k": 1}),
                          ("knn", {"k": 8}), ("line_of_sight", {})):
        assert edge_set(make_graph_builder(name, **options)(page)) == \
            edge_set(REFERENCE_BUILDERS[name](page, **options)), (name, options)


@pytest.mark.parametrize("seed", range(5))
def test_delaunay_matches_empty_circle_oracle(seed):
    rng = np.random.default_rng(seed)
    page = make_page(np.repeat(rng.uniform(0, 100, (int(rng.integers(3, 12)), 2)), 2, axis=1)
                     [:, [0, 2, 1, 3]])
    edges = make_graph_builder("delaunay")(page)
    got = {frozenset((s, t)) for s, t, _ in edge_set(edges)}
    assert got == oracle_delaunay_pairs(page.centres)
    assert all(r == direction(*offset(page, t, s)) for s, t, r in edge_set(edges))


def test_knn_on_point_boxes_agrees_with_kdtree():
    # zero-size boxes: box distance is point distance, so scipy.spatial.cKDTree.query is a reference
    pts = np.random.default_rng(7).uniform(0, 100, (50, 2))
    page = make_page(np.column_stack([pts, pts]))
    _, idx = cKDTree(pts).query(pts, k=5)            # self first, then 4 neighbours
    expected = {(int(j), i) for i in range(50) for j in idx[i, 1:]}
    got = {(s, t) for s, t, _ in edge_set(make_graph_builder("knn", k=4)(page))}
    assert got == expected


def test_delaunay_degenerate_inputs_fall_back_as_documented():
    line = [(10 * i, 5 * i) for i in (3, 0, 4, 1, 2)]                     # collinear, shuffled
    edges = make_graph_builder("delaunay")(make_page([(x, y, x, y) for x, y in line]))
    by_x = {x // 10: i for i, (x, _) in enumerate(line)}
    chain = {frozenset((by_x[a], by_x[a + 1])) for a in range(4)}
    assert {frozenset((s, t)) for s, t, _ in edge_set(edges)} == chain
    square = [(0, 0, 2, 2), (10, 0, 12, 2), (0, 10, 2, 12), (10, 10, 12, 12), (10, 10, 12, 12)]
    pairs = {(s, t) for s, t, _ in edge_set(make_graph_builder("delaunay")(make_page(square)))}
    assert (3, 4) in pairs and (4, 3) in pairs                          # copies linked
    assert {s for s, t in pairs if t == 3} - {4} == {s for s, t in pairs if t == 4} - {3}
    assert make_graph_builder("delaunay")(make_page([(1, 1, 3, 3)] * 2)).num_edges == 2
    # a centre 1e-17 from another is distinct to numpy but coplanar to Qhull: it is linked to
    # the vertex Qhull names as nearest (word 0)
    near = make_page([(0, 0, 0, 0), (1, 0, 1, 0), (0, 1, 0, 1), (1e-17, 0, 1e-17, 0)])
    assert {s for s, t, _ in edge_set(make_graph_builder("delaunay")(near)) if t == 3} == {0}


# --- properties ----------------------------------------------------------------------------

@settings(max_examples=60, deadline=None)
@given(page=grid_pages(), data=st.data())
def test_every_builder_is_invariant_to_word_order(page, data):
    perm = np.array(data.draw(st.permutations(range(len(page)))), dtype=np.int64)
    shuffled = make_page(page.boxes[perm], word_ids=page.word_ids[perm], width=page.width,
                         height=page.height)
    for name in BUILDERS:
        builder = make_graph_builder(name, prune_gutters=True, gutter_min_width=0.1,
                                     gutter_min_height=0.2)
        original = edge_set(builder(page))
        moved = {(int(perm[s]), int(perm[t]), r) for s, t, r in edge_set(builder(shuffled))}
        assert moved == original, name


@settings(max_examples=60, deadline=None)
@given(page=grid_pages())
def test_structural_properties(page):
    n = len(page)
    for name in BUILDERS:
        edges = make_graph_builder(name)(page)
        assert edges.edge_index.dtype == np.int64 and edges.edge_type.dtype == np.int64
        assert not (edges.edge_index[0] == edges.edge_index[1]).any(), name
        looped = make_graph_builder(name, self_loops=True)(page)
        loops = {(s, t) for s, t, r in edge_set(looped) if r == "self"}
        assert loops == {(i, i) for i in range(n)} and edge_set(looped) - edge_set(edges) == \
            {(i, i, "self") for i in range(n)}
    for name in ("delaunay", "line_of_sight"):
        pairs = {(s, t) for s, t, _ in edge_set(make_graph_builder(name)(page))}
        assert pairs == {(t, s) for s, t in pairs}, name
    reading = edge_set(make_graph_builder("reading_order")(page))
    prev = {(s, t) for s, t, r in reading if r == "previous"}
    assert {(t, s) for s, t, r in reading if r == "next"} == prev
    assert len(prev) == max(n - 1, 0) and len({t for _, t in prev}) == len(prev)   # a path
    sector = make_graph_builder("sector")(page)
    assert np.all(np.bincount(sector.edge_index[1], minlength=n) <= 4)
    assert len({(t, r) for _, t, r in edge_set(sector)}) == sector.num_edges
    for k in (1, 3, 6):
        knn = make_graph_builder("knn", k=k)(page)
        assert np.all(np.bincount(knn.edge_index[1], minlength=n) == min(k, n - 1))
    if len(np.unique(page.centres, axis=0)) >= 2:     # a triangulation is connected
        from scipy.sparse import coo_matrix
        from scipy.sparse.csgraph import connected_components
        e = make_graph_builder("delaunay")(page).edge_index
        adj = coo_matrix((np.ones(e.shape[1]), (e[0], e[1])), shape=(n, n))
        assert connected_components(adj, directed=False)[0] == 1


@settings(max_examples=40, deadline=None)
@given(page=grid_pages())
def test_reverse_edges_mirror_every_edge(page):
    builder = make_graph_builder("knn", k=3, reverse_edges=True)
    assert builder.relations == (*DIRS, *(f"{d}_rev" for d in DIRS))
    edges = edge_set(builder(page))
    plain = edge_set(make_graph_builder("knn", k=3)(page))
    assert edges == plain | {(t, s, f"{r}_rev") for s, t, r in plain}


# --- gutters ---------------------------------------------------------------------------------

def two_column_page() -> tuple[Page, np.ndarray]:
    """Left column ends at x=260 on every row, right column starts at x=300: the 40-unit gap is
    wider than the 18-unit gap between rows, yet close enough for k=6 neighbours to reach over."""
    boxes, column = [], []
    for row in range(16):
        y = 100.0 + 30 * row
        for x0, x1, side in ((40, 120, 0), (130, 260, 0), (300, 410, 1), (420, 560, 1)):
            boxes.append((x0, y, x1, y + 12))
            column.append(side)
    return make_page(boxes, width=600, height=800), np.array(column)


def test_find_gutters_finds_the_column_gap():
    page, _ = two_column_page()
    gutters = find_gutters(page.boxes, min_width=0.02 * 600, min_height=0.3 * 800)
    # the text area spans y 100..562; the only tall empty corridor is x 260..300
    np.testing.assert_array_equal(gutters, [[260.0, 100.0, 300.0, 562.0]])


@pytest.mark.parametrize("name", ["knn", "delaunay", "sector"])
def test_gutter_pruning_cuts_across_columns_only(name):
    page, column = two_column_page()
    plain = edge_set(make_graph_builder(name)(page))
    pruned = edge_set(make_graph_builder(name, prune_gutters=True)(page))
    across = {e for e in plain if column[e[0]] != column[e[1]]}
    assert across, "the layout must tempt the builder across the gutter"
    assert pruned == plain - across


def test_crossing_by_hand():
    # Liang & Barsky, "A new concept and method for line clipping", ACM TOG 3(1), 1984
    gutter = np.array([[10.0, 0.0, 20.0, 100.0]])
    start = np.array([[0, 50], [0, 50], [0, 0], [15, -10], [25, 50], [0, 110], [0, 50]], float)
    end = np.array([[30, 50], [10, 50], [30, 0], [15, 5], [40, 60], [30, 101], [12, 52]], float)
    # through, stops at edge, runs along top edge, dips in vertically, beside, above, enters
    assert crossing(start, end, gutter).tolist() == [True, False, False, True, False, False, True]


# --- registry and errors ---------------------------------------------------------------------

def test_registry_errors_are_clear():
    with pytest.raises(GraphBuilderError, match="choose one of.*knn"):
        make_graph_builder("nearest")
    with pytest.raises(GraphBuilderError, match=r"unknown option\(s\) \['kk'\].*'k'"):
        make_graph_builder("knn", kk=3)
    with pytest.raises(GraphBuilderError, match="positive integer"):
        make_graph_builder("knn", k=0)
    with pytest.raises(GraphBuilderError, match="max_distance"):
        make_graph_builder("sector", max_distance=-1)
    with pytest.raises(GraphBuilderError, match="self_loops"):
        make_graph_builder("delaunay", self_loops="yes")
    assert make_graph_builder("reading_order", reverse_edges=True, self_loops=True).relations == (
        "previous", "next", "previous_rev", "next_rev", "self")


def test_bad_box_is_reported_with_page_and_word():
    page = make_page([(0, 0, 5, 5), (9, 0, 4, 5)], word_ids=[7, 8])
    for name in BUILDERS:
        with pytest.raises(GraphBuilderError, match=r"doc#p1.*word_id 8"):
            make_graph_builder(name)(page)
