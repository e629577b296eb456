"""k nearest words by box distance.

Distance between two words is the shortest distance between their boxes (0 when they touch or
overlap); ties go to the smaller centre distance, then the smaller ``word_id``. Each target
listens to exactly ``min(k, n - 1)`` words. An edge is typed by the direction its source lies
in, by the dominant axis of the centre offset (:func:`dochar.graphs.base.direction_codes`).
Vectorised over all pairs in row blocks (a k-d tree indexes points, not box gaps).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from dochar.data.word_table import Page
from dochar.graphs.base import (
    DIRECTIONS,
    GraphBuilderError,
    TypedEdges,
    direction_codes,
    make_edges,
    no_edges,
)
from dochar.graphs.geometry import page_geometry, row_blocks


@dataclass(frozen=True)
class KnnBuilder:
    k: int = 6

    name: ClassVar[str] = "knn"
    relations: ClassVar[tuple[str, ...]] = DIRECTIONS

    def __post_init__(self) -> None:
        if isinstance(self.k, bool) or not isinstance(self.k, (int, np.integer)) or self.k < 1:
            raise GraphBuilderError(f"graph builder 'knn': k must be a positive integer, "
                                    f"got {self.k!r}")

    def __call__(self, page: Page) -> TypedEdges:
        geo = page_geometry(page, self.name)
        take = min(int(self.k), geo.n - 1)
        if take < 1:
            return no_edges(self.relations)
        sources, targets = [], []
        for rows in row_blocks(geo.n):
            order, is_self = geo.nearest_first(rows)
            # self sorts first or among the zero-gap ties; drop it and keep the next `take`
            kept = ~is_self & (np.cumsum(~is_self, axis=1) <= take)
            sources.append(order[kept])
            targets.append(np.repeat(np.arange(geo.n)[rows], take))
        source, target = np.concatenate(sources), np.concatenate(targets)
        dx, dy = (geo.centres[source] - geo.centres[target]).T
        return make_edges(source, target, direction_codes(dx, dy), self.relations)
