"""Checked page geometry and the pairwise measures the builders rank neighbours by.

Ranking uses squared distances only (products and sums, no square roots), so a plain loop and
the vectorised code agree bit for bit and ties are real ties. Ties are broken by ``word_id``,
never by array position, which makes every builder invariant to the order words arrive in.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from dochar.data.word_table import Page, unusable_boxes
from dochar.graphs.base import GraphBuilderError

PAIR_BUDGET = 2_000_000  # target x source cells held at once when ranking neighbours


@dataclass(frozen=True)
class PageGeometry:
    boxes: np.ndarray     # (n, 4) float64, validated
    centres: np.ndarray   # (n, 2)
    rank: np.ndarray      # (n,) int64: position of each word in word_id order
    diagonal: float

    @cached_property
    def box_columns(self) -> np.ndarray:
        """(4, n) contiguous x0, y0, x1, y1: pairs gather from these, not from strided rows."""
        return np.ascontiguousarray(self.boxes.T)

    @cached_property
    def centre_columns(self) -> np.ndarray:
        return np.ascontiguousarray(self.centres.T)

    @property
    def n(self) -> int:
        return len(self.boxes)

    def pair_keys(self, target: np.ndarray, source: np.ndarray
                  ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Per (target, source) pair: squared box gap, squared centre distance, centre offset.

        The same products and sums as a plain loop over the pair, so the ranking keys match it
        bit for bit. ``target`` and ``source`` may broadcast ((n, 1) against (1, m): a matrix).
        """
        x0, y0, x1, y1 = self.box_columns
        (cx, cy), gaps = self.centre_columns, []
        for low, high in ((x0, x1), (y0, y1)):
            gap = low[source] - high[target]
            np.maximum(gap, low[target] - high[source], out=gap)
            np.maximum(gap, 0.0, out=gap)
            gaps.append(np.multiply(gap, gap, out=gap))
        dx, dy = cx[source] - cx[target], cy[source] - cy[target]
        # few, reused buffers: a fresh large array costs page faults, more than the arithmetic
        return np.add(*gaps, out=gaps[0]), dx * dx + dy * dy, dx, dy


def row_blocks(n: int, budget: int = PAIR_BUDGET) -> Iterator[slice]:
    """Slices of target rows so that rows x n stays within ``budget`` cells."""
    step = max(1, budget // max(n, 1))
    for start in range(0, n, step):
        yield slice(start, min(n, start + step))


def page_geometry(page: Page, builder: str) -> PageGeometry:
    """Validate the page's boxes once, with an error that names the page and the word."""
    n = len(page)
    boxes = np.asarray(page.boxes, dtype=np.float64)
    if boxes.size == 0 and n == 0:
        boxes = boxes.reshape(0, 4)
    where = f"graph builder '{builder}', page {page.key}"
    if boxes.shape != (n, 4):
        raise GraphBuilderError(f"{where}: boxes have shape {boxes.shape}, expected ({n}, 4) "
                                f"for {n} words")
    word_ids = np.asarray(page.word_ids)
    if word_ids.shape != (n,):
        raise GraphBuilderError(f"{where}: {word_ids.shape} word ids for {n} words")
    bad = unusable_boxes(boxes)
    if bad.any():
        first = int(np.flatnonzero(bad)[0])
        raise GraphBuilderError(f"{where}: word_id {word_ids[first]} has box {boxes[first]} "
                                f"(need finite x0 <= x1, y0 <= y1); {int(bad.sum())} such word(s)")
    rank = np.empty(n, dtype=np.int64)
    rank[np.argsort(word_ids, kind="stable")] = np.arange(n)
    centres = np.column_stack([(boxes[:, 0] + boxes[:, 2]) / 2, (boxes[:, 1] + boxes[:, 3]) / 2])
    return PageGeometry(boxes, centres, rank, float(np.hypot(page.width, page.height)))


def stacked_geometry(pages: Sequence[Page], builder: str) -> tuple[PageGeometry, np.ndarray]:
    """The geometry of pages laid end to end, and where each page starts (plus the total):
    boxes and centres as each page's own, ``rank`` by word id within each page (numbered across
    the pages, so it orders words of one page as the page's own rank does), no ``diagonal``
    (NaN: it belongs to a page). A bad box is reported as :func:`page_geometry` reports it."""
    sizes = [len(page) for page in pages]
    starts = np.concatenate([[0], np.cumsum(sizes, dtype=np.int64)])
    boxes = (np.concatenate([np.asarray(page.boxes, dtype=np.float64).reshape(-1, 4)
                             for page in pages]) if pages else np.zeros((0, 4)))
    word_ids = (np.concatenate([np.asarray(page.word_ids).reshape(-1) for page in pages])
                if pages else np.zeros(0, np.int64))
    if boxes.shape != (starts[-1], 4) or word_ids.shape != (starts[-1],) or \
            unusable_boxes(boxes).any():
        for page in pages:
            page_geometry(page, builder)           # raises, naming the page and the word
    page = np.repeat(np.arange(len(pages)), sizes)
    rank = np.empty(len(boxes), dtype=np.int64)
    rank[np.lexsort((word_ids, page))] = np.arange(len(boxes))
    centres = np.column_stack([(boxes[:, 0] + boxes[:, 2]) / 2, (boxes[:, 1] + boxes[:, 3]) / 2])
    return PageGeometry(boxes, centres, rank, float("nan")), starts
