"""The sector, kNN and line-of-sight builders as they were before the sub-quadratic rewrite.

Kept only as the benchmark's reference (timed beside the package's builders on the same pages)
and as a second, independent implementation of the same rules. Sector and kNN rank every pair
of words in row blocks, O(n^2) time; line of sight compares each word with every word its y-range
overlaps and each such pair with all of them again, O(n^3) on one long row.
"""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np

from dochar.data.word_table import Page
from dochar.graphs.base import (ABOVE, BELOW, DIRECTIONS, LEFT, RIGHT, TypedEdges,
                                direction_codes, make_edges, no_edges)
from dochar.graphs.geometry import PageGeometry, page_geometry

PAIR_BUDGET = 2_000_000  # target x source cells held at once when ranking neighbours


def row_blocks(n: int, budget: int = PAIR_BUDGET) -> Iterator[slice]:
    step = max(1, budget // max(n, 1))
    for start in range(0, n, step):
        yield slice(start, min(n, start + step))


def offsets(geo: PageGeometry, rows: slice) -> tuple[np.ndarray, np.ndarray]:
    dx = geo.centres[None, :, 0] - geo.centres[rows, None, 0]
    dy = geo.centres[None, :, 1] - geo.centres[rows, None, 1]
    return dx, dy


def gap2(geo: PageGeometry, rows: slice) -> np.ndarray:
    b = geo.boxes
    gx = np.maximum(0.0, np.maximum(b[None, :, 0] - b[rows, None, 2],
                                    b[rows, None, 0] - b[None, :, 2]))
    gy = np.maximum(0.0, np.maximum(b[None, :, 1] - b[rows, None, 3],
                                    b[rows, None, 1] - b[None, :, 3]))
    return gx * gx + gy * gy


def nearest_first(geo: PageGeometry, rows: slice) -> tuple[np.ndarray, np.ndarray]:
    dx, dy = offsets(geo, rows)
    centre2 = dx * dx + dy * dy
    rank = np.broadcast_to(geo.rank, centre2.shape)
    order = np.lexsort((rank, centre2, gap2(geo, rows)), axis=-1)
    targets = np.arange(geo.n)[rows]
    return order, order == targets[:, None]


def reference_sector(page: Page, max_distance: float | None = None) -> TypedEdges:
    geo = page_geometry(page, "sector")
    if geo.n < 2:
        return no_edges(DIRECTIONS)
    limit2 = None if max_distance is None else (max_distance * geo.diagonal) ** 2
    sources, targets, types = [], [], []
    for rows in row_blocks(geo.n):
        order, is_self = nearest_first(geo, rows)
        dx, dy = offsets(geo, rows)
        sector = np.take_along_axis(direction_codes(dx, dy), order, axis=-1)
        usable = ~is_self
        if limit2 is not None:
            usable &= np.take_along_axis(gap2(geo, rows), order, axis=-1) <= limit2
        target_ids = np.arange(geo.n)[rows]
        for code in range(len(DIRECTIONS)):
            hit = usable & (sector == code)
            found = hit.any(axis=1)
            first = hit.argmax(axis=1)[found]
            sources.append(order[found, first])
            targets.append(target_ids[found])
            types.append(np.full(int(found.sum()), code))
    return make_edges(np.concatenate(sources), np.concatenate(targets), np.concatenate(types),
                      DIRECTIONS)


def reference_knn(page: Page, k: int = 6) -> TypedEdges:
    geo = page_geometry(page, "knn")
    take = min(int(k), geo.n - 1)
    if take < 1:
        return no_edges(DIRECTIONS)
    sources, targets = [], []
    for rows in row_blocks(geo.n):
        order, is_self = nearest_first(geo, rows)
        kept = ~is_self & (np.cumsum(~is_self, axis=1) <= take)
        sources.append(order[kept])
        targets.append(np.repeat(np.arange(geo.n)[rows], take))
    source, target = np.concatenate(sources), np.concatenate(targets)
    dx, dy = (geo.centres[source] - geo.centres[target]).T
    return make_edges(source, target, direction_codes(dx, dy), DIRECTIONS)


def sight_pairs(boxes: np.ndarray) -> np.ndarray:
    x0, y0, x1, y1 = boxes.T
    height = y1 - y0
    found = []
    for i in range(len(boxes)):
        near = np.flatnonzero((y0 <= y1[i]) & (y1 >= y0[i]))
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


def reference_line_of_sight(page: Page) -> TypedEdges:
    geo = page_geometry(page, "line_of_sight")
    if geo.n < 2:
        return no_edges(DIRECTIONS)
    n = geo.n
    pair_keys = [p[:, 0] * n + p[:, 1]
                 for p in (sight_pairs(geo.boxes), sight_pairs(geo.boxes[:, [1, 0, 3, 2]]))]
    keys = np.union1d(*pair_keys)
    if not len(keys):
        return no_edges(DIRECTIONS)
    a, b = np.divmod(keys, n)
    in_h, in_v = (np.tile(np.isin(keys, k), 2) for k in pair_keys)
    source, target = np.concatenate([a, b]), np.concatenate([b, a])
    dx, dy = (geo.centres[source] - geo.centres[target]).T
    types = np.where(in_h & in_v, direction_codes(dx, dy),
                     np.where(in_h, np.where(dx < 0, LEFT, RIGHT),
                              np.where(dy < 0, ABOVE, BELOW)))
    return make_edges(source, target, types, DIRECTIONS)


REFERENCE_BUILDERS = {"sector": reference_sector, "knn": reference_knn,
                      "line_of_sight": reference_line_of_sight}
