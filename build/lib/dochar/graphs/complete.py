"""Every ordered pair of distinct words of a page: whole-page attention's graph.

The source ``j`` of an edge is any other word of the page, typed by the direction it lies in
from the target ``i`` (dominant axis of the centre offset,
:func:`dochar.graphs.base.direction_codes`).
Two optional bounds keep long pages affordable:

* ``radius``: keep pairs whose page-normalised centre distance ``sqrt((dx/W)^2 + (dy/H)^2)`` (the
  ``distance`` edge feature) is at most this; None: no bound.
* ``max_neighbours``: each target keeps at most this many sources, nearest first by that same
  distance, ties to the smaller ``word_id``; None: no cap.

Pairs are ranked a block of target rows at a time (:func:`dochar.graphs.geometry.row_blocks`),
so working memory stays within a fixed number of pair cells and the output, at most
``n * max_neighbours`` edges, is what grows. Without a cap a page may hold at most
``MAX_UNCAPPED_EDGES`` ordered pairs; a longer page is refused with a message naming the options.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from dochar.data.word_table import Page
from dochar.graphs.base import (DIRECTIONS, GraphBuilderError, TypedEdges, direction_codes,
                                make_edges, no_edges)
from dochar.graphs.cells import order_within_groups
from dochar.graphs.geometry import page_geometry, row_blocks

MAX_UNCAPPED_EDGES = 4_000_000   # about a 2,000-word page; 64 MB of edge index alone


@dataclass(frozen=True)
class CompleteBuilder:
    radius: float | None = None
    max_neighbours: int | None = None

    name: ClassVar[str] = "complete"
    relations: ClassVar[tuple[str, ...]] = DIRECTIONS

    def __post_init__(self) -> None:
        if self.radius is not None and (isinstance(self.radius, bool) or not isinstance(
                self.radius, (int, float)) or not self.radius > 0):
            raise GraphBuilderError(f"graph builder 'complete': radius must be a positive "
                                    f"page-normalised distance or null, got {self.radius!r}")
        cap = self.max_neighbours
        if cap is not None and (isinstance(cap, bool) or not isinstance(cap, (int, np.integer))
                                or cap < 1):
            raise GraphBuilderError(f"graph builder 'complete': max_neighbours must be a "
                                    f"positive integer or null, got {cap!r}")

    def __call__(self, page: Page) -> TypedEdges:
        geo = page_geometry(page, self.name)
        n = geo.n
        if n < 2:
            return no_edges(self.relations)
        if self.max_neighbours is None and self.radius is None and n * (n - 1) > MAX_UNCAPPED_EDGES:
            raise GraphBuilderError(
                f"graph builder 'complete', page {page.key}: {n} words make {n * (n - 1):,} "
                f"edges, over {MAX_UNCAPPED_EDGES:,}; set graph.options.max_neighbours or "
                f"graph.options.radius")
        take = n - 1 if self.max_neighbours is None else min(int(self.max_neighbours), n - 1)
        limit2 = np.inf if self.radius is None else float(self.radius) ** 2
        cx, cy = geo.centre_columns
        sources, targets = [], []
        for block in row_blocks(n):
            rows = np.arange(block.start, block.stop)
            near = ((cx[None, :] - cx[rows, None]) / page.width) ** 2 + \
                ((cy[None, :] - cy[rows, None]) / page.height) ** 2
            near[np.arange(len(rows)), rows] = np.inf      # a word is not its own neighbour
            near[near > limit2] = np.inf
            if take < n - 1:
                kth = np.partition(near, take - 1, axis=1)[:, take - 1]
                query, box = np.nonzero((near <= kth[:, None]) & np.isfinite(near))
                order = order_within_groups(query, (near[query, box], geo.rank[box]))
                query, box = query[order], box[order]
                first = np.searchsorted(query, np.arange(len(rows)))
                kept = np.arange(len(query)) - first[query] < take
                query, box = query[kept], box[kept]
            else:
                query, box = np.nonzero(np.isfinite(near))
            sources.append(box)
            targets.append(rows[query])
        source, target = np.concatenate(sources), np.concatenate(targets)
        dx, dy = cx[source] - cx[target], cy[source] - cy[target]
        return make_edges(source, target, direction_codes(dx, dy), self.relations)
