"""One printed line of a table is an item or a sub-item, never half of each.

A receipt prints a set menu's parts under the set (``menu.sub_nm``, ``menu.sub_cnt``,
``menu.sub_price`` under ``menu.nm`` ...): a sub-item line carries the same columns as an item
line, and a node classifier labels each cell alone, so one line can come out as a sub-item name
beside an item price and count. The record shape's ``sub_item_columns`` (sub-item column -> the
item column it stands for) lets decoding settle each line as a whole: the cells whose best label
is one of those columns are cut into line bands (the record rows' rule: centres within half the
median cell height, measured square to the page's text slope), and each band takes the reading,
item or sub-item, with the larger product of its cells' probabilities (the joint most likely
reading when cells are independent given the network). A cell keeps its column; its label
becomes that column's item or sub-item form, with the probability of both forms together.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from dochar.records.rows import line_bands, levels, page_slope
from dochar.records.shape import RecordShape

FLOOR = 1e-12   # log of a zero probability


def column_pairs(shape: RecordShape | None, labels: Sequence[str]) -> np.ndarray:
    """(k, 2) class indices: each sub-item column and its item column that ``labels`` hold."""
    names = {label: i for i, label in enumerate(labels)}
    pairs = [(names[sub], names[item]) for sub, item in (shape.sub_item_columns if shape else ())
             if sub in names and item in names]
    return np.array(pairs, dtype=np.int64).reshape(-1, 2)


def settle_lines(boxes: np.ndarray, probabilities: np.ndarray, pairs: np.ndarray) -> np.ndarray:
    """One page's node probabilities (n, classes) with each line band's cells all read as items
    or all as sub-items (module docstring); ``boxes`` (n, 4) are the nodes' boxes."""
    given = np.asarray(probabilities)
    settled = given.astype(np.float64)
    best = settled.argmax(axis=1) if settled.size else np.zeros(0, dtype=np.int64)
    column = np.full(len(settled), -1)
    for k, (sub, item) in enumerate(pairs):
        column[(best == sub) | (best == item)] = k
    cells = np.flatnonzero(column >= 0)
    if not len(cells):
        return given.copy()
    boxes = np.asarray(boxes, dtype=np.float64).reshape(-1, 4)
    height = float(np.median(boxes[cells, 3] - boxes[cells, 1]))
    for band in line_bands(levels(boxes[cells], page_slope(boxes)), height):
        rows = cells[band]
        chosen = pairs[column[rows]]                    # (cells, 2): sub, item class
        both = settled[rows[:, None], chosen]
        as_sub, as_item = np.log(np.maximum(both, FLOOR)).sum(axis=0)
        keep = 0 if as_sub > as_item else 1
        settled[rows, chosen[:, keep]] = np.minimum(both.sum(axis=1), 1.0)   # float32 rounding
        settled[rows, chosen[:, 1 - keep]] = 0.0
    return settled.astype(given.dtype)


def settle_pages(pages: Sequence, probabilities: Sequence[np.ndarray], labels: Sequence[str],
                 shape: RecordShape | None) -> list[np.ndarray]:
    """:func:`settle_lines` on every page (node pages with ``boxes``); the probabilities as
    given when the shape names no sub-item columns among ``labels``."""
    pairs = column_pairs(shape, labels)
    if not len(pairs):
        return list(probabilities)
    return [settle_lines(page.boxes, found, pairs) for page, found in zip(pages, probabilities)]
