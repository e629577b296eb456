"""Layout features of each word box, scaled by its own page so pages of any size compare.

Repairs, applied so every value is finite:

* boxes are clipped to the page (the word table allows a small overhang for scanner rounding);
* a width or height below a thousandth of the page side (zero-area or hairline boxes, e.g.
  empty words) is raised to that floor wherever it is divided by or logged (aspect, relative
  size); the plain width/height/area columns keep the clipped value, so 0 stays 0;
* the page's median word height is taken over boxes above the floor; with none it is the floor;
* extents of the text block and ranks use all words; a single-word page gets ranks of 0.5.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from dochar.data.word_table import Page

GEOMETRY_NAMES: tuple[str, ...] = (
    "x0", "y0", "x1", "y1",            # box corners / page size
    "width", "height",                 # box size / page size
    "cx", "cy",                        # box centre / page size
    "log_aspect",                      # log(width / height) in page units, clipped to +-LOG_CLIP
    "sqrt_area",                       # sqrt(width * height) of the normalised box
    "gap_right", "gap_bottom",         # 1 - x1, 1 - y1: distance to the right and bottom edges
    "block_x", "block_y",              # centre within the bounding box of all words on the page
    "rank_x", "rank_y",                # centre's rank among the page's words, scaled to [0, 1]
    "log_rel_height",                  # log(height / median word height), clipped
    "log_rel_width",                   # log(width / median word height), clipped
)
SIZE_FLOOR = 1e-3   # fraction of the page side below which a box side counts as degenerate
LOG_CLIP = 6.0      # |log ratio| cap: e^6 ~ 400, past any real word shape


def _scaled_ranks(values: np.ndarray, page: np.ndarray, starts: np.ndarray) -> np.ndarray:
    """Average ranks within each page (ties share) mapped to [0, 1]; a page's one word sits in
    the middle. The same numbers as ``(scipy.stats.rankdata(v) - 1) / (n - 1)`` on each page's
    values ``v``, all pages in one sort."""
    n = np.diff(starts)[page]                                  # words on each word's page
    order = np.lexsort((values, page))
    ordered, ordered_page = values[order], page[order]
    run = np.r_[True, (ordered[1:] != ordered[:-1]) | (ordered_page[1:] != ordered_page[:-1])]
    heads = np.flatnonzero(run)
    counts = np.diff(np.r_[heads, len(values)])
    ranks = np.empty(len(values))
    # 0-based average rank within the page
    ranks[order] = np.repeat(heads - starts[ordered_page[heads]] + (counts - 1) / 2.0, counts)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(n < 2, 0.5, ranks / (n - 1.0))


def geometry_features(page: Page) -> np.ndarray:
    """(n_words, len(GEOMETRY_NAMES)) float32 geometry block for one page."""
    return geometry_features_of_pages([page])


def geometry_features_of_pages(pages: Sequence[Page]) -> np.ndarray:
    """The geometry blocks of pages laid end to end: one row per word, each page scaled by its
    own size and words (the same numbers as page by page), every column in one pass."""
    pages = [page for page in pages if len(page)]
    if not pages:
        return np.zeros((0, len(GEOMETRY_NAMES)), dtype=np.float32)
    sizes = np.array([len(page) for page in pages])
    starts = np.r_[0, np.cumsum(sizes)]
    heads = starts[:-1]
    page = np.repeat(np.arange(len(pages)), sizes)
    width = np.repeat(np.array([float(p.width) for p in pages]), sizes)
    height = np.repeat(np.array([float(p.height) for p in pages]), sizes)
    boxes = np.concatenate([np.asarray(p.boxes, dtype=np.float64).reshape(-1, 4) for p in pages])
    x0 = np.clip(boxes[:, 0], 0.0, width)
    x1 = np.clip(boxes[:, 2], 0.0, width)
    y0 = np.clip(boxes[:, 1], 0.0, height)
    y1 = np.clip(boxes[:, 3], 0.0, height)
    box_w, box_h = x1 - x0, y1 - y0
    floor_w, floor_h = SIZE_FLOOR * width, SIZE_FLOOR * height
    safe_w, safe_h = np.maximum(box_w, floor_w), np.maximum(box_h, floor_h)
    median_h = _median_above_floor(box_h, floor_h, page, len(pages))[page]
    cx, cy = (x0 + x1) / 2.0, (y0 + y1) / 2.0
    left, top = np.minimum.reduceat(x0, heads)[page], np.minimum.reduceat(y0, heads)[page]
    block_w = np.maximum(np.maximum.reduceat(x1, heads)[page] - left, floor_w)
    block_h = np.maximum(np.maximum.reduceat(y1, heads)[page] - top, floor_h)
    nw, nh = box_w / width, box_h / height
    columns = [
        x0 / width, y0 / height, x1 / width, y1 / height,
        nw, nh,
        cx / width, cy / height,
        np.clip(np.log(safe_w / safe_h), -LOG_CLIP, LOG_CLIP),
        np.sqrt(nw * nh),
        1.0 - x1 / width, 1.0 - y1 / height,
        (cx - left) / block_w, (cy - top) / block_h,
        _scaled_ranks(cx, page, starts), _scaled_ranks(cy, page, starts),
        np.clip(np.log(safe_h / median_h), -LOG_CLIP, LOG_CLIP),
        np.clip(np.log(safe_w / median_h), -LOG_CLIP, LOG_CLIP),
    ]
    return np.column_stack(columns).astype(np.float32)


def _median_above_floor(heights: np.ndarray, floor: np.ndarray, page: np.ndarray,
                        pages: int) -> np.ndarray:
    """Per page, ``np.median`` of the heights above the floor (the middle value, or the mean of
    the two middle ones); the page's floor when none is."""
    real = heights > floor
    kept, kept_page = heights[real], page[real]
    order = np.lexsort((kept, kept_page))
    kept = kept[order]
    counts = np.bincount(kept_page, minlength=pages)
    first = np.r_[0, np.cumsum(counts)[:-1]]
    page_floor = np.zeros(pages)
    page_floor[page] = floor
    lower = kept[np.minimum(first + (counts - 1) // 2, max(len(kept) - 1, 0))] if len(kept) \
        else np.zeros(pages)
    upper = kept[np.minimum(first + counts // 2, max(len(kept) - 1, 0))] if len(kept) \
        else np.zeros(pages)
    middle = np.where(counts % 2 == 1, lower, (lower + upper) / 2)
    return np.where(counts > 0, middle, page_floor)
