"""Edge transforms: small steps applied in order to a builder's edges, and their composition.

``TRANSFORMS`` lists them in the order they run, keyed by the graph config key that switches
each on: pruning looks at geometry only, reverse edges mirror what survived, self-loops come
next so a pruned page still has them, and edge features run last, on the final edge list.
Relations grow accordingly: base relations, then ``<name>_rev`` for each, then ``self``.
A new option is one :class:`EdgeTransform` subclass in its own module and one entry here.
"""

from __future__ import annotations

from collections.abc import Sequence

from dochar.data.word_table import Page
from dochar.graphs.base import GraphBuilder, GraphBuilderError, TypedEdges
from dochar.graphs.transforms.base import EdgeTransform
from dochar.graphs.transforms.edge_features import EDGE_FEATURE_GROUPS, EdgeFeatures
from dochar.graphs.transforms.prune_gutters import PruneGutters
from dochar.graphs.transforms.reverse_edges import ReverseEdges
from dochar.graphs.transforms.self_loops import SelfLoops

TRANSFORMS: dict[str, type[EdgeTransform]] = {
    "prune_gutters": PruneGutters,
    "reverse_edges": ReverseEdges,
    "self_loops": SelfLoops,
    "edge_features": EdgeFeatures,
}


def transform_options() -> tuple[str, ...]:
    """Every key the transforms read: their switches, then their options."""
    return tuple(TRANSFORMS) + tuple(name for cls in TRANSFORMS.values()
                                     for name in cls.option_names())


class TransformedBuilder:
    """A base builder followed by edge transforms, applied to every page it builds.

    ``relations`` and ``edge_attr_names`` are known before any page is seen (models size their
    weights from them); ``edge_attr_names`` is empty when no transform adds attributes.
    """

    def __init__(self, base: GraphBuilder, transforms: Sequence[EdgeTransform] = ()) -> None:
        self.base, self.transforms = base, tuple(transforms)
        self.name = getattr(base, "name", type(base).__name__)
        relations, names = tuple(base.relations), ()
        for transform in self.transforms:
            if names and not transform.keeps_attributes:
                raise GraphBuilderError(f"graph builder '{self.name}': {transform.switch} "
                                        f"cannot follow a transform that adds edge attributes")
            relations, names = transform.relations(relations), transform.attribute_names(names)
        if len(set(relations)) != len(relations):
            raise GraphBuilderError(f"graph builder '{self.name}': relation names clash "
                                    f"after options: {relations}")
        self.relations: tuple[str, ...] = relations
        self.edge_attr_names: tuple[str, ...] = names

    def __repr__(self) -> str:
        return f"TransformedBuilder({self.base!r}, {list(self.transforms)!r})"

    def __call__(self, page: Page) -> TypedEdges:
        return self._transformed(page, self.base(page))

    def build_all(self, pages: Sequence[Page]) -> list[TypedEdges]:
        """Every page's edges, as page by page: through the base builder's ``build_all`` when it
        has one (all pages in one pass), then each page's transforms."""
        build_all = getattr(self.base, "build_all", None)
        found = build_all(pages) if build_all is not None else [self.base(p) for p in pages]
        return [self._transformed(page, edges) for page, edges in zip(pages, found)]

    def _transformed(self, page: Page, edges: TypedEdges) -> TypedEdges:
        edges.check_nodes(len(page), f"graph builder '{self.name}', page {page.key}")
        for transform in self.transforms:
            edges = transform(page, edges)
        return edges


__all__ = ["EDGE_FEATURE_GROUPS", "TRANSFORMS", "EdgeFeatures", "EdgeTransform", "PruneGutters",
           "ReverseEdges", "SelfLoops", "TransformedBuilder", "transform_options"]
