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


def _scaled_ranks(values: np.ndarray) -> np.ndarray:
    """Average ranks (ties share) mapped to [0, 1]; one word sits in the middle. The same
    numbers as ``(scipy.stats.rankdata(values) - 1) / (n - 1)``, without its per-call cost."""
    n = len(values)
    if n < 2:
        return np.full(n, 0.5)
    order = np.argsort(values, kind="stable")
    ordered = values[order]
    starts = np.flatnonzero(np.r_[True, ordered[1:] != ordered[:-1]])
    counts = np.diff(np.r_[starts, n])
    ranks = np.empty(n)
    ranks[order] = np.repeat(starts + (counts - 1) / 2.0, counts)   # 0-based average rank
    return ranks / (n - 1.0)


def geometry_features(page: Page) -> np.ndarray:
    """(n_words, len(GEOMETRY_NAMES)) float32 geometry block for one page."""
    width, height = float(page.width), float(page.height)
    n = len(page)
    if n == 0:
        return np.zeros((0, len(GEOMETRY_NAMES)), dtype=np.float32)
    boxes = np.asarray(page.boxes, dtype=np.float64)
    x0 = np.clip(boxes[:, 0], 0.0, width)
    x1 = np.clip(boxes[:, 2], 0.0, width)
    y0 = np.clip(boxes[:, 1], 0.0, height)
    y1 = np.clip(boxes[:, 3], 0.0, height)
    box_w, box_h = x1 - x0, y1 - y0
    floor_w, floor_h = SIZE_FLOOR * width, SIZE_FLOOR * height
    safe_w, safe_h = np.maximum(box_w, floor_w), np.maximum(box_h, floor_h)
    real_heights = box_h[box_h > floor_h]
    median_h = float(np.median(real_heights)) if len(real_heights) else floor_h
    cx, cy = (x0 + x1) / 2.0, (y0 + y1) / 2.0
    block_w = max(float(x1.max() - x0.min()), floor_w)
    block_h = max(float(y1.max() - y0.min()), floor_h)
    nw, nh = box_w / width, box_h / height
    columns = [
        x0 / width, y0 / height, x1 / width, y1 / height,
        nw, nh,
        cx / width, cy / height,
        np.clip(np.log(safe_w / safe_h), -LOG_CLIP, LOG_CLIP),
        np.sqrt(nw * nh),
        1.0 - x1 / width, 1.0 - y1 / height,
        (cx - x0.min()) / block_w, (cy - y0.min()) / block_h,
        _scaled_ranks(cx), _scaled_ranks(cy),
        np.clip(np.log(safe_h / median_h), -LOG_CLIP, LOG_CLIP),
        np.clip(np.log(safe_w / median_h), -LOG_CLIP, LOG_CLIP),
    ]
    return np.column_stack(columns).astype(np.float32)
