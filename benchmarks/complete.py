"""Whole-page graphs: the complete builder's edges and memory on a long page, against kNN.

Memory is the peak of Python-traced allocations (``tracemalloc``; numpy reports its arrays to it)
while one page's graph is built, edge features included, so the figure is the builder's own
working set and output, not the process's. The kNN reference is the bench's ``knn (k=8)``.
"""

from __future__ import annotations

import tracemalloc

from benchmarks.pages import text_page
from benchmarks.report import Figure
from dochar.graphs import make_graph_builder
from dochar.graphs.base import TypedEdges

KNN = {"k": 8}
CAP = 64                                   # max_neighbours of the capped complete graph
FEATURES = ["offsets", "distance", "direction", "sizes"]   # configs/edges/geometry.yaml


def traced(builder, page) -> tuple[TypedEdges, int]:
    """The page's edges and the peak bytes allocated while building them."""
    tracemalloc.start()
    try:
        edges = builder(page)
        return edges, tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def complete_figures(small: int, large: int, judged: bool) -> list[Figure]:
    figures = []
    for words, options in ((small, {}), (large, {"max_neighbours": CAP})):
        page = text_page(words, seed=0)
        knn, knn_peak = traced(make_graph_builder("knn", **KNN, edge_features=FEATURES), page)
        whole, peak = traced(make_graph_builder("complete", **options, edge_features=FEATURES),
                             page)
        label = (f"complete graph{f' (max_neighbours={CAP})' if options else ''}, "
                 f"{words:,}-word page, geometry edge features")
        ratio, bound = whole.num_edges / knn.num_edges, CAP / KNN["k"]
        figures += [   # capped: the cap bounds edges and memory grows no faster than they do
            Figure(f"{label}: edges against knn (k=8)", f"{whole.num_edges:,}",
                   f"{knn.num_edges:,}", ratio, *(("<=", bound) if options else (None, None))),
            Figure(f"{label}: peak memory against knn (k=8)", f"{peak / 2**20:.1f} MB",
                   f"{knn_peak / 2**20:.1f} MB", peak / knn_peak,
                   *(("<=", bound, judged) if options else (None, None, judged))),
        ]
    return figures
