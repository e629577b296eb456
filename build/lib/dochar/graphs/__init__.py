"""Graph builders: how the words of a page are linked, chosen by name from the config.

Each builder module mirrors ``configs/graph/<name>.yaml``; :func:`make_graph_builder` looks the
name up and follows it with the edge transforms the options switch on (gutter pruning, reverse
edges, self-loops, edge features; see :mod:`dochar.graphs.transforms`).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from typing import Any

from dochar.graphs.base import GraphBuilder, GraphBuilderError, TypedEdges
from dochar.graphs.complete import CompleteBuilder
from dochar.graphs.delaunay import DelaunayBuilder
from dochar.graphs.knn import KnnBuilder
from dochar.graphs.line_of_sight import LineOfSightBuilder
from dochar.graphs.reading_order import ReadingOrderBuilder
from dochar.graphs.sector import SectorBuilder
from dochar.graphs.transforms import TRANSFORMS, TransformedBuilder, transform_options

BUILDERS: dict[str, type] = {
    "sector": SectorBuilder,
    "knn": KnnBuilder,
    "delaunay": DelaunayBuilder,
    "line_of_sight": LineOfSightBuilder,
    "reading_order": ReadingOrderBuilder,
    "complete": CompleteBuilder,
}
_SWITCHES = ("self_loops", "reverse_edges", "prune_gutters")  # graph keys set beside `options`


def builder_options(name: str) -> tuple[str, ...]:
    """Options the named builder accepts (its own, then those of the edge transforms)."""
    own = tuple(f.name for f in dataclasses.fields(BUILDERS[name]))
    return own + transform_options()


def make_graph_builder(name: str, **options) -> TransformedBuilder:
    """The named builder followed by the transforms its options switch on, in registry order."""
    if name not in BUILDERS:
        raise GraphBuilderError(f"unknown graph builder {name!r}; choose one of "
                                f"{sorted(BUILDERS)}")
    valid = builder_options(name)
    unknown = sorted(set(options) - set(valid))
    if unknown:
        raise GraphBuilderError(f"graph builder {name!r}: unknown option(s) {unknown}; "
                                f"valid options are {list(valid)}")
    transforms = []
    for switch, cls in TRANSFORMS.items():
        own = {key: options.pop(key) for key in cls.option_names() if key in options}
        transform = cls.from_switch(options.pop(switch, False), **own)
        if transform is not None:
            transforms.append(transform)
    return TransformedBuilder(BUILDERS[name](**options), transforms)


def from_config(graph_cfg: Mapping[str, Any], edges_cfg: Mapping[str, Any] | None = None
                ) -> TransformedBuilder:
    """The builder a ``graph`` config section describes (``name``, ``options``, the switches),
    with the edge features an ``edges`` section names (``groups``; none when it is absent)."""
    groups = list((edges_cfg or {}).get("groups") or [])
    return make_graph_builder(str(graph_cfg["name"]), **dict(graph_cfg.get("options") or {}),
                              **{key: bool(graph_cfg.get(key, False)) for key in _SWITCHES},
                              edge_features=groups)


__all__ = ["BUILDERS", "GraphBuilder", "GraphBuilderError", "TypedEdges", "builder_options",
           "from_config", "make_graph_builder"]
