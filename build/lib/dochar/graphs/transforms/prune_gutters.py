"""Gutter pruning: drop the edges whose centre-to-centre segment crosses a whitespace gutter.

Gutters are the empty corridors between text columns (:mod:`dochar.graphs.gutters`), at least
``gutter_min_width`` of the page width wide and ``gutter_min_height`` of its height tall. The
defaults are those of ``configs/graph/common.yaml`` (a test keeps the two equal): on FUNSD's 199
forms, 2% by 30% split a sector graph into 2.4 connected parts per page, 4% by 50% into 1.6.
Pruning only removes edges, so attributes already on them stay aligned.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

from dochar.data.word_table import Page
from dochar.graphs.base import TypedEdges
from dochar.graphs.geometry import page_geometry
from dochar.graphs.gutters import crossing, find_gutters
from dochar.graphs.transforms.base import EdgeTransform, check_fraction


@dataclass(frozen=True)
class PruneGutters(EdgeTransform):
    gutter_min_width: float = 0.04    # fraction of the page width
    gutter_min_height: float = 0.5    # fraction of the page height

    switch: ClassVar[str] = "prune_gutters"
    keeps_attributes: ClassVar[bool] = True

    def __post_init__(self) -> None:
        for name in ("gutter_min_width", "gutter_min_height"):
            check_fraction(self.switch, name, getattr(self, name))

    def __call__(self, page: Page, edges: TypedEdges) -> TypedEdges:
        if not edges.num_edges:
            return edges
        geo = page_geometry(page, self.switch)
        gutters = find_gutters(geo.boxes, self.gutter_min_width * page.width,
                               self.gutter_min_height * page.height)
        source, target = edges.edge_index
        return edges.subset(~crossing(geo.centres[source], geo.centres[target], gutters))
