"""The grid of :mod:`dochar.graphs.cells` for many pages at once: each page keeps its own grid
(cell size, origin, shape by the same rule as a page alone), the grids are numbered one after
the other, and every window stays inside its own page's grid. A search over all pages then runs
its rounds once for the whole set instead of once per page, with the same answer per page.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from dochar.graphs.cells import ENTRIES_PER_BOX, SAFETY, _exclusive_cumsum, _positions_within


@dataclass(frozen=True)
class StackedCells:
    size: np.ndarray      # (pages, 2) width and height of a page's cells
    shape: np.ndarray     # (pages, 2) columns, rows of a page's grid
    first_cell: np.ndarray   # (pages,) number of the page's first cell
    page: np.ndarray      # (n,) page of each box
    low: np.ndarray       # (n, 2) int64 cell of each box's (x0, y0), within its page's grid
    high: np.ndarray      # (n, 2) int64 cell of each box's (x1, y1)
    start: np.ndarray     # (cells + 1,) first entry of each cell
    entry_box: np.ndarray
    entry_inner_column: np.ndarray   # column of each entry's cell in its page's grid, or -1
                                     # in its box's first column (``CellIndex``)
    entry_topmost: np.ndarray

    def first_reach(self, boxes: np.ndarray, cells: float) -> np.ndarray:
        """``cells`` times the smaller cell side of each box's page (``CellIndex.first_reach``)."""
        return cells * self.size[self.page[boxes]].min(axis=1)

    def _margin(self, boxes: np.ndarray, reach: np.ndarray) -> np.ndarray:
        return np.ceil(reach[:, None] / self.size[self.page[boxes]]).astype(np.int64)

    def window(self, boxes: np.ndarray, reach: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Cells within each box's ``reach`` of its own cells, clipped to its page's grid."""
        margin = self._margin(boxes, reach)
        return (np.maximum(self.low[boxes] - margin, 0),
                np.minimum(self.high[boxes] + margin, self.shape[self.page[boxes]] - 1))

    def covers_grid(self, boxes: np.ndarray, low: np.ndarray, high: np.ndarray) -> np.ndarray:
        return (low == 0).all(axis=1) & (high == self.shape[self.page[boxes]] - 1).all(axis=1)

    def gap_bound2(self, boxes: np.ndarray, reach: np.ndarray) -> np.ndarray:
        """Every box of the page outside a box's ``reach`` window has a squared gap above this."""
        side = (self._margin(boxes, reach) - SAFETY) * self.size[self.page[boxes]]
        return side.min(axis=1) ** 2

    def boxes_in(self, boxes: np.ndarray, low: np.ndarray, high: np.ndarray
                 ) -> tuple[np.ndarray, np.ndarray]:
        """Pairs (query position, box) for every box meeting each query box's window, each box
        once, grouped by query position in ascending order (``CellIndex.boxes_in``)."""
        page = self.page[boxes]
        rows_each = high[:, 1] - low[:, 1] + 1
        query = np.repeat(np.arange(len(low)), rows_each)       # one per window row
        offset = _positions_within(rows_each)
        left = low[:, 0][query]
        row_base = (np.repeat(self.first_cell[page], rows_each)
                    + (np.repeat(low[:, 1], rows_each) + offset)
                    * np.repeat(self.shape[page, 0], rows_each))
        first = self.start[row_base + left]
        counts = self.start[row_base + high[:, 0][query] + 1] - first
        entry = np.repeat(first - _exclusive_cumsum(counts), counts) + np.arange(int(counts.sum()))
        once = ((self.entry_inner_column[entry] <= np.repeat(left, counts))
                & (self.entry_topmost[entry] | np.repeat(offset == 0, counts)))
        return np.repeat(query, counts)[once], self.entry_box[entry[once]]


def stacked_cells(boxes: np.ndarray, starts: np.ndarray) -> StackedCells:
    """The grids of pages laid end to end (page p: boxes ``starts[p]`` to ``starts[p+1] - 1``,
    every page holding a box), each sized as :func:`dochar.graphs.cells.cell_index` sizes a
    page alone."""
    counts = np.diff(starts)
    page = np.repeat(np.arange(len(counts)), counts)
    heads = starts[:-1]
    origin = np.minimum.reduceat(boxes[:, :2], heads, axis=0)
    extent = np.maximum.reduceat(boxes[:, 2:], heads, axis=0) - origin
    area = extent[:, 0] * extent[:, 1]
    with np.errstate(divide="ignore", invalid="ignore"):
        floor = np.where(area > 0, np.sqrt(area / counts) / 4, extent.max(axis=1) / counts)
    size = np.maximum(_medians(boxes[:, 2:] - boxes[:, :2], page, starts), floor[:, None])
    size[~(size > 0).all(axis=1)] = 1.0
    while True:
        low = np.floor((boxes[:, :2] - origin[page]) / size[page]).astype(np.int64)
        high = np.floor((boxes[:, 2:] - origin[page]) / size[page]).astype(np.int64)
        spans = high - low + 1
        cells = np.prod(np.maximum.reduceat(high, heads, axis=0) + 1, axis=1)
        crowded = ((np.add.reduceat(spans[:, 0] * spans[:, 1], heads) > ENTRIES_PER_BOX * counts
                    + 64) | (cells > 4 * counts + 64))
        if not crowded.any():
            break
        size[crowded] *= 2
    shape = np.maximum.reduceat(high, heads, axis=0) + 1
    first_cell = _exclusive_cumsum(shape[:, 0] * shape[:, 1])
    per_box = spans[:, 0] * spans[:, 1]
    entry_box = np.repeat(np.arange(len(boxes)), per_box)
    within = _positions_within(per_box)
    entry_page = page[entry_box]
    column_in_box, row_in_box = within % spans[entry_box, 0], within // spans[entry_box, 0]
    column = low[entry_box, 0] + column_in_box
    cell_id = (first_cell[entry_page] + (low[entry_box, 1] + row_in_box) * shape[entry_page, 0]
               + column)
    order = np.argsort(cell_id, kind="stable")
    total = int(first_cell[-1] + shape[-1, 0] * shape[-1, 1]) if len(counts) else 0
    start = np.searchsorted(cell_id[order], np.arange(total + 1))
    inner_column = np.where(column_in_box == 0, -1, column)
    return StackedCells(size, shape, first_cell, page, low, high, start, entry_box[order],
                        inner_column[order], (row_in_box == 0)[order])


def _medians(values: np.ndarray, page: np.ndarray, starts: np.ndarray) -> np.ndarray:
    """Per page, the median of each column (``np.median``'s: the middle value, or the mean of
    the two middle values)."""
    counts = np.diff(starts)
    out = np.empty((len(counts), values.shape[1]))
    for axis in range(values.shape[1]):
        ordered = values[np.lexsort((values[:, axis], page)), axis]
        lower = ordered[starts[:-1] + (counts - 1) // 2]
        upper = ordered[starts[:-1] + counts // 2]
        out[:, axis] = np.where(counts % 2 == 1, lower, (lower + upper) / 2)
    return out
