"""Whitespace gutters between text columns, and the edges that jump across them.

A gutter is an empty rectangle (no word box meets its interior) inside the text area (the hull
of all boxes), at least ``min_width`` wide and ``min_height`` tall: the white corridor between
columns. They are found with the branch-and-bound maximal-whitespace search of T. M. Breuel,
"Two Geometric Algorithms for Layout Analysis", DAS 2002: pop the bound of greatest quality
(here its height, so the tallest gutters come first), and if some box meets it, split it into
the four parts left, right, above and below that box. A gutter once found becomes an obstacle
itself, so the gutters returned do not overlap. An edge crosses a gutter when the segment
between the two word centres meets the gutter's interior.
"""

from __future__ import annotations

import heapq
import itertools

import numpy as np


def _meets(rects: np.ndarray, bound: tuple[float, float, float, float]) -> np.ndarray:
    """Which rectangles (k, 4) meet the open interior of ``bound``."""
    x0, y0, x1, y1 = bound
    return ((rects[:, 0] < x1) & (rects[:, 2] > x0) & (rects[:, 1] < y1) & (rects[:, 3] > y0))


def find_gutters(boxes: np.ndarray, min_width: float, min_height: float) -> np.ndarray:
    """Non-overlapping empty rectangles (g, 4) as x0, y0, x1, y1, tallest first."""
    boxes = np.unique(np.asarray(boxes, dtype=np.float64).reshape(-1, 4), axis=0)
    if len(boxes) < 2:
        return np.zeros((0, 4))
    area = (boxes[:, 0].min(), boxes[:, 1].min(), boxes[:, 2].max(), boxes[:, 3].max())
    found: list[tuple[float, float, float, float]] = []

    def push(heap: list, bound: tuple[float, float, float, float], inside: np.ndarray) -> None:
        width, height = bound[2] - bound[0], bound[3] - bound[1]
        if width >= min_width and height >= min_height:
            heapq.heappush(heap, (-height, -width, bound, next(tick), inside))

    heap: list = []
    tick = itertools.count()
    seen: set[tuple[float, float, float, float]] = set()
    push(heap, area, np.arange(len(boxes)))
    while heap:
        _, _, bound, _, inside = heapq.heappop(heap)
        if bound in seen:
            continue
        seen.add(bound)
        inside = inside[_meets(boxes[inside], bound)]
        rects = boxes[inside]
        if found:
            earlier = np.array(found)
            rects = np.concatenate([rects, earlier[_meets(earlier, bound)]])
        if not len(rects):
            found.append(bound)
            continue
        middle = np.array([(bound[0] + bound[2]) / 2, (bound[1] + bound[3]) / 2])
        centres = (rects[:, :2] + rects[:, 2:]) / 2
        px0, py0, px1, py1 = rects[np.argmin(((centres - middle) ** 2).sum(axis=1))]
        bx0, by0, bx1, by1 = bound
        for part in ((bx0, by0, px0, by1), (px1, by0, bx1, by1),
                     (bx0, by0, bx1, py0), (bx0, py1, bx1, by1)):
            push(heap, part, inside)
    return np.array(found, dtype=np.float64).reshape(-1, 4)


def crossing(start: np.ndarray, end: np.ndarray, gutters: np.ndarray) -> np.ndarray:
    """Which segments ``start -> end`` (E, 2) meet the open interior of any gutter.

    Liang-Barsky clipping against each open rectangle: the segment is inside on the parameter
    interval where both coordinates are strictly within bounds; it crosses if that is non-empty.
    """
    hit = np.zeros(len(start), dtype=bool)
    if not len(start):
        return hit
    delta = end - start
    for g in gutters:
        lo, hi = np.zeros(len(start)), np.ones(len(start))
        for axis, (low, high) in enumerate(((g[0], g[2]), (g[1], g[3]))):
            p, d = start[:, axis], delta[:, axis]
            moving = d != 0
            with np.errstate(divide="ignore", invalid="ignore"):
                t_a, t_b = (low - p) / d, (high - p) / d
            enter = np.where(moving, np.minimum(t_a, t_b), np.where((p > low) & (p < high),
                                                                   -np.inf, np.inf))
            leave = np.where(moving, np.maximum(t_a, t_b), np.inf)
            lo, hi = np.maximum(lo, enter), np.minimum(hi, leave)
        hit |= lo < hi
    return hit
