"""Graph diagnostics on hand-worked pages, against plain re-counts, and on real FUNSD forms."""

from __future__ import annotations

import json
import math
import struct
from collections import Counter
from pathlib import Path

import numpy as np
import pytest

from dochar.data.word_table import Page
from dochar.graphs import BUILDERS, make_graph_builder
from dochar.graphs.diagnostics import format_stats, graph_stats


TABLE_CELLS = ("analyte", "result", "unit")   # the classes these pages treat as table cells

def page_of(boxes, labels=None, doc="doc") -> Page:
    boxes = np.asarray(boxes, dtype=np.float64).reshape(-1, 4)
    n = len(boxes)
    return Page(doc, 1, np.arange(n, dtype=np.int64), [f"w{i}" for i in range(n)], boxes,
                200.0, 200.0, labels=labels)


def one_line(labels) -> Page:
    return page_of([(10 + 20 * i, 10, 25 + 20 * i, 20) for i in range(len(labels))], labels)


def test_homophily_by_hand():
    # reading_order on one line 0-1-2-3(-4) gives "previous" edges 0->1, 1->2, 2->3, 3->4 and
    # their "next" mirrors. Labels a a a b, word 4 unlabelled (its two edges are left out).
    # Edges with both ends labelled: 0->1 1->0 1->2 2->1 2->3 3->2; same label: the first four.
    # Edge homophily (Zhu et al., NeurIPS 2020): 4 / 6.
    # Per class, by target: into a (0, 1, 2): 1->0, 0->1, 2->1, 1->2, 3->2 -> 4 of 5 from a = 0.8;
    # into b (3): 2->3 -> 0 of 1 = 0.0.
    stats = graph_stats([one_line(["a", "a", "a", "b", ""])], make_graph_builder("reading_order"))
    assert stats.to_dict()["homophily"] == pytest.approx(4 / 6)
    assert stats.per_class.loc["a", "homophily"] == pytest.approx(0.8)
    assert stats.per_class.loc["b", "homophily"] == 0.0
    assert stats.per_class.loc["a", "edges_in"] == 5 and stats.per_class.loc["b", "words"] == 1
    assert any("empty label" in note for note in stats.notes)


def test_unlabelled_pages_are_skipped_and_said_so():
    builder = make_graph_builder("reading_order")
    none = graph_stats([page_of([(0, 0, 5, 5), (9, 0, 14, 5)])], builder)
    assert math.isnan(none.to_dict()["homophily"])
    assert any("no page has labels" in note for note in none.notes)
    mixed = graph_stats([one_line(["a", "a", "a", "b"]), page_of([(0, 0, 5, 5), (9, 0, 14, 5)])],
                        builder)
    assert mixed.to_dict()["homophily"] == pytest.approx(4 / 6)   # the hand-worked page above
    assert any("1 page(s) without labels" in note for note in mixed.notes)


def union_find_components(n: int, edges: np.ndarray) -> int:
    parent = list(range(n))

    def root(a: int) -> int:
        while parent[a] != a:
            a = parent[a]
        return a
    for s, t in edges.T:
        parent[root(int(s))] = root(int(t))
    return len({root(i) for i in range(n)})


@pytest.mark.parametrize("builder", [make_graph_builder("knn", k=1),
                                     make_graph_builder("sector", max_distance=0.03),
                                     make_graph_builder("line_of_sight", self_loops=True)])
def test_counts_match_a_plain_recount(builder):
    rng = np.random.default_rng(3)
    pages = []
    for p in range(5):
        n = int(rng.integers(1, 40))
        xy = rng.uniform(0, 180, (n, 2))
        pages.append(page_of(np.column_stack([xy, xy + rng.uniform(0, 15, (n, 2))]),
                             doc=f"d{p}"))
    stats = graph_stats(pages, builder).to_dict()
    built = [builder(page) for page in pages]
    components = [union_find_components(len(p), e.edge_index) for p, e in zip(pages, built)]
    assert stats["components_mean"] == pytest.approx(np.mean(components))
    assert stats["components_max"] == max(components)
    isolated = sum(len(p) - len({int(v) for s, t in e.edge_index.T if s != t for v in (s, t)})
                   for p, e in zip(pages, built))
    assert stats["isolated_words"] == isolated
    types = Counter(builder.relations[t] for e in built for t in e.edge_type)
    total = sum(types.values())
    assert stats["edges"] == total and stats["nodes"] == sum(len(p) for p in pages)
    for relation in builder.relations:
        assert stats[f"relation_share_{relation}"] == pytest.approx(types[relation] / total)


def test_table_row_and_column_reachability_on_a_2x2_table():
    # A key word on its own line, then a 2x2 table. reading_order chains key -> r0c0 -> r0c1 ->
    # r1c0 -> r1c1. Same-row pairs (r0c0, r0c1) and (r1c0, r1c1) are adjacent: 1 hop, 2/2.
    # Same-column pairs (r0c0, r1c0) via r0c1 and (r0c1, r1c1) via r1c0: 0/2 in 1 hop, 2/2 in 2.
    boxes = [(10, 5, 40, 15), (10, 30, 40, 40), (60, 30, 90, 40), (10, 50, 40, 60), (60, 50, 90, 60)]
    labels = ["key", "analyte", "result", "analyte", "result"]
    stats = graph_stats([page_of(boxes, labels)], make_graph_builder("reading_order"),
                        TABLE_CELLS).to_dict()
    assert stats["same_row_pairs"] == 2 and stats["same_column_pairs"] == 2
    assert (stats["same_row_1hop"], stats["same_row_2hop"]) == (1.0, 1.0)
    assert (stats["same_column_1hop"], stats["same_column_2hop"]) == (0.0, 1.0)


def test_same_row_needs_half_the_smaller_height():
    # heights 10 and 20; overlaps 5 (= half of 10: same row) and 4 (not)
    for shift, pairs in ((5, 1), (6, 0)):
        page = page_of([(0, 0, 10, 10), (50, shift, 60, shift + 20)], ["result", "unit"])
        assert graph_stats([page], make_graph_builder("knn"),
                           TABLE_CELLS).to_dict()["same_row_pairs"] == pairs


def test_format_stats_prints_every_scalar_and_the_notes():
    stats = graph_stats([one_line(["a", "b", ""])], make_graph_builder("delaunay"))
    text = format_stats(stats)
    assert all(key in text for key in stats.to_dict()) and "note:" in text and "per class" in text


# --- real forms -------------------------------------------------------------------------------

def funsd_page(path: Path) -> Page:
    """Minimal reader of one FUNSD annotation (Jaume et al., ICDAR-OST 2019): every word with its
    entity's label; page size from the PNG header (IHDR width/height, PNG spec section 11.2.2)."""
    form = json.loads(path.read_text())["form"]
    words = [(w["text"], w["box"], entity["label"]) for entity in form for w in entity["words"]]
    image = path.parent.parent / "images" / f"{path.stem}.png"
    width, height = struct.unpack(">II", image.read_bytes()[16:24])
    return Page(path.stem, 1, np.arange(len(words), dtype=np.int64), [t for t, _, _ in words],
                np.array([b for _, b, _ in words], dtype=np.float64).reshape(-1, 4),
                float(width), float(height), labels=[lab for _, _, lab in words])


def test_every_builder_on_real_funsd_forms(funsd_root):
    files = sorted((funsd_root / "testing_data" / "annotations").glob("*.json"))
    pages = [funsd_page(f) for f in files]
    sizes = [len(p) for p in pages]
    chosen = [pages[int(np.argmin(sizes))], pages[int(np.argmax(sizes))]]
    chosen += [p for p in pages if any(not t.strip() for t in p.texts)][:2]   # empty-text words
    assert any(not t.strip() for p in chosen for t in p.texts)
    labels = [lab for p in chosen for lab in p.labels]
    chance = sum((c / len(labels)) ** 2 for c in Counter(labels).values())
    variants = [{}, {"prune_gutters": True, "reverse_edges": True, "self_loops": True}]
    for name in BUILDERS:
        for options in variants:
            builder = make_graph_builder(name, **options)
            stats = graph_stats(chosen, builder).to_dict()
            assert stats["nodes"] == sum(len(p) for p in chosen)
            assert stats["edges_per_node"] > 1.0, (name, options)
            assert stats["isolated_share"] < 0.05, (name, options)
            shares = [stats[f"relation_share_{r}"] for r in builder.relations]
            assert sum(shares) == pytest.approx(1.0)
            # FUNSD labels come in spatial blocks (entities), so neighbours share labels far more
            # often than two words drawn at random would (sum of squared class shares)
            assert chance < stats["homophily"] <= 1.0, (name, options)
    knn = make_graph_builder("knn", k=6)
    for page in chosen:
        assert np.all(np.bincount(knn(page).edge_index[1], minlength=len(page)) == 6)
