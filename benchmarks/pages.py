"""Dense text-like pages of any size for timing the graph builders.

Lines of words with varied widths, small vertical jitter and ragged line ends, on a page whose
height grows with the number of words (a long statement or a spreadsheet-like sheet).
"""

from __future__ import annotations

import numpy as np

from dochar.data.word_table import Page

LINE_WIDTH = 1200.0
LINE_PITCH = 14.0
WORD_HEIGHT = 10.0


def text_page(words: int, seed: int = 0) -> Page:
    rng = np.random.default_rng(seed)
    width = rng.uniform(12, 80, words)
    gap = rng.uniform(4, 10, words)
    advance = width + gap
    # break lines where the running width passes the line width
    line = np.floor(np.cumsum(advance) / LINE_WIDTH).astype(np.int64)
    line_start = np.r_[0.0, np.cumsum(advance)[:-1]]
    first = np.r_[0, np.flatnonzero(np.diff(line)) + 1]
    x0 = 40 + line_start - np.repeat(line_start[first], np.diff(np.r_[first, words]))
    y0 = 40 + line * LINE_PITCH + rng.uniform(-1.5, 1.5, words)
    height = WORD_HEIGHT + rng.uniform(-2, 2, words)
    boxes = np.column_stack([x0, y0, x0 + width, y0 + height])
    page_height = float(boxes[:, 3].max() + 40)
    return Page("bench", 1, rng.permutation(words).astype(np.int64),
                [f"w{i}" for i in range(words)], boxes, LINE_WIDTH + 200, page_height)
