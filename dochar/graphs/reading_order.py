"""Reading order: each word linked to the word before and after it.

The order: two words share a line when their y-ranges overlap by at least half the smaller
height (a flat box joins a line its y lies within); lines are the connected components of that
relation, so a slightly skewed line still holds together. Lines are read top to bottom by the
mean y of their word centres, words within a line left to right by centre x; remaining ties go
to the smaller ``word_id``. The last word of a line is followed by the first of the next.
Multi-column text is read across the columns, line by line (a known limit of this rule).

Relations: ``previous`` (the source is the word just before the target) and ``next``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from dochar.data.word_table import Page
from dochar.graphs.base import TypedEdges, make_edges, no_edges
from dochar.graphs.geometry import PageGeometry, page_geometry, row_blocks

LINE_OVERLAP = 0.5   # share of the smaller height two words must overlap by to share a line


def line_ids(boxes: np.ndarray) -> np.ndarray:
    """Line component of each word under the half-height overlap rule."""
    n = len(boxes)
    y0, y1 = boxes[:, 1], boxes[:, 3]
    height = y1 - y0
    rows, cols = [], []
    for block in row_blocks(n):
        overlap = np.minimum(y1[block, None], y1[None, :]) - np.maximum(y0[block, None], y0[None, :])
        smaller = np.minimum(height[block, None], height[None, :])
        r, c = np.nonzero((overlap >= 0) & (overlap >= LINE_OVERLAP * smaller))
        rows.append(r + block.start)
        cols.append(c)
    r, c = np.concatenate(rows), np.concatenate(cols)
    graph = coo_matrix((np.ones(len(r), dtype=np.int8), (r, c)), shape=(n, n))
    return connected_components(graph, directed=False)[1]


def reading_sequence(geo: PageGeometry) -> np.ndarray:
    """Word indices in reading order."""
    line = line_ids(geo.boxes)
    count = np.bincount(line)
    line_y = np.bincount(line, weights=geo.centres[:, 1]) / count
    line_first = np.full(len(count), geo.n, dtype=np.int64)
    np.minimum.at(line_first, line, geo.rank)
    line_rank = np.lexsort((line_first, line_y))        # line index -> reading position
    line_pos = np.empty(len(count), np.int64)
    line_pos[line_rank] = np.arange(len(count))
    return np.lexsort((geo.rank, geo.centres[:, 0], line_pos[line]))


@dataclass(frozen=True)
class ReadingOrderBuilder:
    name: ClassVar[str] = "reading_order"
    relations: ClassVar[tuple[str, ...]] = ("previous", "next")

    def __call__(self, page: Page) -> TypedEdges:
        geo = page_geometry(page, self.name)
        if geo.n < 2:
            return no_edges(self.relations)
        order = reading_sequence(geo)
        before, after = order[:-1], order[1:]
        return make_edges(np.concatenate([before, after]), np.concatenate([after, before]),
                          np.repeat([0, 1], len(before)), self.relations)
