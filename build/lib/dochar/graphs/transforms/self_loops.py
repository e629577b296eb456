"""Self-loops: one edge i -> i per word under the relation ``self``.

Applied after pruning, so a word whose every edge was pruned still hears itself.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from dochar.data.word_table import Page
from dochar.graphs.base import TypedEdges, make_edges
from dochar.graphs.transforms.base import EdgeTransform


@dataclass(frozen=True)
class SelfLoops(EdgeTransform):
    switch: ClassVar[str] = "self_loops"

    def relations(self, relations: tuple[str, ...]) -> tuple[str, ...]:
        return relations + ("self",)

    def __call__(self, page: Page, edges: TypedEdges) -> TypedEdges:
        relations = self.relations(edges.relations)
        loops = np.arange(len(page))
        source, target = edges.edge_index
        return make_edges(np.concatenate([source, loops]), np.concatenate([target, loops]),
                          np.concatenate([edges.edge_type,
                                          np.full(len(page), len(relations) - 1)]), relations)
