"""Pair models for link classification: a GNN with a pair head, and a forest on pair features.

Both score the same candidate pairs from the same node features. The GNN stack
(:class:`~dochar.models.gnn.GNNStack`, its output read as node embeddings ``h``) feeds an MLP on
``[h_s, h_t, h_s * h_t, g_st]``, where ``g_st`` are the pair's geometry features; the forest
reads ``[x_s, x_t, g_st]``. Class imbalance (few pairs are links): the GNN weights positives by
negatives / positives in its loss (``class_weighting: balanced``), the forest uses balanced class
weights; ``negative_ratio`` optionally keeps only that many sampled negatives per positive in
training (:mod:`dochar.models.objectives`). The decision threshold is chosen on validation pairs
only.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import torch
from torch_geometric.data import Data

from dochar.data.word_table import Page
from dochar.graphs.base import TypedEdges, direction_codes
from dochar.graphs.candidates import (
    CandidateOptions,
    candidate_hits,
    candidate_pairs,
    missed_links,
)
from dochar.features import WordFeaturizer
from dochar.models.gnn import GNNStack
from dochar.models.inputs import PageSet, to_matrix
from dochar.models.objectives import node_inputs
from dochar.tasks.links import LinkPage

PAIR_GEOMETRY_NAMES: tuple[str, ...] = (
    "dx", "dy", "abs_dx", "abs_dy", "gap_x", "gap_y", "x_overlap", "y_overlap",
    "log_width_ratio", "log_height_ratio", "left_edge_diff", "top_edge_diff", "order_diff",
    "source_above", "source_below", "source_left", "source_right",
)


def pair_geometry(page: Page, pairs: np.ndarray) -> np.ndarray:
    """(P, 17) float32 relative geometry of each pair, in page-size units (names above)."""
    s, t = np.asarray(pairs, np.int64).reshape(2, -1)
    b = np.asarray(page.boxes, np.float64)
    w, h = float(page.width), float(page.height)
    centre = np.column_stack([(b[:, 0] + b[:, 2]) / 2, (b[:, 1] + b[:, 3]) / 2])
    dx = (centre[t, 0] - centre[s, 0]) / w
    dy = (centre[t, 1] - centre[s, 1]) / h
    gap_x = np.maximum(0, np.maximum(b[t, 0] - b[s, 2], b[s, 0] - b[t, 2])) / w
    gap_y = np.maximum(0, np.maximum(b[t, 1] - b[s, 3], b[s, 1] - b[t, 3])) / h
    width, height = b[:, 2] - b[:, 0] + 1e-6, b[:, 3] - b[:, 1] + 1e-6
    x_overlap = np.clip((np.minimum(b[s, 2], b[t, 2]) - np.maximum(b[s, 0], b[t, 0]))
                        / np.minimum(width[s], width[t]), 0, 1)
    y_overlap = np.clip((np.minimum(b[s, 3], b[t, 3]) - np.maximum(b[s, 1], b[t, 1]))
                        / np.minimum(height[s], height[t]), 0, 1)
    direction = np.eye(4)[direction_codes(-dx * w, -dy * h)] if len(s) else np.zeros((0, 4))
    columns = [dx, dy, np.abs(dx), np.abs(dy), gap_x, gap_y, x_overlap, y_overlap,
               np.log(width[s] / width[t]), np.log(height[s] / height[t]),
               np.abs(b[s, 0] - b[t, 0]) / w, np.abs(b[s, 1] - b[t, 1]) / h,
               (t - s) / max(len(page), 1)]
    return (np.column_stack([*columns, direction]).astype(np.float32)
            .reshape(len(s), len(PAIR_GEOMETRY_NAMES)))   # a page without pairs: (0, 17)


@dataclass
class PageCandidates:
    """One page's candidate pairs, their geometry and truth, and the true links none covers."""

    pairs: np.ndarray             # (2, P) node indices, row 0 = source
    geometry: np.ndarray          # (P, 17)
    y: np.ndarray                 # (P,) bool: the pair is a true link
    missed: np.ndarray            # (2, M) true links that are no candidate


def page_candidates(page: LinkPage, edges: TypedEdges, options: CandidateOptions
                    ) -> PageCandidates:
    """The candidate pairs of a page, their truth, and the true links they cannot supply."""
    pairs = candidate_pairs(page.nodes, options, directed=page.directed, edges=edges)
    entities = None if page.directed else np.asarray(page.entities, dtype=object)
    if page.directed:
        hits = candidate_hits(pairs, page.true_links, len(page.nodes), directed=True)
    else:   # any two words of one entity are a true pair, not only consecutive ones
        hits = entities[pairs[0]] == entities[pairs[1]]
    missed = missed_links(page.true_links, pairs, len(page.nodes), page.directed, entities)
    return PageCandidates(pairs, pair_geometry(page.nodes, pairs), np.asarray(hits, bool),
                          missed)


class PairScorer(torch.nn.Module):
    """Node embeddings from a GNN stack, one logit per candidate pair from an MLP head."""

    def __init__(self, encoder: GNNStack, embedding_dim: int, hidden_dim: int = 64,
                 dropout: float = 0.2) -> None:
        super().__init__()
        self.encoder = encoder
        self.head = torch.nn.Sequential(
            torch.nn.Linear(3 * embedding_dim + len(PAIR_GEOMETRY_NAMES), hidden_dim),
            torch.nn.ReLU(), torch.nn.Dropout(dropout),
            torch.nn.Linear(hidden_dim, hidden_dim), torch.nn.ReLU(),
            torch.nn.Linear(hidden_dim, 1))

    def forward(self, batch: Data) -> torch.Tensor:
        h = self.encoder(*node_inputs(batch))
        hs, ht = h[batch.pair_index[0]], h[batch.pair_index[1]]
        return self.head(torch.cat([hs, ht, hs * ht, batch.pair_geometry], dim=1)).squeeze(-1)

    @torch.no_grad()
    def probabilities(self, batch: Data) -> np.ndarray:
        was_training = self.training
        self.eval()
        try:
            return torch.sigmoid(self(batch)).numpy()
        finally:
            self.train(was_training)


def with_pairs(data: Data, candidates: PageCandidates) -> Data:
    """A page graph with its candidate pairs attached (``pair_index`` is shifted by batching)."""
    data.pair_index = torch.from_numpy(candidates.pairs)
    data.pair_geometry = torch.from_numpy(candidates.geometry)
    data.pair_y = torch.from_numpy(candidates.y.astype(np.float32))
    return data


def pair_matrix(page_set: PageSet, candidates: Sequence[PageCandidates],
                featurizer: WordFeaturizer, **options: Any) -> np.ndarray:
    """Forest rows ``[x_s, x_t, g_st]``: both nodes' rows (as :func:`to_matrix` cuts them with
    ``options``) and the pair geometry, page by page."""
    rows = []
    for page, edges, found in zip(page_set.pages, page_set.edges, candidates):
        x = to_matrix(PageSet([page], [edges], page_set.relations), featurizer, **options)
        rows.append(np.hstack([x[found.pairs[0]], x[found.pairs[1]], found.geometry]))
    return np.vstack(rows).astype(np.float32) if rows else np.zeros((0, 0), np.float32)
