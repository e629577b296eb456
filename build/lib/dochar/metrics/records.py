"""Record scores: how far a predicted record is from the true one, the way parsing is scored.

A record here is its parse tree (:meth:`dochar.records.assemble.Record.parse`): header label ->
text or list of texts, and the items name -> a list of line items (column -> text).

* **field-level F1** (Kim et al., "OCR-free Document Understanding Transformer", ECCV 2022,
  the JSONParseEvaluator of their code): each tree is flattened into (path, value) pairs, a
  list contributing each element under the same path (so line items are matched as a multiset,
  not by position); a predicted pair is right when an equal pair is left in the truth (which it
  then uses up). Over documents, F1 = TP / (TP + (FP + FN) / 2).
* **TED accuracy** (Hwang et al., "Cost-effective End-to-end Information Extraction for
  Semi-structured Document Images", EMNLP 2021; as Kim et al. 2022 compute it):
  ``max(0, 1 - TED(pred, truth) / TED(empty, truth))`` per document, averaged over documents.
  The tree edit distance is Zhang–Shasha's (:mod:`dochar.metrics.tree_edit`, checked against
  the ``zss`` package); a leaf costs its number of
  characters to insert or delete and the character edit distance to its rival leaf to change;
  an inner node costs 1 (to change: 1 when the names differ, plus a leaf's length when a leaf
  becomes an inner node). Keys are ordered by name in both trees, list elements keep their order.
* **row F1**: a predicted line item counts when an identical item (every column, same texts,
  nothing more) is left in the truth.
* **per-field accuracy**: the share of documents whose values under one label (a header label,
  or one item column taken over all items, as a multiset) are exactly the true ones.
* **straight-through rate**: the share of documents whose whole record is right (header values
  equal, line items equal as a multiset).

Every score is a sum of per-document counts (:func:`record_frame`), so
:mod:`dochar.metrics.intervals` resamples documents for intervals and paired tests.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Mapping, Sequence
from functools import lru_cache
from typing import Any

import numpy as np
import pandas as pd
from rapidfuzz.distance import Levenshtein

from dochar.metrics.tree_edit import PostorderTree, tree_edit_distance
from dochar.metrics.scorers import ColumnMean, _CountScore, _groups
from dochar.metrics.words import MetricInputError

FIELD_F1, TED_ACCURACY, ROW_F1, STRAIGHT_THROUGH = ("field_f1", "ted_accuracy", "row_f1",
                                                    "straight_through")
RECORD_SCORES: tuple[str, ...] = (STRAIGHT_THROUGH, FIELD_F1, TED_ACCURACY, ROW_F1)
FIELD_PREFIX = "field_right/"   # record_frame's per-label 0/1 columns
Tree = Mapping[str, Any]


def flatten(tree: Tree) -> list[tuple[str, str]]:
    """(path, value) pairs: nested keys joined by '.', each list element under its list's path."""
    pairs: list[tuple[str, str]] = []

    def walk(value: Any, path: str) -> None:
        if isinstance(value, Mapping):
            for key, child in value.items():
                walk(child, f"{path}.{key}" if path else str(key))
        elif isinstance(value, (list, tuple)):
            for child in value:
                walk(child, path)
        elif str(value).strip():
            pairs.append((path, str(value)))

    walk(tree, "")
    return pairs


def field_counts(pred: Tree, true: Tree) -> tuple[int, int, int]:
    """(TP, FP, FN) of the flattened pairs, each true pair usable once."""
    left = Counter(flatten(true))
    tp = fp = 0
    for pair in flatten(pred):
        if left[pair] > 0:
            left[pair] -= 1
            tp += 1
        else:
            fp += 1
    return tp, fp, sum(left.values())


_LEAF = "\x00leaf:"


def to_tree(tree: Tree) -> tuple[str, list]:
    """The record as a tree of ``(label, children)``: inner nodes named by key ("<item>" for a
    line item), leaves holding the texts."""
    def build(value: Any, name: str) -> tuple[str, list]:
        kids: list = []
        if isinstance(value, Mapping):
            kids = [build(value[key], str(key)) for key in sorted(value)]
        elif isinstance(value, (list, tuple)):
            kids = [build(child, "<item>") if isinstance(child, Mapping)
                    else (f"{_LEAF}{child}", []) for child in value]
        else:
            kids = [(f"{_LEAF}{value}", [])]
        return name, kids

    return build(tree, "<record>")


def _postorder(tree: Tree) -> PostorderTree:
    return PostorderTree.build(to_tree(tree), children=lambda node: node[1],
                               label=lambda node: node[0])


def _is_leaf(label: str) -> bool:
    return label.startswith(_LEAF)


def _insert_cost(label: str) -> int:
    return len(label) - len(_LEAF) if _is_leaf(label) else 1


@lru_cache(maxsize=1 << 16)
def _label_cost(a: str, b: str) -> int:
    la, lb = _is_leaf(a), _is_leaf(b)
    if la and lb:
        return Levenshtein.distance(a[len(_LEAF):], b[len(_LEAF):])
    if la != lb:
        return 1 + len(a if la else b) - len(_LEAF)
    return int(a != b)


def tree_distance(pred: Tree, true: Tree) -> float:
    """Zhang–Shasha tree edit distance between two records with the costs above."""
    return float(tree_edit_distance(_postorder(pred), _postorder(true), _insert_cost,
                                    _label_cost))


def distance_from_empty(true: Tree) -> float:
    """TED(empty, true) without the search: the empty record's root matches ``true``'s root
    (same name, cost 0) and every other node is inserted, so it is the sum of insert costs."""
    return float(sum(_insert_cost(label) for label in _postorder(true).labels[:-1]))


def ted_accuracy(pred: Tree, true: Tree) -> float:
    """max(0, 1 - TED(pred, true) / TED(empty, true)); 1.0 when both are empty."""
    distance = 0.0 if pred == true else tree_distance(pred, true)
    scale = distance_from_empty(true)
    if scale == 0:
        return 1.0 if distance == 0 else 0.0
    return max(0.0, 1.0 - distance / scale)


def _item_key(item: Mapping[str, Any]) -> tuple:
    return tuple(sorted((str(k), str(v)) for k, v in item.items()))


def row_counts(pred: Tree, true: Tree, items_name: str) -> tuple[int, int, int]:
    """(right, predicted, true) line items; a predicted item is right when an identical true
    item is left."""
    left = Counter(_item_key(i) for i in true.get(items_name, []))
    predicted = [_item_key(i) for i in pred.get(items_name, [])]
    right = 0
    for key in predicted:
        if left[key] > 0:
            left[key] -= 1
            right += 1
    return right, len(predicted), len(true.get(items_name, []))


def _label_values(tree: Tree, label: str, items_name: str) -> Counter:
    if label in tree:
        value = tree[label]
        return Counter(map(str, value) if isinstance(value, (list, tuple)) else [str(value)])
    return Counter(str(i[label]) for i in tree.get(items_name, []) if label in i)


def same_record(pred: Tree, true: Tree, items_name: str) -> bool:
    """Header values equal and line items equal as a multiset."""
    strip = {k: v for k, v in pred.items() if k != items_name}
    if strip != {k: v for k, v in true.items() if k != items_name}:
        return False
    return (Counter(_item_key(i) for i in pred.get(items_name, []))
            == Counter(_item_key(i) for i in true.get(items_name, [])))


def record_frame(pred: Mapping[str, Tree], true: Mapping[str, Tree], labels: Sequence[str],
                 items_name: str) -> pd.DataFrame:
    """One row per true document: the counts every record score sums (a document without a
    prediction counts as an empty record); ``labels`` get per-field 0/1 columns."""
    extra = sorted(set(pred) - set(true))
    if extra:
        raise MetricInputError(f"predicted records for documents with no true record: "
                               f"{extra[:5]}")
    rows = []
    for doc_id, truth in true.items():
        guess = pred.get(doc_id, {})
        tp, fp, fn = field_counts(guess, truth)
        right, predicted, n_true = row_counts(guess, truth, items_name)
        row = {"doc_id": doc_id, "field_tp": tp, "field_fp": fp, "field_fn": fn,
               "ted_accuracy": ted_accuracy(guess, truth), "row_right": right,
               "row_predicted": predicted, "row_true": n_true,
               "straight_through": float(same_record(guess, truth, items_name))}
        for label in labels:
            row[f"{FIELD_PREFIX}{label}"] = float(_label_values(guess, label, items_name)
                                                  == _label_values(truth, label, items_name))
        rows.append(row)
    return pd.DataFrame(rows)


class MatchF1(_CountScore):
    """F1 = right / (right + (predicted - right + true - right) / 2) from summed counts."""

    def __init__(self, right: str, predicted: str | None, true: str | None,
                 wrong: tuple[str, str] | None = None) -> None:
        self.columns = (right, predicted, true)
        self.wrong = wrong   # (FP, FN) columns, when they are counted instead of totals

    def group_counts(self, frame, group_col):
        frame, group_col = _groups(frame, group_col)
        right = frame[self.columns[0]].astype(float)
        if self.wrong:
            predicted = right + frame[self.wrong[0]].astype(float)
            truth = right + frame[self.wrong[1]].astype(float)
        else:
            predicted = frame[self.columns[1]].astype(float)
            truth = frame[self.columns[2]].astype(float)
        counts = pd.DataFrame({"r": right, "p": predicted, "t": truth}).groupby(
            frame[group_col].astype(str)).sum().sort_index()
        return counts.index.to_numpy(dtype=str), counts.to_numpy(dtype=float)

    def from_counts(self, counts):
        counts = np.asarray(counts, dtype=float)
        denominator = counts[..., 1] + counts[..., 2]
        return np.divide(2 * counts[..., 0], denominator, out=np.ones(denominator.shape),
                         where=denominator > 0)

    def __repr__(self) -> str:
        return f"MatchF1({self.columns[0]})"


def record_scorers() -> dict[str, _CountScore]:
    """The record scores, headline (straight-through rate) first, over a record_frame."""
    return {STRAIGHT_THROUGH: ColumnMean("straight_through"),
            FIELD_F1: MatchF1("field_tp", None, None, wrong=("field_fp", "field_fn")),
            TED_ACCURACY: ColumnMean("ted_accuracy"),
            ROW_F1: MatchF1("row_right", "row_predicted", "row_true")}


def field_accuracy(frame: pd.DataFrame) -> dict[str, float]:
    """label -> share of documents whose values under that label are right."""
    return {c[len(FIELD_PREFIX):]: float(frame[c].mean()) for c in frame.columns
            if c.startswith(FIELD_PREFIX)}
