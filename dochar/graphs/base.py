"""Typed edges, the builder protocol and the edge conventions every builder shares.

Conventions (all builders):

* ``edge_index[0]`` is the source word ``j``, ``edge_index[1]`` the target word ``i``; messages
  flow ``j -> i``, so a word's in-edges are the neighbours it listens to.
* A relation names where the *source* lies relative to the *target*: an edge typed ``"above"``
  brings the target a message from a word above it.
* Edges come out canonical: no duplicate (source, target, type) triple, sorted by target, then
  source, then type. Builders never emit self-edges; the ``self_loops`` option adds them.
* Continuous edge attributes, when a transform adds them (:mod:`dochar.graphs.transforms`), sit
  in ``edge_attr`` (E, D) float32, one row per edge in edge order, columns named by
  ``edge_attr_names``; without them ``edge_attr`` is None and the names are empty.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Protocol, runtime_checkable

import numpy as np

from dochar.data.word_table import Page
from dochar.errors import DocharError

DIRECTIONS: tuple[str, ...] = ("above", "below", "left", "right")
ABOVE, BELOW, LEFT, RIGHT = range(4)


class GraphBuilderError(DocharError):
    """A builder asked for with bad options, or handed a page it cannot use."""


@dataclass(frozen=True)
class TypedEdges:
    """Edges of one page with one relation id per edge."""

    edge_index: np.ndarray   # (2, E) int64; row 0 = source j, row 1 = target i
    edge_type: np.ndarray    # (E,) int64 in [0, len(relations))
    relations: tuple[str, ...]
    edge_attr: np.ndarray | None = None     # (E, D) float32, or None: no attributes
    edge_attr_names: tuple[str, ...] = ()   # D names, empty when edge_attr is None

    def __post_init__(self) -> None:
        index = np.asarray(self.edge_index)
        types = np.asarray(self.edge_type)
        if index.size == 0:
            index = index.reshape(2, 0)
        if index.ndim != 2 or index.shape[0] != 2:
            raise GraphBuilderError(f"edge_index must have shape (2, E), got {index.shape}")
        if types.shape != (index.shape[1],):
            raise GraphBuilderError(f"edge_type must have shape ({index.shape[1]},), "
                                    f"got {types.shape}")
        if types.size and (types.min() < 0 or types.max() >= len(self.relations)):
            raise GraphBuilderError(f"edge_type outside [0, {len(self.relations)}) "
                                    f"for relations {self.relations}")
        object.__setattr__(self, "edge_index", index.astype(np.int64, copy=False))
        object.__setattr__(self, "edge_type", types.astype(np.int64, copy=False))
        object.__setattr__(self, "relations", tuple(self.relations))
        object.__setattr__(self, "edge_attr_names", tuple(self.edge_attr_names))
        if self.edge_attr is None:
            if self.edge_attr_names:
                raise GraphBuilderError(f"edge_attr_names {self.edge_attr_names} given without "
                                        f"edge_attr")
            return
        attr = np.asarray(self.edge_attr)
        if attr.size == 0:
            attr = attr.reshape(index.shape[1], len(self.edge_attr_names))
        if attr.shape != (index.shape[1], len(self.edge_attr_names)):
            raise GraphBuilderError(f"edge_attr must have shape ({index.shape[1]}, "
                                    f"{len(self.edge_attr_names)}) for edge_attr_names "
                                    f"{self.edge_attr_names}, got {attr.shape}")
        object.__setattr__(self, "edge_attr", attr.astype(np.float32, copy=False))

    @property
    def num_edges(self) -> int:
        return int(self.edge_index.shape[1])

    def subset(self, keep: np.ndarray) -> TypedEdges:
        """The edges where ``keep`` (a mask or index array) selects, attributes kept aligned."""
        return TypedEdges(self.edge_index[:, keep], self.edge_type[keep], self.relations,
                          None if self.edge_attr is None else self.edge_attr[keep],
                          self.edge_attr_names)

    def check_nodes(self, num_nodes: int, where: str) -> None:
        """Fail loudly when an edge points past the page's words."""
        if self.num_edges and (self.edge_index.min() < 0 or self.edge_index.max() >= num_nodes):
            raise GraphBuilderError(f"{where}: edge endpoint outside [0, {num_nodes})")


@runtime_checkable
class GraphBuilder(Protocol):
    relations: tuple[str, ...]       # known before any page is seen (models size weights from it)

    def __call__(self, page: Page) -> TypedEdges: ...


def make_edges(source: np.ndarray, target: np.ndarray, types: np.ndarray,
               relations: tuple[str, ...]) -> TypedEdges:
    """Canonical edges: duplicates dropped, sorted by (target, source, type).

    Each triple is packed into one int64 key (target, source, type in mixed radix) and the keys
    sorted: an order of magnitude faster than a row-wise unique on large pages.
    """
    target, source, types = (np.asarray(a, dtype=np.int64).ravel() for a in (target, source, types))
    if not len(target):
        return no_edges(relations)
    if min(target.min(), source.min(), types.min()) < 0:
        raise GraphBuilderError("edge endpoints and types must be non-negative")
    nodes, kinds = int(max(target.max(), source.max())) + 1, max(len(relations), 1)
    if types.max() >= kinds:
        raise GraphBuilderError(f"edge_type outside [0, {len(relations)}) "
                                f"for relations {tuple(relations)}")
    if nodes * nodes * kinds >= 2 ** 62:
        raise GraphBuilderError(f"{nodes} nodes are too many for one page's edge keys")
    keys = np.sort((target * nodes + source) * kinds + types)
    keys = keys[np.r_[True, keys[1:] != keys[:-1]]]
    pair, kind = np.divmod(keys, kinds)
    target, source = np.divmod(pair, nodes)
    return TypedEdges(np.stack([source, target]), kind, relations)


def edges_by_page(source: np.ndarray, target: np.ndarray, types: np.ndarray,
                  starts: np.ndarray, relations: tuple[str, ...]) -> list[TypedEdges]:
    """:func:`make_edges` of every page at once: nodes numbered across pages laid end to end
    (page p holds ``starts[p]`` to ``starts[p + 1] - 1``; no edge crosses a page), one sort of
    the packed keys, then each page's edges cut out and numbered from 0. For a builder's own
    output: endpoints and types are taken as valid (``make_edges`` checks them)."""
    target, source, types = (np.asarray(a, dtype=np.int64).ravel() for a in (target, source, types))
    nodes, kinds = max(int(starts[-1]), 1), max(len(relations), 1)
    keys = np.sort((target * nodes + source) * kinds + types)
    keys = keys[np.r_[True, keys[1:] != keys[:-1]]] if len(keys) else keys
    pair, kind = np.divmod(keys, kinds)
    target, source = np.divmod(pair, nodes)
    cuts = np.searchsorted(target, starts)
    return [TypedEdges(np.stack([source[a:b] - offset, target[a:b] - offset]), kind[a:b],
                       relations) for a, b, offset in zip(cuts[:-1], cuts[1:], starts[:-1])]


def no_edges(relations: tuple[str, ...]) -> TypedEdges:
    return TypedEdges(np.zeros((2, 0), np.int64), np.zeros(0, np.int64), relations)


def direction_codes(dx: np.ndarray, dy: np.ndarray) -> np.ndarray:
    """Direction of the source seen from the target, by the dominant axis of the centre offset.

    ``dx, dy`` = source centre minus target centre (y grows downwards). Vertical wins ties
    (exactly 45°) and coincident centres count as ``below``: every offset gets one code.
    """
    vertical = np.abs(dy) >= np.abs(dx)
    return np.where(vertical, np.where(dy < 0, ABOVE, BELOW),
                    np.where(dx < 0, LEFT, RIGHT)).astype(np.int64)
