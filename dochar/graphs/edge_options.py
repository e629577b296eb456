"""Options any builder takes: gutter pruning, reverse relations, self-loops.

Applied in that order to the base builder's edges: pruning looks at geometry only, reverse
edges mirror what survived, and self-loops come last so a pruned page still has them.
Relations grow accordingly: base relations, then ``<name>_rev`` for each, then ``self``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from dochar.data.word_table import Page
from dochar.graphs.base import GraphBuilder, GraphBuilderError, TypedEdges, make_edges
from dochar.graphs.geometry import page_geometry
from dochar.graphs.gutters import crossing, find_gutters

EDGE_OPTIONS: tuple[str, ...] = ("prune_gutters", "gutter_min_width", "gutter_min_height",
                                 "self_loops", "reverse_edges")


@dataclass(frozen=True)
class EdgeOptions:
    """``gutter_min_width`` is a fraction of the page width, ``gutter_min_height`` of its height."""

    prune_gutters: bool = False
    gutter_min_width: float = 0.02
    gutter_min_height: float = 0.3
    self_loops: bool = False
    reverse_edges: bool = False

    def __post_init__(self) -> None:
        for name in ("prune_gutters", "self_loops", "reverse_edges"):
            if not isinstance(getattr(self, name), (bool, np.bool_)):
                raise GraphBuilderError(f"graph option {name} must be true or false, "
                                        f"got {getattr(self, name)!r}")
        for name in ("gutter_min_width", "gutter_min_height"):
            value = getattr(self, name)
            if not isinstance(value, (int, float)) or not 0 < value <= 1:
                raise GraphBuilderError(f"graph option {name} must be a fraction in (0, 1], "
                                        f"got {value!r}")

    @property
    def active(self) -> bool:
        return bool(self.prune_gutters or self.self_loops or self.reverse_edges)


class OptionedBuilder:
    """A base builder with :class:`EdgeOptions` applied to every page it builds."""

    def __init__(self, base: GraphBuilder, options: EdgeOptions) -> None:
        self.base, self.options = base, options
        self.name = getattr(base, "name", type(base).__name__)
        relations = tuple(base.relations)
        if options.reverse_edges:
            relations += tuple(f"{r}_rev" for r in base.relations)
        if options.self_loops:
            relations += ("self",)
        if len(set(relations)) != len(relations):
            raise GraphBuilderError(f"graph builder '{self.name}': relation names clash "
                                    f"after options: {relations}")
        self.relations: tuple[str, ...] = relations

    def __repr__(self) -> str:
        return f"OptionedBuilder({self.base!r}, {self.options!r})"

    def __call__(self, page: Page) -> TypedEdges:
        edges = self.base(page)
        edges.check_nodes(len(page), f"graph builder '{self.name}', page {page.key}")
        source, target = edges.edge_index
        types = edges.edge_type
        if self.options.prune_gutters and len(source):
            geo = page_geometry(page, self.name)
            gutters = find_gutters(geo.boxes, self.options.gutter_min_width * page.width,
                                   self.options.gutter_min_height * page.height)
            keep = ~crossing(geo.centres[source], geo.centres[target], gutters)
            source, target, types = source[keep], target[keep], types[keep]
        if self.options.reverse_edges:
            offset = len(self.base.relations)
            source, target, types = (np.concatenate([source, target]),
                                     np.concatenate([target, source]),
                                     np.concatenate([types, types + offset]))
        if self.options.self_loops:
            loops = np.arange(len(page))
            source, target = np.concatenate([source, loops]), np.concatenate([target, loops])
            types = np.concatenate([types, np.full(len(page), self.relations.index("self"))])
        return make_edges(source, target, types, self.relations)
