"""Link scores: precision, recall and F1 of predicted links, and the entities they group.

The scored frame has one row per candidate pair of a test page plus one row per true link that
was no candidate (``candidate`` False: the model never saw it, so it is predicted ``none``).
``label`` and ``predicted`` are ``link`` or ``none``. Per document, with TP = rows labelled and
predicted ``link``, FP = predicted ``link`` but labelled ``none``, FN = labelled ``link`` but
predicted ``none``: precision = TP / (TP + FP), recall = TP / (TP + FN), F1 = 2TP / (2TP + FP +
FN) (van Rijsbergen's F-measure, beta = 1), each 0 where its denominator is 0.

Entity F1 of word grouping (``same_entity``): predicted entities are the connected components of
the predicted links over the page's words; true entities the ``entity_id`` groups. An entity
counts as correct when its word set is exactly a true entity's word set; single-word entities
count too (keeping a word apart is a decision). F1 = 2 correct / (predicted + true). Row F1
(``rows``) is the same count over groups of two nodes or more (:class:`RowF1`). Words that
appear in no row (no candidate pair, no true link) are single-word entities on both sides, so
each adds one correct, one predicted and one true entity; ``page_nodes`` gives their number.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from dochar.metrics.words import MetricInputError
from dochar.tasks.links import LINK
PAIR_COLUMNS: tuple[str, ...] = (
    "doc_id", "page", "source", "target", "source_entity", "target_entity", "candidate",
    "page_nodes", "label", "predicted", "confidence",
)
GROUP_COUNT_COLUMNS = ("tp", "fp", "fn")


def _grouped(frame: pd.DataFrame, group_col: str | None) -> tuple[pd.Series, np.ndarray]:
    if group_col is None:
        keys = pd.Series("", index=frame.index)
    elif group_col not in frame.columns:
        raise MetricInputError(f"grouping needs column '{group_col}'; the frame has "
                               f"{list(frame.columns)}")
    else:
        keys = frame[group_col].astype(str)
    return keys, np.unique(keys.to_numpy())


def _safe_divide(numerator: np.ndarray, denominator: np.ndarray) -> np.ndarray:
    numerator, denominator = np.asarray(numerator, float), np.asarray(denominator, float)
    return np.divide(numerator, denominator, out=np.zeros(np.broadcast(numerator,
                     denominator).shape), where=denominator > 0)


class LinkScore:
    """Link precision, recall or F1 from per-document (TP, FP, FN) counts."""

    def __init__(self, measure: str = "f1") -> None:
        if measure not in ("f1", "precision", "recall"):
            raise MetricInputError(f"measure must be f1, precision or recall, not {measure!r}")
        self.measure = measure

    def __call__(self, frame: pd.DataFrame) -> float:
        _, counts = self.group_counts(frame, None)
        return float(self.from_counts(counts.sum(axis=0)))

    def group_counts(self, frame: pd.DataFrame, group_col: str | None
                     ) -> tuple[np.ndarray, np.ndarray]:
        for column in ("label", "predicted"):
            if column not in frame.columns:
                raise MetricInputError(f"link scores need column '{column}'")
        keys, groups = _grouped(frame, group_col)
        true = frame["label"].astype(str).to_numpy() == LINK
        predicted = frame["predicted"].astype(str).to_numpy() == LINK
        counts = pd.DataFrame({"tp": true & predicted, "fp": ~true & predicted,
                               "fn": true & ~predicted}).groupby(keys.to_numpy()).sum()
        return groups, counts.reindex(groups).fillna(0).to_numpy(dtype=float)

    def from_counts(self, counts: np.ndarray) -> np.ndarray:
        counts = np.asarray(counts, dtype=float)
        tp, fp, fn = counts[..., 0], counts[..., 1], counts[..., 2]
        if self.measure == "precision":
            return _safe_divide(tp, tp + fp)
        if self.measure == "recall":
            return _safe_divide(tp, tp + fn)
        return _safe_divide(2 * tp, 2 * tp + fp + fn)

    def __repr__(self) -> str:
        return f"LinkScore({self.measure})"


def _page_entity_counts(rows: pd.DataFrame, min_size: int = 1) -> tuple[int, int, int]:
    """(correct, predicted, true) groups of at least ``min_size`` nodes of one page's rows."""
    nodes = pd.unique(np.concatenate([rows["source"].to_numpy(), rows["target"].to_numpy()]))
    index = {node: i for i, node in enumerate(nodes)}
    entity_of = dict(zip(rows["source"], rows["source_entity"].astype(str)))
    entity_of.update(zip(rows["target"], rows["target_entity"].astype(str)))
    positive = rows[rows["predicted"].astype(str).to_numpy() == LINK]
    a = np.array([index[s] for s in positive["source"]], dtype=np.int64)
    b = np.array([index[t] for t in positive["target"]], dtype=np.int64)
    graph = coo_matrix((np.ones(len(a)), (a, b)), shape=(len(nodes), len(nodes)))
    _, component = connected_components(graph, directed=False)
    predicted_sets = {group for group in pd.Series(range(len(nodes))).groupby(component).apply(
        frozenset) if len(group) >= min_size}
    true_entities = {group for group in pd.Series(range(len(nodes))).groupby(
        np.array([entity_of[n] for n in nodes], dtype=object)).apply(frozenset)
        if len(group) >= min_size}
    correct = len(predicted_sets & true_entities)
    # isolated nodes: single-node groups on both sides, counted only when min_size allows
    outside = int(rows["page_nodes"].iloc[0]) - len(nodes) if min_size <= 1 else 0
    return correct + outside, len(predicted_sets) + outside, len(true_entities) + outside


class GroupingF1:
    """Entity F1 of word grouping from per-document (correct, predicted, true) entity counts."""

    min_size = 1

    def __call__(self, frame: pd.DataFrame) -> float:
        _, counts = self.group_counts(frame, None)
        return float(self.from_counts(counts.sum(axis=0)))

    def group_counts(self, frame: pd.DataFrame, group_col: str | None
                     ) -> tuple[np.ndarray, np.ndarray]:
        missing = [c for c in PAIR_COLUMNS[:8] if c not in frame.columns]
        if missing:
            raise MetricInputError(f"grouping scores need column(s) {missing}")
        keys, groups = _grouped(frame, group_col)
        counts = pd.DataFrame(0.0, index=groups, columns=["correct", "predicted", "true"])
        for (group, _, _), rows in frame.groupby([keys, frame["doc_id"].astype(str),
                                                  frame["page"]], sort=False):
            counts.loc[group] += np.array(_page_entity_counts(rows, self.min_size),
                                          dtype=float)
        return groups, counts.to_numpy(dtype=float)

    def from_counts(self, counts: np.ndarray) -> np.ndarray:
        counts = np.asarray(counts, dtype=float)
        return _safe_divide(2 * counts[..., 0], counts[..., 1] + counts[..., 2])

    def __repr__(self) -> str:
        return "GroupingF1()"


class RowF1(GroupingF1):
    """Row F1 (links task ``rows``): the grouping F1 over groups of two nodes or more.

    Predicted rows are the connected components of the predicted links, true rows the nodes'
    row groups (``source_entity`` / ``target_entity``); a predicted row is correct when its set
    of nodes equals a true row's. A lone node is no row on either side (a table row or line
    item of one cell needs no grouping), so F1 = 2 correct / (predicted + true) over rows of
    size >= 2, from per-document counts (bootstrap intervals and paired tests resample them).
    """

    min_size = 2

    def __repr__(self) -> str:
        return "RowF1()"


def link_scorers(kind: str) -> dict[str, LinkScore | GroupingF1]:
    """The scores of a links run that get intervals and paired tests."""
    scorers: dict[str, LinkScore | GroupingF1] = {
        "link_f1": LinkScore("f1"), "link_precision": LinkScore("precision"),
        "link_recall": LinkScore("recall")}
    if kind == "same_entity":
        scorers["entity_f1"] = GroupingF1()
    return scorers
