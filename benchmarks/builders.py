"""Graph builder figures: speed-up over the pre-rewrite builders, growth, a 100,000-word page.

Every timing is on :func:`benchmarks.pages.text_page` pages, and the new builders' edges must be
identical to the reference builders' on the pages both are timed on.
"""

from __future__ import annotations

import numpy as np

from benchmarks.pages import text_page
from benchmarks.reference_builders import REFERENCE_BUILDERS
from benchmarks.report import Figure, timed
from dochar.graphs import make_graph_builder
from dochar.graphs.base import TypedEdges

OPTIONS = {"sector": {}, "knn": {"k": 8}, "line_of_sight": {}}


def same_edges(a: TypedEdges, b: TypedEdges) -> bool:
    return np.array_equal(a.edge_index, b.edge_index) and np.array_equal(a.edge_type, b.edge_type)


def builder_figures(small: int, large: int, huge: int, repeats: int, judged: bool
                    ) -> list[Figure]:
    pages = {n: text_page(n, seed=0) for n in (small, large, huge)}
    figures = []
    for name, options in OPTIONS.items():
        builder = make_graph_builder(name, **options)
        reference = REFERENCE_BUILDERS[name]
        label = name if not options else f"{name} (k={options['k']})"
        seconds = {n: timed(lambda p=page: builder(p), repeats) for n, page in pages.items()}
        kept: list[TypedEdges] = []
        old = timed(lambda: kept.append(reference(pages[large], **options)))
        old_edges = kept[0]
        identical = all(same_edges(builder(pages[n]), reference(pages[n], **options))
                        for n in (small,)) and same_edges(builder(pages[large]), old_edges)
        figures += [
            Figure(f"{label}: edges identical to the reference builder ({small:,} and "
                   f"{large:,} words)", "yes" if identical else "NO", "brute force",
                   comparison=">=", threshold=1, number=float(identical)),
            Figure(f"{label}: speed-up over the reference at {large:,} words",
                   f"{seconds[large]:.3f} s", f"{old:.2f} s", old / seconds[large], ">=", 100,
                   judged),
            Figure(f"{label}: time({large:,} words) / time({small:,} words)",
                   f"{seconds[large]:.3f} s", f"{seconds[small]:.4f} s",
                   seconds[large] / seconds[small], "<=", 15, judged),
            Figure(f"{label}: one {huge:,}-word page, seconds", f"{seconds[huge]:.3f} s",
                   comparison="<=", threshold=1.0, judged=judged, number=seconds[huge]),
        ]
    return figures
