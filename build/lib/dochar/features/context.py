"""What surrounds a node: the text line it sits in, and the words a segment is made of.

* **Line context** (``line_context: true``): each node's line is its reading-order line cut at
  wide gaps (:func:`dochar.data.word_table.line_segments`, the same lines the segment task
  finds). Columns: the line's word count (log1p, /log 33), the node's position in it (0 first,
  1 last; 0.5 alone), first / last flags, the line's width and left edge over the page width,
  whether the line's last word ends with a colon, whether a word before this one in the line
  does, and whether the node is the line's only word. On forms, a colon to the left says
  "answer", a colon at the line's end says "question" (common practice in form reading).
* **Word pooling** (``pool_words: [mean, max]``): a segment page's node gets the mean / max of
  its words' own feature rows, so what a word-level model sees is not lost by joining the words.
  On a page of words each word pools over itself.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from dochar.data.word_table import Page, line_segments

LINE_CONTEXT_NAMES: tuple[str, ...] = (
    "line_words", "line_position", "line_first", "line_last", "line_width", "line_left",
    "line_ends_with_colon", "colon_before", "line_alone",
)
POOLINGS = ("mean", "max")
_WORDS_SCALE = math.log1p(32)


def line_of_each(page: Page) -> np.ndarray:
    return line_segments(page.boxes, page.word_ids)


def line_context_features(page: Page) -> np.ndarray:
    n = len(page)
    out = np.zeros((n, len(LINE_CONTEXT_NAMES)), dtype=np.float32)
    if n == 0:
        return out
    line = line_of_each(page)
    colon = np.array([t.rstrip().endswith(":") for t in page.texts])
    centre_x = (page.boxes[:, 0] + page.boxes[:, 2]) / 2
    for members in _groups(line):
        members = members[np.lexsort((page.word_ids[members], centre_x[members]))]
        size = len(members)
        position = np.arange(size) / (size - 1) if size > 1 else np.full(1, 0.5)
        left, right = page.boxes[members, 0].min(), page.boxes[members, 2].max()
        before = np.concatenate([[False], np.cumsum(colon[members])[:-1] > 0])
        out[members] = np.column_stack([
            np.full(size, math.log1p(size) / _WORDS_SCALE), position,
            np.arange(size) == 0, np.arange(size) == size - 1,
            np.full(size, (right - left) / page.width), np.full(size, left / page.width),
            np.full(size, colon[members[-1]]), before, np.full(size, size == 1),
        ])
    return out


def line_texts(page: Page) -> list[str]:
    """The joined text of each node's line, left to right (for a line-level text embedding)."""
    line = line_of_each(page)
    centre_x = (page.boxes[:, 0] + page.boxes[:, 2]) / 2
    texts = [""] * len(page)
    for members in _groups(line):
        members = members[np.lexsort((page.word_ids[members], centre_x[members]))]
        joined = " ".join(page.texts[i] for i in members)
        for i in members:
            texts[i] = joined
    return texts


def pool_members(rows: np.ndarray, members: Sequence[np.ndarray], how: Sequence[str]
                 ) -> np.ndarray:
    """(len(members), d * len(how)): per segment, the mean and/or max of its words' rows."""
    blocks = []
    for name in how:
        reduce = np.mean if name == "mean" else np.max
        blocks.append(np.stack([reduce(rows[m], axis=0) for m in members])
                      if len(members) else np.zeros((0, rows.shape[1]), np.float32))
    return np.concatenate(blocks, axis=1).astype(np.float32)


def _groups(ids: np.ndarray) -> list[np.ndarray]:
    order = np.argsort(ids, kind="stable")
    cuts = np.flatnonzero(np.diff(ids[order])) + 1
    return np.split(order, cuts)
