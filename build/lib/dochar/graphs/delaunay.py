"""Delaunay triangulation of word centres, each triangle side an edge in both directions.

Degenerate input is handled explicitly rather than left to Qhull:

* words sharing one centre are triangulated once, as a single point; every copy gets that
  point's edges, and copies are linked to each other;
* fewer than three distinct centres, or all of them on one line (Qhull raises), give the 1-D
  Delaunay graph instead: a chain through the distinct centres in order along the line;
* a point Qhull leaves out as coplanar (numerically on top of another) is linked to the
  triangulation vertex Qhull names as its nearest.

Distinct centres are handed to Qhull sorted lexicographically, so the result does not depend on
the order words arrive in. Edges are typed by direction (dominant axis of the centre offset).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import numpy as np
from scipy.spatial import Delaunay, QhullError

from dochar.data.word_table import Page
from dochar.graphs.base import (
    DIRECTIONS,
    TypedEdges,
    direction_codes,
    make_edges,
    no_edges,
)
from dochar.graphs.geometry import PageGeometry, page_geometry


def point_pairs(points: np.ndarray) -> np.ndarray:
    """Undirected Delaunay pairs (m, 2) between distinct points, with the fallbacks above."""
    m = len(points)
    if m < 2:
        return np.zeros((0, 2), np.int64)
    if m >= 3:
        try:
            tri = Delaunay(points)
        except QhullError:
            tri = None
        if tri is not None:
            s = tri.simplices
            pairs = [s[:, [0, 1]], s[:, [1, 2]], s[:, [0, 2]]]
            if len(tri.coplanar):
                pairs.append(tri.coplanar[:, [0, 2]])
            return np.concatenate(pairs).astype(np.int64)
    # collinear (or two points): order along the principal direction and chain
    centred = points - points.mean(axis=0)
    axis = np.linalg.svd(centred, full_matrices=False)[2][0]
    along = np.lexsort((points[:, 1], points[:, 0], centred @ axis))
    return np.column_stack([along[:-1], along[1:]]).astype(np.int64)


@dataclass(frozen=True)
class DelaunayBuilder:
    name: ClassVar[str] = "delaunay"
    relations: ClassVar[tuple[str, ...]] = DIRECTIONS

    def __call__(self, page: Page) -> TypedEdges:
        geo = page_geometry(page, self.name)
        if geo.n < 2:
            return no_edges(self.relations)
        points, which = np.unique(geo.centres, axis=0, return_inverse=True)
        which = which.ravel()
        pairs = point_pairs(points)
        if len(points) == geo.n:     # no shared centres: point p is word order[p]
            order = np.empty(geo.n, np.int64)
            order[which] = np.arange(geo.n)
            return self._typed(geo, order[pairs[:, 0]], order[pairs[:, 1]])
        members = [np.flatnonzero(which == p) for p in range(len(points))]
        a_side, b_side = [], []
        for a, b in pairs:           # every copy of one point to every copy of the other
            grid = np.meshgrid(members[a], members[b], indexing="ij")
            a_side.append(grid[0].ravel())
            b_side.append(grid[1].ravel())
        for group in members:        # copies of one point to each other
            if len(group) > 1:
                grid = np.meshgrid(group, group, indexing="ij")
                off = grid[0] != grid[1]
                a_side.append(grid[0][off])
                b_side.append(grid[1][off])
        return self._typed(geo, np.concatenate(a_side), np.concatenate(b_side))

    def _typed(self, geo: PageGeometry, a: np.ndarray, b: np.ndarray) -> TypedEdges:
        source, target = np.concatenate([a, b]), np.concatenate([b, a])
        dx, dy = (geo.centres[source] - geo.centres[target]).T
        return make_edges(source, target, direction_codes(dx, dy), self.relations)
