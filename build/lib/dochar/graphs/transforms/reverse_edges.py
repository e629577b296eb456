"""Reverse edges: every edge j -> i mirrored as i -> j under the relation ``<relation>_rev``.

The mirror of an ``above`` edge tells the upper word about a word below it under its own
relation, so a relational layer can weigh "I am above you" apart from "you are below me".
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from dochar.data.word_table import Page
from dochar.graphs.base import TypedEdges, make_edges
from dochar.graphs.transforms.base import EdgeTransform


@dataclass(frozen=True)
class ReverseEdges(EdgeTransform):
    switch: ClassVar[str] = "reverse_edges"

    def relations(self, relations: tuple[str, ...]) -> tuple[str, ...]:
        return relations + tuple(f"{r}_rev" for r in relations)

    def __call__(self, page: Page, edges: TypedEdges) -> TypedEdges:
        source, target = edges.edge_index
        offset = len(edges.relations)
        return make_edges(np.concatenate([source, target]), np.concatenate([target, source]),
                          np.concatenate([edges.edge_type, edges.edge_type + offset]),
                          self.relations(edges.relations))
