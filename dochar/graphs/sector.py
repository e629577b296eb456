"""Nearest word in each of four direction sectors.

A source word ``j`` lies in a sector of target ``i`` by the angle of the centre-to-centre
vector ``c_j - c_i``: four 90° sectors centred on the axes (``above`` when the vector points
up within 45° of vertical, and so on; exactly 45° counts as vertical, a coincident centre as
``below``, as in :func:`dochar.graphs.base.direction_codes`). In each sector the nearest word
wins, nearest meaning the smallest gap between the two boxes (0 when they touch or overlap),
then the smallest centre distance, then the smaller ``word_id``. So every target listens to at
most four words, one per relation, the edge typed by its sector.
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
class SectorBuilder:
    """``max_distance``: drop neighbours whose box gap exceeds this fraction of the page diagonal."""

    max_distance: float | None = None

    name: ClassVar[str] = "sector"
    relations: ClassVar[tuple[str, ...]] = DIRECTIONS

    def __post_init__(self) -> None:
        if self.max_distance is not None and not (
                isinstance(self.max_distance, (int, float)) and self.max_distance > 0):
            raise GraphBuilderError(f"graph builder 'sector': max_distance must be a positive "
                                    f"fraction of the page diagonal or None, got "
                                    f"{self.max_distance!r}")

    def __call__(self, page: Page) -> TypedEdges:
        geo = page_geometry(page, self.name)
        if geo.n < 2:
            return no_edges(self.relations)
        limit2 = None if self.max_distance is None else (self.max_distance * geo.diagonal) ** 2
        sources, targets, types = [], [], []
        for rows in row_blocks(geo.n):
            order, is_self = geo.nearest_first(rows)
            dx, dy = geo.offsets(rows)
            sector = np.take_along_axis(direction_codes(dx, dy), order, axis=-1)
            usable = ~is_self
            if limit2 is not None:
                usable &= np.take_along_axis(geo.gap2(rows), order, axis=-1) <= limit2
            target_ids = np.arange(geo.n)[rows]
            for code in range(len(DIRECTIONS)):
                hit = usable & (sector == code)
                found = hit.any(axis=1)
                first = hit.argmax(axis=1)[found]
                sources.append(order[found, first])
                targets.append(target_ids[found])
                types.append(np.full(int(found.sum()), code))
        return make_edges(np.concatenate(sources), np.concatenate(targets),
                          np.concatenate(types), self.relations)
