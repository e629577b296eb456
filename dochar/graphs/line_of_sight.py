"""Words that see each other along a row or a column, with no box in between.

Two words see each other horizontally when

1. their boxes share a vertical band ``[lo, hi]`` = the overlap of their y-ranges, of positive
   height; a flat box (zero height) qualifies when it lies within the other's closed y-range,
   the band then being a line;
2. the corridor between them, ``(gap_lo, gap_hi) x [lo, hi]`` with ``gap_lo, gap_hi`` the facing
   box edges, meets no other box's interior (a blocker must overlap the band with positive
   length, or straddle it when the band is a line). Boxes that touch or overlap in x have an
   empty corridor and always see each other.

Vertical sight is the same rule with x and y swapped. The relation is symmetric; each pair gets
both directions, typed ``left``/``right`` (by the sign of the centre offset, 0 counting as
``right``) for horizontal sight and ``above``/``below`` for vertical sight; a pair that sees both
ways (overlapping boxes) is typed by the dominant axis. Each word is compared only with words
its own range overlaps, which keeps typical pages near-linear; one row of n words costs O(n^3).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from dochar.data.word_table import Page
from dochar.graphs.base import (
    ABOVE,
    BELOW,
    DIRECTIONS,
    LEFT,
    RIGHT,
    TypedEdges,
    direction_codes,
    make_edges,
    no_edges,
)
from dochar.graphs.geometry import page_geometry


def sight_pairs(boxes: np.ndarray) -> np.ndarray:
    """Pairs (m, 2), first < second, that see each other horizontally (swap axes for vertical)."""
    x0, y0, x1, y1 = boxes.T
    height = y1 - y0
    found = []
    for i in range(len(boxes)):
        near = np.flatnonzero((y0 <= y1[i]) & (y1 >= y0[i]))   # closed y-overlap, i included
        partners = near[near > i]
        if not len(partners):
            continue
        lo = np.maximum(y0[i], y0[partners])
        hi = np.minimum(y1[i], y1[partners])
        banded = (hi > lo) | (np.minimum(height[i], height[partners]) == 0)
        partners, lo, hi = partners[banded], lo[banded], hi[banded]
        gap_lo = np.minimum(x1[i], x1[partners])
        gap_hi = np.maximum(x0[i], x0[partners])
        blocked = ((x0[near][None, :] < gap_hi[:, None]) & (x1[near][None, :] > gap_lo[:, None])
                   & (y0[near][None, :] < hi[:, None]) & (y1[near][None, :] > lo[:, None]))
        sees = (gap_hi <= gap_lo) | ~blocked.any(axis=1)
        found.append(np.column_stack([np.full(int(sees.sum()), i), partners[sees]]))
    return np.concatenate(found).astype(np.int64) if found else np.zeros((0, 2), np.int64)


@dataclass(frozen=True)
class LineOfSightBuilder:
    name: ClassVar[str] = "line_of_sight"
    relations: ClassVar[tuple[str, ...]] = DIRECTIONS

    def __call__(self, page: Page) -> TypedEdges:
        geo = page_geometry(page, self.name)
        if geo.n < 2:
            return no_edges(self.relations)
        n = geo.n
        pair_keys = [p[:, 0] * n + p[:, 1]
                     for p in (sight_pairs(geo.boxes), sight_pairs(geo.boxes[:, [1, 0, 3, 2]]))]
        keys = np.union1d(*pair_keys)
        if not len(keys):
            return no_edges(self.relations)
        a, b = np.divmod(keys, n)
        in_h, in_v = (np.tile(np.isin(keys, k), 2) for k in pair_keys)
        source, target = np.concatenate([a, b]), np.concatenate([b, a])
        dx, dy = (geo.centres[source] - geo.centres[target]).T
        types = np.where(in_h & in_v, direction_codes(dx, dy),
                         np.where(in_h, np.where(dx < 0, LEFT, RIGHT),
                                  np.where(dy < 0, ABOVE, BELOW)))
        return make_edges(source, target, types, self.relations)
