"""k nearest words by box distance.

Distance between two words is the shortest distance between their boxes (0 when they touch or
overlap); ties go to the smaller centre distance, then the smaller ``word_id``. Each target
listens to exactly ``min(k, n - 1)`` words. An edge is typed by the direction its source lies
in, by the dominant axis of the centre offset (:func:`dochar.graphs.base.direction_codes`).

Search: candidates come from a window of grid cells around the target (:mod:`dochar.graphs.cells`);
the window's answer stands once it holds k words nearer than the gap every box outside the window
must exceed, otherwise that target's window doubles. Near-linear on real pages, exact on any page.
A page of at most ``DENSE_UP_TO`` words ranks all its pairs instead, compiled
(:mod:`dochar.graphs.knn_pairs`): on a form-sized page that is cheaper than building the grid,
and the ranking keys are the same. Given many pages (:meth:`KnnBuilder.build_all`), one call
ranks the pairs of all the small pages, and one grid search runs over all the others, each page
in a grid of its own (:mod:`dochar.graphs.stacked_cells`): the same edges as page by page,
without a search per page.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from dochar.data.word_table import Page
from dochar.graphs.base import (DIRECTIONS, GraphBuilderError, TypedEdges, direction_codes,
                                edges_by_page, make_edges, no_edges)
from dochar.graphs.cells import cell_index, order_within_groups
from dochar.graphs.geometry import PageGeometry, page_geometry, stacked_geometry
from dochar.graphs.stacked_cells import stacked_cells

# words; the compiled pair ranking is the faster below about 1,000 (benchmarks/pages.py pages)
DENSE_UP_TO = 800


@dataclass(frozen=True)
class KnnBuilder:
    k: int = 6

    name: ClassVar[str] = "knn"
    relations: ClassVar[tuple[str, ...]] = DIRECTIONS

    def __post_init__(self) -> None:
        if isinstance(self.k, bool) or not isinstance(self.k, (int, np.integer)) or self.k < 1:
            raise GraphBuilderError(f"graph builder 'knn': k must be a positive integer, "
                                    f"got {self.k!r}")

    def __call__(self, page: Page) -> TypedEdges:
        geo = page_geometry(page, self.name)
        take = min(int(self.k), geo.n - 1)
        if take < 1:
            return no_edges(self.relations)
        source, target = nearest_words(geo, take)
        dx, dy = (geo.centres[source] - geo.centres[target]).T
        return make_edges(source, target, direction_codes(dx, dy), self.relations)

    def build_all(self, pages: Sequence[Page]) -> list[TypedEdges]:
        """Every page's edges, as :meth:`__call__` gives them: the small pages' pairs ranked
        in one call, one grid search over the others (:func:`nearest_words_of_pages`); a page
        of one word has none."""
        edges = [no_edges(self.relations)] * len(pages)
        small = [i for i, page in enumerate(pages) if 1 < len(page) <= DENSE_UP_TO]
        large = [i for i, page in enumerate(pages) if len(page) > DENSE_UP_TO]
        for chosen, search in ((small, _all_pairs_of_pages), (large, nearest_words_of_pages)):
            if not chosen:
                continue
            geo, starts = stacked_geometry([pages[i] for i in chosen], self.name)
            take = np.minimum(int(self.k), np.diff(starts) - 1)
            source, target = search(geo, starts, take)
            dx, dy = (geo.centres[source] - geo.centres[target]).T
            for i, found in zip(chosen, edges_by_page(source, target, direction_codes(dx, dy),
                                                      starts, self.relations)):
                edges[i] = found
        return edges


def nearest_words(geo: PageGeometry, take: int) -> tuple[np.ndarray, np.ndarray]:
    """The ``take`` nearest other words of every word: (sources, targets)."""
    if geo.n <= DENSE_UP_TO:
        return _all_pairs_of_pages(geo, np.array([0, geo.n]), np.array([take]))
    index = cell_index(geo.boxes)
    pending, reach = np.arange(geo.n), index.first_reach(2.0)
    sources, targets = [], []
    while len(pending):
        low, high = index.window(pending, reach)
        query, box = index.boxes_in(low, high)
        gap2, centre2, _, _ = geo.pair_keys(pending[query], box)
        whole = index.covers_grid(low, high)
        # a settled target's answers all lie within the bound: rank only those pairs
        usable = (box != pending[query]) & ((gap2 < index.gap_bound2(reach)) | whole[query])
        query, box, gap2, centre2 = query[usable], box[usable], gap2[usable], centre2[usable]
        order = order_within_groups(query, (gap2, centre2, geo.rank[box]))
        query, box, gap2 = query[order], box[order], gap2[order]
        first = np.searchsorted(query, np.arange(len(pending)))
        done = whole | (np.bincount(query, minlength=len(pending)) >= take)
        kept = done[query] & (np.arange(len(query)) - first[query] < take)
        sources.append(box[kept])
        targets.append(pending[query[kept]])
        pending, reach = pending[~done], reach * 2
    return np.concatenate(sources), np.concatenate(targets)


def _all_pairs_of_pages(geo: PageGeometry, starts: np.ndarray, take: np.ndarray
                        ) -> tuple[np.ndarray, np.ndarray]:
    """:func:`nearest_words_of_pages` by ranking every pair of each page, compiled."""
    from dochar.graphs.knn_pairs import nearest_by_all_pairs   # Numba loads on first use

    return nearest_by_all_pairs(geo.boxes, geo.centres, geo.rank, starts.astype(np.int64),
                                take.astype(np.int64))


def nearest_words_of_pages(geo: PageGeometry, starts: np.ndarray, take: np.ndarray
                           ) -> tuple[np.ndarray, np.ndarray]:
    """:func:`nearest_words`'s grid search on pages laid end to end (page p: words
    ``starts[p]`` to ``starts[p + 1] - 1``, ``take[p]`` neighbours each, at least 1): every
    page's grid of its own, the rounds run for all pages together, each target's window
    doubling on its own."""
    grids = stacked_cells(geo.boxes, starts)
    wanted = np.repeat(take, np.diff(starts))             # per word
    pending = np.arange(geo.n)
    reach = grids.first_reach(pending, 2.0)
    sources, targets = [], []
    while len(pending):
        low, high = grids.window(pending, reach)
        query, box = grids.boxes_in(pending, low, high)
        gap2, centre2, _, _ = geo.pair_keys(pending[query], box)
        whole = grids.covers_grid(pending, low, high)
        usable = (box != pending[query]) & ((gap2 < grids.gap_bound2(pending, reach)[query])
                                            | whole[query])
        query, box, gap2, centre2 = query[usable], box[usable], gap2[usable], centre2[usable]
        order = order_within_groups(query, (gap2, centre2, geo.rank[box]))
        query, box = query[order], box[order]
        first = np.searchsorted(query, np.arange(len(pending)))
        need = wanted[pending]
        done = whole | (np.bincount(query, minlength=len(pending)) >= need)
        kept = done[query] & (np.arange(len(query)) - first[query] < need[query])
        sources.append(box[kept])
        targets.append(pending[query[kept]])
        pending, reach = pending[~done], reach[~done] * 2
    return np.concatenate(sources), np.concatenate(targets)
