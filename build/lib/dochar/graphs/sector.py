"""Nearest word in each of four direction sectors.

A source word ``j`` lies in a sector of target ``i`` by the angle of the centre-to-centre
vector ``c_j - c_i``: four 90° sectors centred on the axes (``above`` when the vector points
up within 45° of vertical, and so on; exactly 45° counts as vertical, a coincident centre as
``below``, as in :func:`dochar.graphs.base.direction_codes`). In each sector the nearest word
wins, nearest meaning the smallest gap between the two boxes (0 when they touch or overlap),
then the smallest centre distance, then the smaller ``word_id``. So every target listens to at
most four words, one per relation, the edge typed by its sector.

Search: as in :mod:`dochar.graphs.knn`, a window of grid cells that doubles per target until it
proves each sector's answer: the best gap found lies below what any box outside the window must
exceed, or the window holds every centre the sector could contain (the sector's cone clipped to
the box of all centres), which is how an empty sector at the page's edge is settled.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from dochar.data.word_table import Page
from dochar.graphs.base import (ABOVE, BELOW, DIRECTIONS, LEFT, RIGHT, GraphBuilderError, TypedEdges,
                                direction_codes, make_edges, no_edges)
from dochar.graphs.cells import CellIndex, cell_index, group_minima
from dochar.graphs.geometry import PageGeometry, page_geometry

SECTORS = len(DIRECTIONS)


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
        limit2 = np.inf if self.max_distance is None else (self.max_distance * geo.diagonal) ** 2
        return make_edges(*sector_neighbours(geo, limit2), self.relations)


def sector_neighbours(geo: PageGeometry, limit2: float
                      ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(sources, targets, sector codes) of the nearest word per sector within ``limit2``."""
    index = cell_index(geo.boxes)
    cones = cone_cells(geo, index)                       # (n, sector, low/high, x/y)
    pending, reach = np.arange(geo.n), index.first_reach(2.0)
    sources, targets, types = [], [], []
    while len(pending):
        low, high = index.window(pending, reach)
        query, box = index.boxes_in(low, high)
        gap2, centre2, dx, dy = geo.pair_keys(pending[query], box)
        usable = (box != pending[query]) & (gap2 <= limit2)
        query, box, gap2, centre2 = query[usable], box[usable], gap2[usable], centre2[usable]
        code = direction_codes(dx[usable], dy[usable])
        group = query * SECTORS + code
        best = group_minima(group, (gap2, centre2, geo.rank[box]), len(pending) * SECTORS)
        found = np.zeros(len(pending) * SECTORS, dtype=bool)
        found[group[best]] = gap2[best] < index.gap_bound2(reach)
        bound_passes_limit = limit2 < index.gap_bound2(reach)
        cone = cones[pending]
        sees_cone = ((cone[:, :, 0] >= low[:, None]) & (cone[:, :, 1] <= high[:, None])).all(axis=2)
        settled = found.reshape(-1, SECTORS) | sees_cone | bound_passes_limit
        done = settled.all(axis=1)
        kept = best[done[group[best] // SECTORS]]
        sources.append(box[kept])
        targets.append(pending[group[kept] // SECTORS])
        types.append(group[kept] % SECTORS)
        pending, reach = pending[~done], reach * 2
    return np.concatenate(sources), np.concatenate(targets), np.concatenate(types)


def cone_cells(geo: PageGeometry, index: CellIndex) -> np.ndarray:
    """Cell range (low, high corner) holding every centre that can fall in each sector."""
    c = geo.centres
    low_c, high_c = c.min(axis=0), c.max(axis=0)
    margin = 1e-9 * (float(np.abs(c).max()) + 1.0)
    x, y = c[:, 0], c[:, 1]
    up, down = y - low_c[1], high_c[1] - y
    left, right = x - low_c[0], high_c[0] - x
    corners = np.empty((geo.n, SECTORS, 2, 2))           # sector, (low, high), (x, y)
    corners[:, ABOVE] = np.stack([np.column_stack([x - up, y - up]),
                                  np.column_stack([x + up, y])], axis=1)
    corners[:, BELOW] = np.stack([np.column_stack([x - down, y]),
                                  np.column_stack([x + down, y + down])], axis=1)
    corners[:, LEFT] = np.stack([np.column_stack([x - left, y - left]),
                                 np.column_stack([x, y + left])], axis=1)
    corners[:, RIGHT] = np.stack([np.column_stack([x, y - right]),
                                     np.column_stack([x + right, y + right])], axis=1)
    corners[:, :, 0] -= margin
    corners[:, :, 1] += margin
    corners = np.clip(corners, low_c - margin, high_c + margin)
    return index.cells_of(corners.reshape(-1, 2)).reshape(geo.n, SECTORS, 2, 2)
