"""The k nearest words of every word of small pages, by ranking all pairs of a page, compiled.

On a form-sized page every pair costs less than any index; compiled, the pair table is never
built (a NumPy version materialised it and spent more on the sorting than on the distances).
For each target word of a page:

1. the squared box gap to every word of its page;
2. the ``take``-th smallest of those gaps (a sorted list of ``take`` values, one pass);
3. the words at or below that gap, ranked by (squared gap, squared centre distance, rank), so
   ties at the cut are decided as :mod:`dochar.graphs.knn` decides them; the first ``take``
   are kept.

The keys are the same floating-point operations, in the same order, as
:meth:`dochar.graphs.geometry.PageGeometry.pair_keys`, and Numba compiles without fast-math (no
fused multiply-add, no reassociation), so the answer equals the grid search's bit for bit (the
graph tests compare both with a brute-force reference). Compiled once per machine and cached
beside this file (``cache=True``).
"""

from __future__ import annotations

import numba
import numpy as np


@numba.njit(cache=True)
def nearest_by_all_pairs(boxes: np.ndarray, centres: np.ndarray, rank: np.ndarray,
                         starts: np.ndarray, take: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(sources, targets) of the ``take[p]`` nearest words of every word of page p (words
    ``starts[p]`` to ``starts[p + 1] - 1``; ``1 <= take[p] < `` its word count), each target's
    sources nearest first."""
    pages = len(starts) - 1
    total, widest = 0, 1
    for p in range(pages):
        total += take[p] * (starts[p + 1] - starts[p])
        widest = max(widest, starts[p + 1] - starts[p])
    sources = np.empty(total, np.int64)
    targets = np.empty(total, np.int64)
    x0, y0 = boxes[:, 0].copy(), boxes[:, 1].copy()
    x1, y1 = boxes[:, 2].copy(), boxes[:, 3].copy()
    gap2 = np.empty(widest)
    kept_gap2, kept_centre2 = np.empty(widest), np.empty(widest)
    kept_rank, kept_word = np.empty(widest, np.int64), np.empty(widest, np.int64)
    smallest = np.empty(max(1, take.max()))
    out = 0
    for p in range(pages):
        first, words, k = starts[p], starts[p + 1] - starts[p], take[p]
        for t in range(first, first + words):
            for j in range(words):
                s = first + j
                gap_x = max(max(x0[s] - x1[t], x0[t] - x1[s]), 0.0)
                gap_y = max(max(y0[s] - y1[t], y0[t] - y1[s]), 0.0)
                square_x = gap_x * gap_x
                square_y = gap_y * gap_y
                gap2[j] = square_x + square_y
            gap2[t - first] = np.inf                     # a word is not its own neighbour
            smallest[:k] = np.inf
            for j in range(words):
                value = gap2[j]
                if value < smallest[k - 1]:
                    i = k - 1
                    while i > 0 and smallest[i - 1] > value:
                        smallest[i] = smallest[i - 1]
                        i -= 1
                    smallest[i] = value
            cut, found = smallest[k - 1], 0
            for j in range(words):
                if gap2[j] > cut:
                    continue
                s = first + j
                dx, dy = centres[s, 0] - centres[t, 0], centres[s, 1] - centres[t, 1]
                g, c, r = gap2[j], dx * dx + dy * dy, rank[s]
                i = found
                while i > 0 and (g < kept_gap2[i - 1] or (g == kept_gap2[i - 1] and (
                        c < kept_centre2[i - 1] or (c == kept_centre2[i - 1]
                                                    and r < kept_rank[i - 1])))):
                    kept_gap2[i], kept_centre2[i] = kept_gap2[i - 1], kept_centre2[i - 1]
                    kept_rank[i], kept_word[i] = kept_rank[i - 1], kept_word[i - 1]
                    i -= 1
                kept_gap2[i], kept_centre2[i], kept_rank[i], kept_word[i] = g, c, r, s
                found += 1
            for j in range(k):
                sources[out], targets[out] = kept_word[j], t
                out += 1
    return sources, targets
