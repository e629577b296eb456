"""Reading order: each word linked to the word before and after it.

The order is dochar's one reading order, :func:`dochar.data.word_table.reading_order`: two words
share a line when their y-ranges overlap by at least half the smaller height; lines are the
connected components of that relation, read top to bottom by the mean y of their word centres,
words within a line left to right by centre x; remaining ties go to the smaller ``word_id``.
The last word of a line is followed by the first of the next. Multi-column text is read across
the columns, line by line (a known limit of this rule).

Relations: ``previous`` (the source is the word just before the target) and ``next``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from dochar.data.word_table import Page, reading_order
from dochar.graphs.base import TypedEdges, make_edges, no_edges
from dochar.graphs.geometry import page_geometry


@dataclass(frozen=True)
class ReadingOrderBuilder:
    name: ClassVar[str] = "reading_order"
    relations: ClassVar[tuple[str, ...]] = ("previous", "next")

    def __call__(self, page: Page) -> TypedEdges:
        geo = page_geometry(page, self.name)
        if geo.n < 2:
            return no_edges(self.relations)
        order = reading_order(geo.boxes, page.word_ids)
        before, after = order[:-1], order[1:]
        return make_edges(np.concatenate([before, after]), np.concatenate([after, before]),
                          np.repeat([0, 1], len(before)), self.relations)
