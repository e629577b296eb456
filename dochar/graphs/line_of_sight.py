"""Words that see each other along a row or a column, with no box in between.

Two words see each other horizontally when

1. their boxes share a vertical band ``[lo, hi]`` = the overlap of their y-ranges, of positive
   height; a flat box (zero height) qualifies when it lies within the other's closed y-range,
   the band then being a line;
2. the corridor between them, ``(gap_lo, gap_hi) x [lo, hi]`` with ``gap_lo, gap_hi`` the facing
   box edges, meets no other box's interior (a blocker must overlap the band with positive
   length, or straddle it when the band is a line). Boxes that touch or overlap in x have an
   empty corridor and always see each other.

Vertical sight is the same rule with x and y swapped. The relation is symmetric; each pair gets
both directions, typed ``left``/``right`` (by the sign of the centre offset, 0 counting as
``right``) for horizontal sight and ``above``/``below`` for vertical sight; a pair that sees both
ways (overlapping boxes) is typed by the dominant axis.

Search: each word looks right through a window of grid cells (:mod:`dochar.graphs.cells`) over
its own y-range, reaching a distance ``d`` past its right edge. Partners starting within ``d`` are
decided inside the window, since all their possible blockers meet it. Words farther away are all
hidden once the boxes met so far cover the word's y-range (every band of positive height meets
one, a flat word's line is straddled) and no flat box lies beyond; otherwise ``d`` doubles.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from dochar.data.word_table import Page
from dochar.graphs.base import (ABOVE, BELOW, DIRECTIONS, LEFT, RIGHT, TypedEdges,
                                direction_codes, make_edges, no_edges)
from dochar.graphs.cells import cell_index
from dochar.graphs.geometry import page_geometry

FIRST_REACH = 2.0   # first look-ahead, in median word extents along the line of sight


def sight_pairs(boxes: np.ndarray) -> np.ndarray:
    """Pair keys ``first * n + second`` (first < second) of the words that see each other
    horizontally, sorted (swap the axes for vertical sight)."""
    n = len(boxes)
    index = cell_index(boxes)
    x0, y0, x1, y1 = boxes.T
    flat = y1 == y0
    levels = np.unique(np.concatenate([y0, y1]))
    ranks = np.searchsorted(levels, y0), np.searchsorted(levels, y1)
    flats = RangeMax(y0[flat], x0[flat])
    starts = RangeMax(y1, x0), RangeMax(y0, x0)
    rows = RangeMax(*row_starts(index, x0))
    pending, reach = np.arange(n), FIRST_REACH * float(index.size[0])
    found = []
    while len(pending):
        a = pending
        edge = x1[a] + reach
        low = index.low[a]      # the window: from the word's own first cell to its reach
        high = np.column_stack([index.cells_of_x(edge), index.high[a, 1]])
        edge[~rows.exceeds(low[:, 1], high[:, 1], edge)] = np.inf     # nothing lies beyond
        query, b = index.boxes_in(low, high)    # the word itself among them: it sees no pair
        i = a[query]
        lo, hi = np.maximum(y0[i], y0[b]), np.minimum(y1[i], y1[b])
        banded = (hi > lo) | ((hi == lo) & (flat[i] | flat[b]))
        touching = banded & (x0[b] <= x1[i]) & (x0[i] <= x1[b])
        partner = banded & (x0[b] > x1[i]) & (x0[b] <= edge[query])
        # boxes that may hide what lies right of a: they reach past its right edge, start within
        # the window and meet the inside of its y-range (or straddle a flat word's line)
        hider = (x1[b] > x1[i]) & (x0[b] <= edge[query]) & (y0[b] < y1[i]) & (y1[b] > y0[i])
        hidden = blocked(partner, hider, query, b, lo, hi, boxes)
        covered = hidden_beyond(query[hider], b[hider], a, edge, boxes, ranks, levels, starts)
        done = np.isinf(edge) | (covered & ~flats.exceeds(y0[a], y1[a], edge))
        sees = (touching | (partner & ~hidden)) & done[query] & (b != i)
        first, second = np.minimum(i[sees], b[sees]), np.maximum(i[sees], b[sees])
        found.append(first * n + second)
        pending, reach = pending[~done], reach * 2
    return unique_sorted(np.concatenate(found))


def _member(keys: np.ndarray, sorted_set: np.ndarray) -> np.ndarray:
    at = np.minimum(np.searchsorted(sorted_set, keys), max(len(sorted_set) - 1, 0))
    return sorted_set[at] == keys if len(sorted_set) else np.zeros(len(keys), dtype=bool)


def unique_sorted(keys: np.ndarray) -> np.ndarray:
    keys = np.sort(keys)
    return keys[np.r_[True, keys[1:] != keys[:-1]]] if len(keys) else keys


def row_starts(index, x0: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(row, largest x0 of the boxes filed under that grid row) for every row."""
    span = index.high[:, 1] - index.low[:, 1] + 1
    box = np.repeat(np.arange(len(x0)), span)
    row = index.low[box, 1] + np.arange(len(box)) - np.repeat(np.cumsum(span) - span, span)
    largest = np.full(int(index.shape[1]), -np.inf)
    np.maximum.at(largest, row, x0[box])
    return np.arange(len(largest)), largest


def blocked(partner: np.ndarray, hider: np.ndarray, query: np.ndarray, box: np.ndarray,
            lo: np.ndarray, hi: np.ndarray, boxes: np.ndarray) -> np.ndarray:
    """Per candidate pair: is a partner's corridor met by one of its window's hiders?"""
    x0, y0, x1, y1 = boxes.T
    hiders = np.flatnonzero(hider)                      # grouped by query, ascending
    per_query = np.bincount(query[hiders], minlength=int(query.max(initial=-1)) + 1)
    first = np.r_[0, np.cumsum(per_query)[:-1]]
    partners = np.flatnonzero(partner)
    counts = per_query[query[partners]]
    k = hiders[np.repeat(first[query[partners]], counts)
               + np.arange(int(counts.sum())) - np.repeat(np.cumsum(counts) - counts, counts)]
    kb = box[k]
    mine = box[partners]       # each partner's values, repeated over its hiders
    hit = ((kb != np.repeat(mine, counts)) & (x0[kb] < np.repeat(x0[mine], counts))
           & (y0[kb] < np.repeat(hi[partners], counts)) & (y1[kb] > np.repeat(lo[partners], counts)))
    out = np.zeros(len(partner), dtype=bool)
    out[np.repeat(partners, counts)[hit]] = True
    return out


def hidden_beyond(query: np.ndarray, hider: np.ndarray, targets: np.ndarray, edge: np.ndarray,
                  boxes: np.ndarray, ranks: tuple[np.ndarray, np.ndarray],
                  levels: np.ndarray, starts: tuple[RangeMax, RangeMax]) -> np.ndarray:
    """Per target: is every word starting right of ``edge`` hidden by the target's hiders?

    The hiders' open y-intervals leave gaps in the target's y-range; a farther word of positive
    height can only be seen through one gap, with its band inside it: a word reaching down into
    the top gap (its y1 in the gap) or starting inside any other gap (its y0 in the gap). Range
    queries on y1 and y0 settle both. A flat target needs its line strictly inside one hider.
    Ranks of y values make the running maximum over sorted intervals compare exactly.
    """
    rank0, rank1 = ranks
    y0 = boxes[:, 1]
    t = targets[query]
    start = np.maximum(rank0[hider], rank0[t])
    end = np.minimum(rank1[hider], rank1[t])
    own_start, own_end = rank0[targets], rank1[targets]
    straddles = np.zeros(len(targets), dtype=bool)
    straddles[query[(y0[hider] < y0[t]) & (boxes[hider, 3] > y0[t])]] = True
    stride = int(rank1.max(initial=0)) + 1
    # by target, then by start: one stable sort of a combined integer key (ranks < stride)
    order = np.argsort(query * stride + start, kind="stable")
    query, start, end = query[order], start[order], end[order]
    reached = np.maximum.accumulate(query * stride + end) - query * stride
    first = np.r_[True, query[1:] != query[:-1]]
    before = np.where(first, own_start[query], np.r_[0, reached[:-1]])
    top = np.full(len(targets), -1)
    top[query] = reached                                  # last write per group = its maximum
    opening = start > before
    bottom = np.flatnonzero((top >= 0) & (top < own_end))
    gap_target = np.r_[query[opening], bottom]
    gap_low = np.r_[before[opening], top[bottom]]
    gap_high = np.r_[start[opening], own_end[bottom]]
    at_top = gap_low == own_start[gap_target]
    by_end, by_start = starts
    seen = np.zeros(len(targets), dtype=bool)
    for keyed, use in ((by_end, at_top), (by_start, ~at_top)):
        g = gap_target[use]
        seen[g[keyed.exceeds(levels[gap_low[use]], levels[gap_high[use]], edge[g])]] = True
    return np.where(own_start == own_end, straddles, (top >= 0) & ~seen)


class RangeMax:
    """Largest value over a range of sorted keys, by a sparse table (O(1) per query)."""

    def __init__(self, keys: np.ndarray, values: np.ndarray) -> None:
        order = np.argsort(keys, kind="stable")
        self.keys = keys[order]
        table = [values[order].astype(np.float64)]
        while (2 << (len(table) - 1)) <= len(self.keys):
            prev, half = table[-1], 1 << (len(table) - 1)
            table.append(np.maximum(prev[:-half], prev[half:]))
        self.table = table

    def exceeds(self, lo: np.ndarray, hi: np.ndarray, threshold: np.ndarray) -> np.ndarray:
        """Does any value with key in the closed range [lo, hi] exceed ``threshold``?"""
        left = np.searchsorted(self.keys, lo, side="left")
        size = np.searchsorted(self.keys, hi, side="right") - left
        level = np.floor(np.log2(np.maximum(size, 1))).astype(np.int64)
        best = np.full(len(lo), -np.inf)
        for k in np.unique(level[size > 0]):
            use = (level == k) & (size > 0)
            row = self.table[k]
            best[use] = np.maximum(row[left[use]], row[left[use] + size[use] - (1 << k)])
        return best > threshold


@dataclass(frozen=True)
class LineOfSightBuilder:
    name: ClassVar[str] = "line_of_sight"
    relations: ClassVar[tuple[str, ...]] = DIRECTIONS

    def __call__(self, page: Page) -> TypedEdges:
        geo = page_geometry(page, self.name)
        if geo.n < 2:
            return no_edges(self.relations)
        n = geo.n
        across, down = sight_pairs(geo.boxes), sight_pairs(geo.boxes[:, [1, 0, 3, 2]])
        keys = unique_sorted(np.concatenate([across, down]))
        if not len(keys):
            return no_edges(self.relations)
        in_h, in_v = (np.tile(_member(keys, k), 2) for k in (across, down))
        a, b = np.divmod(keys, n)
        source, target = np.concatenate([a, b]), np.concatenate([b, a])
        dx, dy = (geo.centres[source] - geo.centres[target]).T
        types = np.where(in_h & in_v, direction_codes(dx, dy),
                         np.where(in_h, np.where(dx < 0, LEFT, RIGHT),
                                  np.where(dy < 0, ABOVE, BELOW)))
        return make_edges(source, target, types, self.relations)
