"""Edge features: continuous attributes of every edge, computed from its two boxes.

For an edge from source word ``j`` to target word ``i`` (boxes ``x0, y0, x1, y1``, y down; centre
``c``, width ``w``, height ``h``; page width ``W`` and height ``H``; ``dx = cx_j - cx_i``,
``dy = cy_j - cy_i``, the same offset :func:`dochar.graphs.base.direction_codes` types edges by):

* ``offsets``: ``dx/W, dy/H`` and ``dx/h_i, dy/h_i`` (offset in target line heights).
* ``distance``: centre distance ``sqrt((dx/W)^2 + (dy/H)^2)`` and box gap ``sqrt((gx/W)^2 +
  (gy/H)^2)``, ``gx = max(0, x0_j - x1_i, x0_i - x1_j)`` (``gy`` likewise): the shortest distance
  between the two boxes in page-normalised units, 0 when they touch or overlap.
* ``direction``: ``sin, cos`` of the angle of ``(dx, dy)`` in page units; ``(0, 0)`` when the
  centres coincide (no direction).
* ``sizes``: ``log(w_j/w_i)``, ``log(h_j/h_i)`` and the source's aspect ``log(w_j/h_j)``.
* ``overlap``: the overlap of the two x-ranges as a fraction of the smaller width, and of the
  y-ranges over the smaller height, in [0, 1]; a flat range lying within the other counts 1.
* ``alignment``: ``same_line`` = the y-ranges overlap by at least half the smaller height (the
  line rule of :func:`dochar.data.word_table.line_ids`); ``same_column`` the same along x; 0 or 1.
* ``reading_order``: ``(position_j - position_i) / n`` in the page's reading order
  (:func:`dochar.data.word_table.reading_order`), ``n`` the page's word count.

Widths and heights below ``MIN_EXTENT`` of the page's size count as that (flat boxes exist), so
no ratio divides by zero. Runs after every transform that adds or mirrors edges: its attributes
belong to the final, canonical edge list.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np

from dochar.data.word_table import LINE_OVERLAP, Page, reading_order
from dochar.graphs.base import GraphBuilderError, TypedEdges
from dochar.graphs.geometry import page_geometry
from dochar.graphs.transforms.base import EdgeTransform

EDGE_FEATURE_GROUPS: dict[str, tuple[str, ...]] = {
    "offsets": ("dx_page", "dy_page", "dx_height", "dy_height"),
    "distance": ("distance", "gap"),
    "direction": ("direction_sin", "direction_cos"),
    "sizes": ("log_width_ratio", "log_height_ratio", "log_aspect_source"),
    "overlap": ("overlap_x", "overlap_y"),
    "alignment": ("same_line", "same_column"),
    "reading_order": ("reading_distance",),
}
MIN_EXTENT = 1e-3        # least width (height) a box counts as, a fraction of the page's
EDGES_PER_BLOCK = 100_000   # edges whose attributes are computed at once (bounds temporaries)


@dataclass(frozen=True)
class EdgeFeatures(EdgeTransform):
    groups: tuple[str, ...] = ()

    switch: ClassVar[str] = "edge_features"

    def __post_init__(self) -> None:
        groups = tuple(self.groups)
        object.__setattr__(self, "groups", groups)
        unknown = [g for g in groups if g not in EDGE_FEATURE_GROUPS]
        if unknown:
            raise GraphBuilderError(f"edge feature group(s) {unknown} unknown; choose from "
                                    f"{list(EDGE_FEATURE_GROUPS)}")
        if len(set(groups)) != len(groups):
            raise GraphBuilderError(f"edge feature groups {list(groups)} name a group twice")

    @classmethod
    def from_switch(cls, value: Any, **options: Any) -> EdgeFeatures | None:
        if value is None or value is False:
            return None
        if isinstance(value, str) or not isinstance(value, Sequence):
            raise GraphBuilderError(f"edge features must be a list of groups from "
                                    f"{list(EDGE_FEATURE_GROUPS)}, got {value!r}")
        return cls(groups=tuple(str(g) for g in value), **options) if len(value) else None

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(name for group in self.groups for name in EDGE_FEATURE_GROUPS[group])

    def attribute_names(self, names: tuple[str, ...]) -> tuple[str, ...]:
        return names + self.names

    def __call__(self, page: Page, edges: TypedEdges) -> TypedEdges:
        geo = page_geometry(page, self.switch)
        if not (page.width > 0 and page.height > 0):
            raise GraphBuilderError(f"edge features, page {page.key}: page size "
                                    f"{page.width} x {page.height} must be positive")
        names = edges.edge_attr_names + self.names
        attr = np.empty((edges.num_edges, len(names)), dtype=np.float32)
        if edges.edge_attr is not None:
            attr[:, :len(edges.edge_attr_names)] = edges.edge_attr
        position = np.empty(geo.n, dtype=np.int64)
        position[reading_order(geo.boxes, page.word_ids)] = np.arange(geo.n)
        for start in range(0, edges.num_edges if self.names else 0, EDGES_PER_BLOCK):
            block = slice(start, start + EDGES_PER_BLOCK)
            source, target = edges.edge_index[:, block]
            columns = pair_features(geo.boxes[source], geo.boxes[target], page.width,
                                    page.height, position[source] - position[target], geo.n)
            attr[block, len(edges.edge_attr_names):] = np.column_stack(
                [columns[name] for name in self.names])
        return TypedEdges(edges.edge_index, edges.edge_type, edges.relations, attr, names)


def pair_features(source: np.ndarray, target: np.ndarray, width: float, height: float,
                  reading_steps: np.ndarray, words: int) -> dict[str, np.ndarray]:
    """Every edge feature for boxes ``source`` (E, 4) and ``target`` (E, 4), by name."""
    ws, hs = _extents(source, width, height)
    wt, ht = _extents(target, width, height)
    dx = (source[:, 0] + source[:, 2] - target[:, 0] - target[:, 2]) / 2
    dy = (source[:, 1] + source[:, 3] - target[:, 1] - target[:, 3]) / 2
    length = np.hypot(dx, dy)
    apart = length > 0
    overlap_x, frac_x, same_column = _axis_overlap(source[:, 0], source[:, 2], target[:, 0],
                                                   target[:, 2])
    overlap_y, frac_y, same_line = _axis_overlap(source[:, 1], source[:, 3], target[:, 1],
                                                 target[:, 3])
    gap_x, gap_y = np.maximum(-overlap_x, 0.0), np.maximum(-overlap_y, 0.0)
    return {
        "dx_page": dx / width, "dy_page": dy / height, "dx_height": dx / ht, "dy_height": dy / ht,
        "distance": np.hypot(dx / width, dy / height),
        "gap": np.hypot(gap_x / width, gap_y / height),
        "direction_sin": np.divide(dy, length, out=np.zeros_like(dy), where=apart),
        "direction_cos": np.divide(dx, length, out=np.zeros_like(dx), where=apart),
        "log_width_ratio": np.log(ws / wt), "log_height_ratio": np.log(hs / ht),
        "log_aspect_source": np.log(ws / hs),
        "overlap_x": frac_x, "overlap_y": frac_y,
        "same_line": same_line, "same_column": same_column,
        "reading_distance": np.asarray(reading_steps, dtype=np.float64) / max(words, 1),
    }


def _extents(boxes: np.ndarray, width: float, height: float) -> tuple[np.ndarray, np.ndarray]:
    return (np.maximum(boxes[:, 2] - boxes[:, 0], MIN_EXTENT * width),
            np.maximum(boxes[:, 3] - boxes[:, 1], MIN_EXTENT * height))


def _axis_overlap(low_a: np.ndarray, high_a: np.ndarray, low_b: np.ndarray, high_b: np.ndarray
                  ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Signed overlap of two ranges (negative: the gap), its share of the smaller range, and
    whether it reaches ``LINE_OVERLAP`` of the smaller range."""
    overlap = np.minimum(high_a, high_b) - np.maximum(low_a, low_b)
    smaller = np.minimum(high_a - low_a, high_b - low_b)
    touching = overlap >= 0
    share = np.where(smaller > 0, np.clip(overlap / np.where(smaller > 0, smaller, 1.0), 0, 1),
                     touching.astype(np.float64))
    aligned = touching & (overlap >= LINE_OVERLAP * smaller)
    return overlap, share, aligned.astype(np.float64)
