"""A uniform grid of cells over the page, for neighbour searches that never look at all pairs.

Every box is filed under each cell its closed extent touches, so a box that meets no cell of a
window around a target lies farther than the window's reach from the target's box along x or y:
with a margin of ``m`` cells of side ``s``, its box gap exceeds ``m * s`` along that axis. The builders search a small
window first and widen it only for the targets whose answer the window cannot yet prove, which
keeps typical pages near-linear while every answer stays exact.

Cells start as large as the median box (so a word meets one or two cells and a window holds the
few words around it) and double while boxes would be filed under too many cells or the grid
would outgrow the words, bounding memory at a few entries a word.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

ENTRIES_PER_BOX = 8   # average cells a box may be filed under before the cells grow
SAFETY = 1e-6         # cell-index rounding slack, in cells


@dataclass(frozen=True)
class CellIndex:
    origin: np.ndarray    # (2,) lower corner of the grid
    size: np.ndarray      # (2,) width and height of a cell
    shape: np.ndarray     # (2,) number of columns, rows
    low: np.ndarray       # (n, 2) int64 cell of each box's (x0, y0)
    high: np.ndarray      # (n, 2) int64 cell of each box's (x1, y1)
    start: np.ndarray     # (cells + 1,) first entry of each cell (row-major cell ids)
    entry_box: np.ndarray      # box of each entry, entries sorted by cell
    entry_inner_column: np.ndarray  # column of each entry's cell, -1 in its box's first column
    entry_topmost: np.ndarray   # the entry is its box's first row

    def cells_of(self, points: np.ndarray) -> np.ndarray:
        """Cell (column, row) holding each point (m, 2), clipped to the grid."""
        cell = np.floor((points - self.origin) / self.size).astype(np.int64)
        return np.clip(cell, 0, self.shape - 1)

    def cells_of_x(self, x: np.ndarray) -> np.ndarray:
        """Column holding each x, clipped to the grid (``cells_of``'s first column)."""
        return np.minimum(np.floor((x - self.origin[0]) / self.size[0]).astype(np.int64),
                          self.shape[0] - 1)

    def first_reach(self, cells: float) -> float:
        """A first search distance of ``cells`` times the smaller cell side; one side settles
        the nearest word per direction on a text page, two settle about eight neighbours."""
        return cells * float(self.size.min())

    def margin(self, reach: float) -> np.ndarray:
        """Cells of margin per axis so that a window reaches at least ``reach`` beyond a box."""
        return np.ceil(reach / self.size).astype(np.int64)

    def window(self, boxes: np.ndarray, reach: float) -> tuple[np.ndarray, np.ndarray]:
        """Cells within ``reach`` of the given box indices' own cells, clipped to the grid."""
        margin = self.margin(reach)
        return (np.maximum(self.low[boxes] - margin, 0),
                np.minimum(self.high[boxes] + margin, self.shape - 1))

    def covers_grid(self, low: np.ndarray, high: np.ndarray) -> np.ndarray:
        return (low == 0).all(axis=1) & (high == self.shape - 1).all(axis=1)

    def gap_bound2(self, reach: float) -> float:
        """Every box outside a ``reach`` window has a squared box gap above this."""
        return float(((self.margin(reach) - SAFETY) * self.size).min() ** 2)

    def boxes_in(self, low: np.ndarray, high: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Pairs (query position, box) for every box meeting each window, each box once,
        grouped by query position in ascending order."""
        columns = int(self.shape[0])
        rows_each = high[:, 1] - low[:, 1] + 1
        query = np.repeat(np.arange(len(low)), rows_each)
        offset = _positions_within(rows_each)
        left = low[:, 0][query]
        row_base = (low[:, 1][query] + offset) * columns
        first = self.start[row_base + left]
        counts = self.start[row_base + high[:, 0][query] + 1] - first
        entry = np.repeat(first - _exclusive_cumsum(counts), counts) + np.arange(int(counts.sum()))
        # a box filed under several cells of the window is kept at its first cell only: its own
        # first row (column) or the window's first row (column), whichever comes later; a
        # window's cells start at its first column, so "inner column <= it" means "at it"
        once = ((self.entry_inner_column[entry] <= np.repeat(left, counts))
                & (self.entry_topmost[entry] | np.repeat(offset == 0, counts)))
        return np.repeat(query, counts)[once], self.entry_box[entry[once]]


def cell_index(boxes: np.ndarray) -> CellIndex:
    n = len(boxes)
    origin = boxes[:, :2].min(axis=0)
    extent = boxes[:, 2:].max(axis=0) - origin
    area = float(extent[0] * extent[1])
    floor = np.sqrt(area / n) / 4 if area > 0 else extent.max() / n
    size = np.maximum(np.median(boxes[:, 2:] - boxes[:, :2], axis=0), floor)
    if not (size > 0).all():
        size = np.ones(2)
    while True:
        low = np.floor((boxes[:, :2] - origin) / size).astype(np.int64)
        high = np.floor((boxes[:, 2:] - origin) / size).astype(np.int64)
        spans = high - low + 1
        cells = np.prod(high.max(axis=0) + 1)
        if (spans[:, 0] * spans[:, 1]).sum() <= ENTRIES_PER_BOX * n + 64 and cells <= 4 * n + 64:
            break
        size = size * 2
    shape = high.max(axis=0) + 1
    per_box = spans[:, 0] * spans[:, 1]
    entry_box = np.repeat(np.arange(n), per_box)
    within = _positions_within(per_box)
    column_in_box, row_in_box = within % spans[entry_box, 0], within // spans[entry_box, 0]
    cell_id = ((low[entry_box, 1] + row_in_box) * shape[0] + low[entry_box, 0] + column_in_box)
    order = np.argsort(cell_id, kind="stable")
    start = np.searchsorted(cell_id[order], np.arange(int(shape[0] * shape[1]) + 1))
    inner_column = np.where(column_in_box == 0, -1, low[entry_box, 0] + column_in_box)
    return CellIndex(origin, size, shape, low, high, start, entry_box[order],
                     inner_column[order], (row_in_box == 0)[order])


def _exclusive_cumsum(counts: np.ndarray) -> np.ndarray:
    out = np.zeros(len(counts), dtype=np.int64)
    np.cumsum(counts[:-1], out=out[1:])
    return out


def _positions_within(counts: np.ndarray) -> np.ndarray:
    """0, 1, ..., c-1 for each count c, concatenated."""
    total = int(counts.sum())
    return np.arange(total) - np.repeat(_exclusive_cumsum(counts), counts)


def order_within_groups(group: np.ndarray, keys: tuple[np.ndarray, ...]) -> np.ndarray:
    """Permutation sorting entries by ``group`` (already ascending), then by ``keys`` in turn.

    Same result as ``np.lexsort((*reversed(keys), group))``; each group is sorted as one row of
    a padded matrix, rows bucketed by group size so padding at most doubles the work (a flat
    lexsort over millions of entries costs about ten times more).
    """
    if not len(group):
        return np.zeros(0, dtype=np.int64)
    starts = np.flatnonzero(np.r_[True, group[1:] != group[:-1]])
    sizes = np.diff(np.r_[starts, len(group)])
    width_class = np.ceil(np.log2(sizes)).astype(np.int64)
    order = np.empty(len(group), dtype=np.int64)
    for cls in np.unique(width_class):
        rows = np.flatnonzero(width_class == cls)
        width = 1 << int(cls)
        cols = np.arange(width)
        member = cols[None, :] < sizes[rows, None]
        source = np.where(member, starts[rows, None] + cols[None, :], 0)
        padded = [np.where(member, key[source], np.inf) for key in keys]
        within = np.lexsort((*reversed(padded), ~member), axis=-1)   # padding sorts last
        ranked = np.take_along_axis(source, within, axis=1)
        slots = starts[rows, None] + cols[None, :]
        order[slots[member]] = ranked[member]
    return order


def group_minima(group: np.ndarray, keys: tuple[np.ndarray, ...], groups: int) -> np.ndarray:
    """For each group present, the entry that sorts first by ``keys`` in turn (first index on a
    full tie), in ascending group order: the head of each group of :func:`order_within_groups`
    without sorting, one pass of ``np.minimum.at`` per key over the entries still tied."""
    alive = np.arange(len(group))
    for key in keys:
        low = np.full(groups, np.inf)
        np.minimum.at(low, group[alive], key[alive])
        alive = alive[key[alive] == low[group[alive]]]
    order = np.argsort(group[alive], kind="stable")
    alive, heads = alive[order], group[alive][order]
    return alive[np.r_[True, heads[1:] != heads[:-1]]] if len(alive) else alive
