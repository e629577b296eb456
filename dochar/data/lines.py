"""Lines and reading order of word boxes: dochar's one definition of both.

Every function takes the boxes of one page, or of many pages laid end to end with a ``page``
code per box (lines never cross pages; pages come out in ascending code), so a whole table is
grouped and ordered in one pass. The answer for a page is the same alone or among others.
"""

from __future__ import annotations

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

LINE_OVERLAP = 0.5   # share of the smaller height two words must overlap by to share a line
PAIR_CELLS = 2_000_000  # candidate word pairs compared at once when grouping lines


def _page_codes(n: int, page: np.ndarray | None) -> np.ndarray:
    if page is None:
        return np.zeros(n, dtype=np.int64)
    page = np.asarray(page)
    if page.shape != (n,):
        raise ValueError(f"page codes have shape {page.shape}, expected ({n},) for {n} boxes")
    return page


def line_ids(boxes: np.ndarray, page: np.ndarray | None = None) -> np.ndarray:
    """Line of each box: the connected components of "y-ranges overlap by at least half the
    smaller height" (a flat box joins a line its y lies within), so a skewed line holds together.
    Components are numbered in the order of their first box.

    Only pairs whose y-ranges meet can share a line, so each box is compared with the later
    boxes of its page (by top edge) whose top lies at or above its bottom, found by one merge of
    the tops with the bottoms, not with every word of its page.
    """
    boxes = np.asarray(boxes, dtype=np.float64).reshape(-1, 4)
    n = len(boxes)
    page = _page_codes(n, page)
    y0, y1 = boxes[:, 1], boxes[:, 3]
    height = y1 - y0
    order = np.lexsort((y0, page))                  # by page, then top edge
    # the sorted tops merged with the bottoms (a top before an equal bottom): the tops ahead of
    # a box's bottom are those of the earlier pages and of its own page at or above it
    merged = np.lexsort((np.r_[np.zeros(n), np.ones(n)], np.r_[y0[order], y1[order]],
                         np.r_[page[order], page[order]]))
    tops_so_far = np.cumsum(merged < n)
    position = np.empty(2 * n, dtype=np.int64)
    position[merged] = np.arange(2 * n)
    reach = tops_so_far[position[n:]]               # sorted boxes [0, reach) start above
    counts = np.maximum(reach - np.arange(n) - 1, 0)   # the later boxes of its page among them
    ends = np.cumsum(counts)
    rows, cols = [np.zeros(0, np.int64)], [np.zeros(0, np.int64)]
    first = 0
    while first < n:
        last = max(int(np.searchsorted(ends, (ends[first - 1] if first else 0) + PAIR_CELLS,
                                       side="right")), first + 1)
        block = np.arange(first, min(last, n))
        taken = counts[block]
        left = np.repeat(block, taken)
        right = left + 1 + (np.arange(int(taken.sum())) - np.repeat(np.cumsum(taken) - taken,
                                                                    taken))
        a, b = order[left], order[right]
        overlap = np.minimum(y1[a], y1[b]) - np.maximum(y0[a], y0[b])
        smaller = np.minimum(height[a], height[b])
        joined = (overlap >= 0) & (overlap >= LINE_OVERLAP * smaller)
        rows.append(a[joined])
        cols.append(b[joined])
        first = int(block[-1]) + 1
    r, c = np.concatenate(rows), np.concatenate(cols)
    graph = coo_matrix((np.ones(len(r), dtype=np.int8), (r, c)), shape=(n, n))
    return connected_components(graph, directed=False)[1]


def reading_order(boxes: np.ndarray, word_ids: np.ndarray | None = None,
                  page: np.ndarray | None = None) -> np.ndarray:
    """Positions of the boxes in reading order.

    Lines (:func:`line_ids`) are read top to bottom by the mean y of their word centres, words
    within a line left to right by centre x; remaining ties go to the smaller ``word_id`` (the
    position when none is given). Multi-column text is read across the columns, line by line
    (a known limit of this rule). With ``page`` codes, pages are read one after the other in
    ascending code.
    """
    boxes = np.asarray(boxes, dtype=np.float64).reshape(-1, 4)
    n = len(boxes)
    if n == 0:
        return np.zeros(0, dtype=np.int64)
    page = _page_codes(n, page)
    ids = np.arange(n) if word_ids is None else np.asarray(word_ids)
    rank = np.empty(n, dtype=np.int64)             # by word id within each page
    rank[np.lexsort((ids, page))] = np.arange(n)
    centre_x, centre_y = (boxes[:, 0] + boxes[:, 2]) / 2, (boxes[:, 1] + boxes[:, 3]) / 2
    line = line_ids(boxes, page)
    count = np.bincount(line)
    line_y = np.bincount(line, weights=centre_y) / count
    line_first = np.full(len(count), n, dtype=np.int64)
    np.minimum.at(line_first, line, rank)
    line_page = np.empty(len(count), dtype=page.dtype)
    line_page[line] = page
    line_pos = np.empty(len(count), np.int64)
    line_pos[np.lexsort((line_first, line_y, line_page))] = np.arange(len(count))
    return np.lexsort((rank, centre_x, line_pos[line]))


def line_segments(boxes: np.ndarray, word_ids: np.ndarray | None = None, *,
                  max_gap: float = 1.0) -> np.ndarray:
    """Segment id of each box of one page: a reading-order line cut wherever the horizontal gap
    between neighbouring words exceeds ``max_gap`` times the median word height of the page (an
    OCR engine's text lines stop at column gaps the same way). Ids follow reading order from 0.
    """
    boxes = np.asarray(boxes, dtype=np.float64).reshape(-1, 4)
    order = reading_order(boxes, word_ids)
    segment = np.zeros(len(boxes), dtype=np.int64)
    if len(order) < 2:
        return segment
    line = line_ids(boxes)[order]
    gap = boxes[order[1:], 0] - boxes[order[:-1], 2]
    height = float(np.median(boxes[:, 3] - boxes[:, 1]))
    cut = (line[1:] != line[:-1]) | (gap > max_gap * max(height, 1e-9))
    segment[order] = np.concatenate([[0], np.cumsum(cut)])
    return segment
