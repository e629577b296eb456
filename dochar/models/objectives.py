"""What one training loop optimises for a task: its loss, its validation score, its outputs.

The loop (:func:`dochar.models.training.train`) is the same for every task; an objective says
how a batch becomes a loss, how validation pages become the score early stopping watches, and
how a fitted model's outputs come back per page. :class:`NodeClasses` classifies every node
(word labels, tags, segment labels); :class:`PairLinks` scores candidate pairs (links), with a
decision threshold chosen on validation pairs.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import torch
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from sklearn.metrics import f1_score
from torch_geometric.data import Batch, Data

from dochar.errors import DocharError

CLASS_WEIGHTINGS = ("balanced", "none")


class TrainOptionError(DocharError):
    """A ``train.*`` option the loop cannot run with; the message names its key."""


def check_class_weighting(scheme: str) -> str:
    if scheme not in CLASS_WEIGHTINGS:
        raise TrainOptionError(f"config key train.class_weighting={scheme!r}: expected one of "
                               f"{list(CLASS_WEIGHTINGS)}")
    return scheme


def check_label_smoothing(epsilon: float) -> float:
    if not 0.0 <= epsilon < 1.0:
        raise TrainOptionError(f"config key train.label_smoothing={epsilon!r}: expected a "
                               "number in [0, 1)")
    return float(epsilon)


def class_weights(graphs: Sequence[Data], num_classes: int, scheme: str) -> torch.Tensor:
    """Inverse-frequency weights n / (C * n_c) (scikit-learn's 'balanced'); absent classes get 1."""
    if check_class_weighting(scheme) == "none":
        return torch.ones(num_classes)
    counts = torch.bincount(torch.cat([g.y for g in graphs]), minlength=num_classes).double()
    weights = counts.sum() / (num_classes * counts.clamp(min=1))
    weights[counts == 0] = 1.0
    return weights.float()


def node_inputs(batch: Data) -> tuple:
    """The stack's inputs of a batch: features, edges, relation ids, char ids, edge attributes,
    page-image crops."""
    return (batch.x, batch.edge_index, batch.edge_type, getattr(batch, "chars", None),
            getattr(batch, "edge_attr", None), getattr(batch, "crops", None))


class NodeClasses:
    """Weighted cross-entropy over node classes; validation macro-F1 (scikit-learn's, over the
    classes present). ``label_smoothing`` ε trains toward (1 − ε) on the true class and ε / C
    spread over all C (Szegedy et al., "Rethinking the Inception Architecture", CVPR 2016), so
    a network stops pushing confident logits further; probabilities stay usable for averaging
    members and for flagging words to review."""

    score_name = "val_macro_f1"

    def __init__(self, num_classes: int, class_weighting: str = "balanced",
                 label_smoothing: float = 0.0) -> None:
        self.num_classes, self.class_weighting = num_classes, class_weighting
        self.label_smoothing = check_label_smoothing(label_smoothing)
        self.loss_fn: torch.nn.Module | None = None
        self.threshold = None   # node classes need no decision threshold

    def start(self, train_graphs: Sequence[Data]) -> None:
        self.loss_fn = torch.nn.CrossEntropyLoss(
            weight=class_weights(train_graphs, self.num_classes, self.class_weighting),
            label_smoothing=self.label_smoothing)

    def epoch_graphs(self, train_graphs: Sequence[Data], epoch: int) -> Sequence[Data]:
        return train_graphs

    def loss(self, model: torch.nn.Module, batch: Data) -> torch.Tensor:
        return self.loss_fn(model(*node_inputs(batch)), batch.y)

    def validate(self, model: torch.nn.Module, batch: Batch) -> tuple[float, float | None]:
        predicted = model.predict_proba(*node_inputs(batch)).argmax(dim=1).numpy()
        return float(f1_score(batch.y.numpy(), predicted, average="macro",
                              zero_division=0)), None

    def outputs(self, model: torch.nn.Module, graphs: Sequence[Data]) -> list[np.ndarray]:
        """Class probabilities per page, in eval mode."""
        if not graphs:
            return []
        batch = Batch.from_data_list(list(graphs))
        sizes = torch.diff(batch.ptr).tolist()
        return [part.numpy() for part in torch.split(model.predict_proba(*node_inputs(batch)),
                                                     sizes)]


def sample_negatives(y: np.ndarray, ratio: float | None, rng: np.random.Generator) -> np.ndarray:
    """Indices kept for training: every positive and ``ratio`` negatives per positive (all
    negatives when ``ratio`` is None or there are fewer)."""
    positives, negatives = np.flatnonzero(y), np.flatnonzero(~y)
    if ratio is None or len(negatives) <= ratio * max(len(positives), 1):
        return np.arange(len(y))
    keep = rng.choice(negatives, size=int(ratio * max(len(positives), 1)), replace=False)
    return np.sort(np.concatenate([positives, keep]))


def _groups(pairs: np.ndarray, n: int, keep: np.ndarray) -> set[frozenset]:
    """Connected components of two nodes or more over the kept pairs."""
    graph = coo_matrix((np.ones(int(keep.sum())), (pairs[0][keep], pairs[1][keep])),
                       shape=(n, n))
    _, component = connected_components(graph, directed=False)
    sizes = np.bincount(component, minlength=n)
    members: dict[int, list[int]] = {}
    for node in np.flatnonzero(sizes[component] > 1):
        members.setdefault(int(component[node]), []).append(int(node))
    return {frozenset(group) for group in members.values()}


def row_f1_at(probabilities: np.ndarray, labels: np.ndarray, pairs: np.ndarray,
              threshold: float) -> float:
    """Row F1 of the cut: predicted rows (components of the pairs at or above it) that equal a
    true row (components of the true pairs), over rows of two nodes or more; the metric's
    definition (:class:`dochar.metrics.links.RowF1`) with the true rows seen through the
    candidates (a row the candidates split counts as its pieces)."""
    pairs = np.asarray(pairs, np.int64).reshape(2, -1)
    n = int(pairs.max()) + 1 if pairs.size else 0
    predicted = _groups(pairs, n, probabilities >= threshold)
    true = _groups(pairs, n, labels)
    total = len(predicted) + len(true)
    return 2 * len(predicted & true) / total if total else 0.0


def best_threshold(probabilities: np.ndarray, labels: np.ndarray, missed: int = 0,
                   grid: Sequence[float] | None = None,
                   rows: np.ndarray | None = None) -> tuple[float, float]:
    """(threshold, F1): the probability cut with the best link F1 on these (validation) pairs,
    or with ``rows`` (the pairs' node indices, pages kept apart) the best row F1.

    ``missed`` true links were no candidates: they add to FN whatever the threshold.
    """
    probabilities, labels = np.asarray(probabilities, float), np.asarray(labels, bool)
    grid = np.linspace(0.05, 0.95, 19) if grid is None else np.asarray(grid, float)
    if rows is not None:
        scores = [row_f1_at(probabilities, labels, rows, cut) for cut in grid]
        best = int(np.argmax(scores))
        return float(grid[best]), float(scores[best])
    predicted = probabilities[None, :] >= grid[:, None]
    tp = (predicted & labels).sum(axis=1)
    fp = (predicted & ~labels).sum(axis=1)
    fn = (~predicted & labels).sum(axis=1) + missed
    f1 = np.divide(2 * tp, 2 * tp + fp + fn, out=np.zeros(len(grid)),
                   where=(2 * tp + fp + fn) > 0)
    best = int(np.argmax(f1))
    return float(grid[best]), float(f1[best])


def keep_pairs(data: Data, keep: np.ndarray) -> Data:
    """The page with only the candidate pairs ``keep`` (graph and nodes unchanged)."""
    kept = data.clone()
    index = torch.from_numpy(keep)
    kept.pair_index = data.pair_index[:, index]
    kept.pair_geometry = data.pair_geometry[index]
    kept.pair_y = data.pair_y[index]
    return kept


class PairLinks:
    """Positive-weighted binary cross-entropy over candidate pairs (weight negatives /
    positives with ``class_weighting: balanced``); validation link F1 at its best threshold,
    counting true links that were no candidates as missed. With ``negative_ratio``, each epoch
    trains on every positive and a fresh sample of negatives (drawn from the seed and epoch, so
    a resumed run draws the same)."""

    score_name = "val_link_f1"

    def __init__(self, class_weighting: str = "balanced", negative_ratio: float | None = None,
                 seed: int = 0, val_missed: int = 0, rows: bool = False) -> None:
        self.class_weighting = check_class_weighting(class_weighting)
        self.negative_ratio, self.seed, self.val_missed = negative_ratio, seed, val_missed
        self.rows = rows       # validation score and threshold by row F1, not link F1
        self.score_name = "val_row_f1" if rows else "val_link_f1"
        self.loss_fn: torch.nn.Module | None = None
        self.threshold: float | None = 0.5

    def start(self, train_graphs: Sequence[Data]) -> None:
        positives = sum(int(g.pair_y.sum()) for g in train_graphs)
        negatives = sum(int((g.pair_y == 0).sum()) for g in train_graphs)
        if self.negative_ratio is not None:
            negatives = min(negatives, int(self.negative_ratio * max(positives, 1)))
        weight = negatives / max(positives, 1) if self.class_weighting == "balanced" else 1.0
        self.loss_fn = torch.nn.BCEWithLogitsLoss(pos_weight=torch.tensor(weight,
                                                                          dtype=torch.float32))

    def epoch_graphs(self, train_graphs: Sequence[Data], epoch: int) -> Sequence[Data]:
        if self.negative_ratio is None:
            return train_graphs
        rng = np.random.default_rng([self.seed, epoch])
        return [keep_pairs(g, sample_negatives(g.pair_y.numpy() > 0.5, self.negative_ratio, rng))
                for g in train_graphs]

    def loss(self, model: torch.nn.Module, batch: Data) -> torch.Tensor:
        return self.loss_fn(model(batch), batch.pair_y)

    def validate(self, model: torch.nn.Module, batch: Batch) -> tuple[float, float | None]:
        threshold, score = best_threshold(
            model.probabilities(batch), batch.pair_y.numpy() > 0.5, self.val_missed,
            rows=batch.pair_index.numpy() if self.rows else None)
        return score, threshold

    def outputs(self, model: torch.nn.Module, graphs: Sequence[Data]) -> list[np.ndarray]:
        """Link probability of every candidate pair, per page."""
        if not graphs:
            return []
        found = model.probabilities(Batch.from_data_list(list(graphs)))
        return np.split(found, np.cumsum([g.pair_index.shape[1] for g in graphs])[:-1])


def objective_for(target: str, train_cfg: Mapping[str, Any], *, num_classes: int, seed: int,
                  negative_ratio: float | None = None, val_missed: int = 0,
                  rows: bool = False) -> Any:
    """The objective of a task's target (nodes or pairs) under the run's ``train`` options."""
    if target == "pairs":
        return PairLinks(str(train_cfg["class_weighting"]), negative_ratio, seed, val_missed,
                         rows)
    return NodeClasses(num_classes, check_class_weighting(str(train_cfg["class_weighting"])),
                       float(train_cfg.get("label_smoothing", 0.0)))
