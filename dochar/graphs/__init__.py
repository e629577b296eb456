"""Graph builders: how the words of a page are linked, chosen by name from the config.

Each builder module mirrors ``configs/graph/<name>.yaml``; :func:`make_graph_builder` looks the
name up and applies the options every builder accepts (see :mod:`dochar.graphs.edge_options`).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from typing import Any

from dochar.graphs.base import GraphBuilder, GraphBuilderError, TypedEdges
from dochar.graphs.delaunay import DelaunayBuilder
from dochar.graphs.edge_options import EDGE_OPTIONS, EdgeOptions, OptionedBuilder
from dochar.graphs.knn import KnnBuilder
from dochar.graphs.line_of_sight import LineOfSightBuilder
from dochar.graphs.reading_order import ReadingOrderBuilder
from dochar.graphs.sector import SectorBuilder

BUILDERS: dict[str, type] = {
    "sector": SectorBuilder,
    "knn": KnnBuilder,
    "delaunay": DelaunayBuilder,
    "line_of_sight": LineOfSightBuilder,
    "reading_order": ReadingOrderBuilder,
}
_SWITCHES = ("self_loops", "reverse_edges", "prune_gutters")  # edge options set beside `options`


def builder_options(name: str) -> tuple[str, ...]:
    """Options the named builder accepts (its own, then those every builder takes)."""
    own = tuple(f.name for f in dataclasses.fields(BUILDERS[name]))
    return own + EDGE_OPTIONS


def make_graph_builder(name: str, **options) -> GraphBuilder:
    if name not in BUILDERS:
        raise GraphBuilderError(f"unknown graph builder {name!r}; choose one of "
                                f"{sorted(BUILDERS)}")
    valid = builder_options(name)
    unknown = sorted(set(options) - set(valid))
    if unknown:
        raise GraphBuilderError(f"graph builder {name!r}: unknown option(s) {unknown}; "
                                f"valid options are {list(valid)}")
    extra = EdgeOptions(**{k: options.pop(k) for k in EDGE_OPTIONS if k in options})
    base = BUILDERS[name](**options)
    return OptionedBuilder(base, extra) if extra.active else base


def from_config(graph_cfg: Mapping[str, Any]) -> GraphBuilder:
    """The builder a ``graph`` config section describes (``name``, ``options``, edge options)."""
    return make_graph_builder(str(graph_cfg["name"]), **dict(graph_cfg.get("options") or {}),
                              **{key: bool(graph_cfg.get(key, False)) for key in _SWITCHES})


__all__ = ["BUILDERS", "GraphBuilder", "GraphBuilderError", "TypedEdges", "builder_options",
           "from_config", "make_graph_builder"]
