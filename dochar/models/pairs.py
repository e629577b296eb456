"""Pair models for link classification: a GNN with a pair head, and a forest on pair features.

Both score the same candidate pairs from the same node features. The GNN stack
(:class:`~dochar.models.gnn.GNNStack`, its output read as node embeddings ``h``) feeds an MLP on
``[h_s, h_t, h_s * h_t, g_st]``, where ``g_st`` are the pair's geometry features; the forest
reads ``[x_s, x_t, g_st]``. Class imbalance (few pairs are links): the GNN weights positives by
negatives / positives in its loss (``class_weighting: balanced``), the forest uses balanced class
weights; ``negative_ratio`` optionally keeps only that many sampled negatives per positive in
training. The decision threshold is chosen on validation pairs only.
"""

from __future__ import annotations

import copy
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import torch
from torch_geometric.data import Batch, Data
from torch_geometric.loader import DataLoader

from dochar.data.word_table import Page
from dochar.graphs.base import direction_codes
from dochar.models.gnn import GNNStack

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
    return np.column_stack([*columns, direction]).astype(np.float32).reshape(len(s), -1)


@dataclass
class PairInputs:
    """One page's inputs to a pair model: node features, graph, candidates and their truth."""

    x: np.ndarray                 # (n, d) node features
    edge_index: np.ndarray
    edge_type: np.ndarray
    pairs: np.ndarray             # (2, P)
    geometry: np.ndarray          # (P, 17)
    y: np.ndarray                 # (P,) bool: the pair is a true link
    chars: np.ndarray | None = None
    extra: np.ndarray | None = None   # (n, k) forest-only node columns (hashed n-grams)


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
        h = self.encoder(batch.x, batch.edge_index, batch.edge_type, getattr(batch, "chars", None))
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


def to_data(inputs: PairInputs) -> Data:
    data = Data(x=torch.from_numpy(inputs.x), edge_index=torch.from_numpy(inputs.edge_index),
                edge_type=torch.from_numpy(inputs.edge_type),
                pair_index=torch.from_numpy(inputs.pairs),
                pair_geometry=torch.from_numpy(inputs.geometry),
                pair_y=torch.from_numpy(inputs.y.astype(np.float32)), num_nodes=len(inputs.x))
    if inputs.chars is not None:
        data.chars = torch.from_numpy(inputs.chars)
    return data


def sample_negatives(y: np.ndarray, ratio: float | None, rng: np.random.Generator) -> np.ndarray:
    """Indices kept for training: every positive and ``ratio`` negatives per positive (all
    negatives when ``ratio`` is None or there are fewer)."""
    positives, negatives = np.flatnonzero(y), np.flatnonzero(~y)
    if ratio is None or len(negatives) <= ratio * max(len(positives), 1):
        return np.arange(len(y))
    keep = rng.choice(negatives, size=int(ratio * max(len(positives), 1)), replace=False)
    return np.sort(np.concatenate([positives, keep]))


@dataclass
class PairHistory:
    best_epoch: int = 0
    best_val_link_f1: float = -1.0
    threshold: float = 0.5
    epochs_run: int = 0
    losses: list[float] = field(default_factory=list)


def _probabilities(model: PairScorer, data: Sequence[Data]) -> np.ndarray:
    if not data:
        return np.zeros(0)
    return model.probabilities(Batch.from_data_list(list(data)))


def train_pair_scorer(model: PairScorer, train: Sequence[PairInputs], val: Sequence[PairInputs],
                      val_missed: int, cfg: Mapping[str, Any], seed: int,
                      negative_ratio: float | None = None) -> PairHistory:
    """AdamW on positive-weighted BCE; keep the epoch with the best validation link F1 (at its
    best threshold) and that threshold. Fresh negatives are drawn every epoch."""
    rng = np.random.default_rng(seed)
    optimizer = torch.optim.AdamW(model.parameters(), lr=float(cfg["learning_rate"]),
                                  weight_decay=float(cfg["weight_decay"]))
    positives = sum(int(p.y.sum()) for p in train)
    negatives = sum(int((~p.y).sum()) for p in train)
    if negative_ratio is not None:
        negatives = min(negatives, int(negative_ratio * max(positives, 1)))
    weight = (negatives / max(positives, 1) if cfg["class_weighting"] == "balanced" else 1.0)
    loss_fn = torch.nn.BCEWithLogitsLoss(pos_weight=torch.tensor(weight, dtype=torch.float32))
    val_data = [to_data(p) for p in val]
    val_y = np.concatenate([p.y for p in val]) if val else np.zeros(0, bool)
    history, best_state = PairHistory(), copy.deepcopy(model.state_dict())
    for epoch in range(1, int(cfg["max_epochs"]) + 1):
        epoch_data = []
        for page in train:
            keep = sample_negatives(page.y, negative_ratio, rng)
            epoch_data.append(to_data(PairInputs(page.x, page.edge_index, page.edge_type,
                                                 page.pairs[:, keep], page.geometry[keep],
                                                 page.y[keep], page.chars)))
        loader = DataLoader(epoch_data, batch_size=int(cfg["pages_per_batch"]), shuffle=True,
                            generator=torch.Generator().manual_seed(seed + epoch))
        model.train()
        total = 0.0
        for batch in loader:
            optimizer.zero_grad()
            loss = loss_fn(model(batch), batch.pair_y)
            loss.backward()
            optimizer.step()
            total += loss.item() * batch.num_graphs
        history.losses.append(total / max(len(train), 1))
        history.epochs_run = epoch
        if not val_data:   # no validation documents: train the full budget, keep the last
            best_state, history.best_epoch = copy.deepcopy(model.state_dict()), epoch
            continue
        threshold, score = best_threshold(_probabilities(model, val_data), val_y, val_missed)
        if score > history.best_val_link_f1:
            history.best_val_link_f1, history.best_epoch = score, epoch
            history.threshold = threshold
            best_state = copy.deepcopy(model.state_dict())
        if epoch - history.best_epoch >= int(cfg["patience"]):
            break
    model.load_state_dict(best_state)
    return history


def predict_pairs(model: PairScorer, pages: Sequence[PairInputs]) -> list[np.ndarray]:
    """Link probability of every candidate pair, per page."""
    data = [to_data(p) for p in pages]
    probabilities = _probabilities(model, data)
    return np.split(probabilities, np.cumsum([p.pairs.shape[1] for p in pages])[:-1])


def pair_matrix(pages: Sequence[PairInputs]) -> np.ndarray:
    """Forest rows: ``[x_s, x_t, g_st]`` with the forest-only node columns beside ``x``."""
    rows = []
    for page in pages:
        nodes = page.x if page.extra is None else np.hstack([page.x, page.extra])
        rows.append(np.hstack([nodes[page.pairs[0]], nodes[page.pairs[1]], page.geometry]))
    return np.vstack(rows).astype(np.float32) if rows else np.zeros((0, 0), np.float32)


def best_threshold(probabilities: np.ndarray, labels: np.ndarray, missed: int = 0,
                   grid: Sequence[float] | None = None) -> tuple[float, float]:
    """(threshold, F1): the probability cut with the best link F1 on these (validation) pairs.

    ``missed`` true links were no candidates: they add to FN whatever the threshold.
    """
    probabilities, labels = np.asarray(probabilities, float), np.asarray(labels, bool)
    grid = np.linspace(0.05, 0.95, 19) if grid is None else np.asarray(grid, float)
    predicted = probabilities[None, :] >= grid[:, None]
    tp = (predicted & labels).sum(axis=1)
    fp = (predicted & ~labels).sum(axis=1)
    fn = (~predicted & labels).sum(axis=1) + missed
    f1 = np.divide(2 * tp, 2 * tp + fp + fn, out=np.zeros(len(grid)),
                   where=(2 * tp + fp + fn) > 0)
    best = int(np.argmax(f1))
    return float(grid[best]), float(f1[best])
