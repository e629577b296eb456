"""Entity-level scores: does the model recover whole fields, not just most of their words?

The rule, exactly (it matches seqeval's default chunk scoring on the tags :func:`to_bio` makes):

* **Reading order.** Words are ordered per page (``doc_cols``) by ``order_col`` when given;
  otherwise by dochar's one reading order (:func:`dochar.data.word_table.reading_order`:
  lines by half-height overlap, top to bottom, then left to right).
* **True entities.** The words sharing (doc, page, ``entity_id``), labelled with their true label
  (all words of an entity must agree). A word with an empty ``entity_id`` is an entity on its own.
  Entities whose label is in ``ignore`` (FUNSD's ``other``) are not scored.
* **Predicted entities.** Maximal runs of consecutive words in reading order, on one page, with
  the same predicted label not in ``ignore``. The true grouping is never consulted, since a word
  classifier says nothing about boundaries: two adjacent true entities of one class that the model
  labels right merge into one predicted run and both count as missed.
* **Correct.** A predicted entity is correct iff it has exactly the words and the label of one
  true entity; a partly labelled entity is therefore wrong. Precision = correct / predicted,
  recall = correct / true, F1 = 2·correct / (predicted + true), micro-averaged over entities.

A true entity that reading order splits into pieces (``n_true_fragmented``) can never equal a run,
so it always counts as missed; seqeval would instead see each piece as its own chunk, which is the
one case where the two disagree.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from dochar.data.word_table import reading_order as word_table_reading_order
from dochar.metrics.words import MetricInputError, check_labels


@dataclass
class EntityScores:
    precision: float
    recall: float
    f1: float
    per_class: pd.DataFrame      # index = label; precision, recall, f1, support, n_pred, n_correct
    n_true: int
    n_pred: int
    n_correct: int = 0
    n_true_fragmented: int = 0

    def to_flat(self, prefix: str = "") -> dict[str, float]:
        flat = {f"{prefix}entity_{name}": float(getattr(self, name))
                for name in ("precision", "recall", "f1")}
        for label, row in self.per_class.iterrows():
            flat[f"{prefix}entity_f1/{label}"] = float(row["f1"])
        return flat


@dataclass
class _Ordered:
    """Word arrays in reading order plus the page of each word."""

    page: np.ndarray         # page code, non-decreasing
    true: np.ndarray
    pred: np.ndarray
    entity: np.ndarray       # entity code, unique across pages
    group: np.ndarray | None


def line_order(boxes: np.ndarray) -> np.ndarray:
    """Reading order of one page's boxes (x0, y0, x1, y1): dochar's one reading order
    (:func:`dochar.data.word_table.reading_order`), ties by row position."""
    return word_table_reading_order(boxes)


def reading_order(frame: pd.DataFrame, doc_cols: Sequence[str] = ("doc_id", "page"),
                  order_col: str | None = None) -> np.ndarray:
    """Row positions of ``frame`` in reading order, page by page (see the module rule)."""
    missing = [c for c in (*doc_cols, *([order_col] if order_col else [])) if c not in frame]
    if missing:
        raise MetricInputError(f"reading order needs column(s) {missing}")
    if order_col is not None:
        pages = frame.groupby(list(doc_cols), sort=True, observed=True).indices
        keys = frame[order_col].to_numpy()
        return np.concatenate([rows[np.argsort(keys[rows], kind="stable")]
                               for rows in pages.values()])
    box_cols = ["x0", "y0", "x1", "y1"]
    if any(c not in frame for c in box_cols):
        raise MetricInputError(f"reading order needs box columns {box_cols} or an order_col")
    page = _sorted_key_codes(frame, doc_cols)
    rows = np.flatnonzero(page >= 0)                # rows without a page key have no place
    boxes = frame[box_cols].to_numpy(dtype=float)[rows]
    return rows[word_table_reading_order(boxes, page=page[rows])]   # all pages in one pass


def _sorted_key_codes(frame: pd.DataFrame, columns: Sequence[str]) -> np.ndarray:
    """A number per row that orders rows as their keys sort (column by column, as a sorted
    ``groupby`` numbers its groups); -1 where a key is missing."""
    code = np.zeros(len(frame), dtype=np.int64)
    for column in columns:
        values, distinct = pd.factorize(frame[column], sort=True)
        code = np.where((code < 0) | (values < 0), -1, code * len(distinct) + values)
    return code


def _ordered(frame: pd.DataFrame, labels: Sequence[str] | None, *, true_col: str, pred_col: str,
             entity_col: str, doc_cols: Sequence[str], order_col: str | None,
             group_col: str | None = None) -> _Ordered:
    if len(frame) == 0:
        raise MetricInputError("no words to score")
    for column in (true_col, pred_col, entity_col, *([group_col] if group_col else [])):
        if column not in frame.columns:
            raise MetricInputError(f"entity scores need column '{column}'; the frame has "
                                   f"{list(frame.columns)}")
    if labels is not None:
        check_labels(frame[true_col].astype(str), labels, f"column '{true_col}'")
        check_labels(frame[pred_col].astype(str), labels, f"column '{pred_col}'")
    order = reading_order(frame, doc_cols, order_col)
    words = frame.iloc[order]
    page = words.groupby(list(doc_cols), sort=False, observed=True).ngroup().to_numpy()
    entity_ids = words[entity_col].astype("string").fillna("").to_numpy(dtype=object)
    singletons = entity_ids == ""
    entity_ids[singletons] = [f"\0word{i}" for i in np.flatnonzero(singletons)]
    entity = pd.MultiIndex.from_arrays([page, entity_ids]).factorize()[0]
    true = words[true_col].astype(str).to_numpy(dtype=object)
    mixed = pd.Series(true).groupby(entity).nunique()
    if (mixed > 1).any():
        first = int(np.flatnonzero(entity == mixed.index[mixed > 1][0])[0])
        row = words.iloc[first]
        where = ", ".join(f"{c}={row[c]}" for c in doc_cols)
        raise MetricInputError(
            f"entity '{row[entity_col]}' ({where}) has words with different true labels "
            f"{sorted(set(true[entity == entity[first]]))}; an entity has one label")
    group = words[group_col].astype(str).to_numpy() if group_col else None
    return _Ordered(page, true, words[pred_col].astype(str).to_numpy(dtype=object), entity, group)


def to_bio(frame: pd.DataFrame, *, ignore: Sequence[str] = ("other",), true_col: str = "label",
           pred_col: str = "predicted", entity_col: str = "entity_id",
           doc_cols: Sequence[str] = ("doc_id", "page"), order_col: str | None = None
           ) -> tuple[list[list[str]], list[list[str]]]:
    """True and predicted IOB2 tags, one sequence per page in reading order.

    True: ``B-`` on the first word of each entity, ``I-`` on its later words. Predicted: ``B-``
    wherever the predicted label changes, ``I-`` while it stays. Ignored labels become ``O``.
    """
    words = _ordered(frame, None, true_col=true_col, pred_col=pred_col, entity_col=entity_col,
                     doc_cols=doc_cols, order_col=order_col)
    ignored = set(ignore)
    seen: set[int] = set()
    true_tags, pred_tags = [], []
    previous_page, previous_pred = -1, None
    for page, true, pred, entity in zip(words.page, words.true, words.pred, words.entity):
        if page != previous_page:
            true_tags.append([])
            pred_tags.append([])
            previous_page, previous_pred = page, None
        true_tags[-1].append("O" if true in ignored else
                             f"{'I' if entity in seen else 'B'}-{true}")
        seen.add(entity)
        pred_tags[-1].append("O" if pred in ignored else
                             f"{'I' if pred == previous_pred else 'B'}-{pred}")
        previous_pred = pred
    return true_tags, pred_tags


def entity_tables(frame: pd.DataFrame, labels: Sequence[str], *, ignore: Sequence[str],
                  true_col: str, pred_col: str, entity_col: str, doc_cols: Sequence[str],
                  order_col: str | None = None, group_col: str | None = None
                  ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """True entities (label, contiguous, group) and predicted runs (label, correct, group)."""
    words = _ordered(frame, labels, true_col=true_col, pred_col=pred_col, entity_col=entity_col,
                     doc_cols=doc_cols, order_col=order_col, group_col=group_col)
    ignored = set(ignore)
    position = np.arange(len(words.page))
    group = words.group if words.group is not None else np.zeros(len(position), dtype=object)
    true = pd.DataFrame({"entity": words.entity, "label": words.true, "position": position,
                         "group": group})
    true = true[~true["label"].isin(ignored)]
    spans = true.groupby("entity", sort=True).agg(
        label=("label", "first"), start=("position", "min"), end=("position", "max"),
        size=("position", "size"), group=("group", "first"))
    spans["contiguous"] = spans["end"] - spans["start"] + 1 == spans["size"]

    new_run = np.ones(len(position), dtype=bool)
    new_run[1:] = (words.page[1:] != words.page[:-1]) | (words.pred[1:] != words.pred[:-1])
    runs = pd.DataFrame({"run": np.cumsum(new_run), "label": words.pred, "position": position,
                         "group": group})
    runs = runs[~runs["label"].isin(ignored)].groupby("run", sort=True).agg(
        label=("label", "first"), start=("position", "min"), end=("position", "max"),
        group=("group", "first"))
    exact = spans.loc[spans["contiguous"], ["start", "end", "label"]]
    runs = runs.merge(exact, on=["start", "end"], how="left", suffixes=("", "_true"))
    runs["correct"] = (runs["label_true"] == runs["label"]).fillna(False).astype(bool)
    return spans.reset_index(drop=True), runs.drop(columns="label_true")


def prf(correct: np.ndarray, n_pred: np.ndarray, n_true: np.ndarray
        ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Precision, recall, F1 from counts (0 where undefined), vectorised."""
    correct, n_pred, n_true = (np.asarray(a, dtype=float) for a in (correct, n_pred, n_true))
    zeros = np.zeros(np.broadcast(correct, n_pred, n_true).shape)
    precision = np.divide(correct, n_pred, out=zeros.copy(), where=n_pred > 0)
    recall = np.divide(correct, n_true, out=zeros.copy(), where=n_true > 0)
    f1 = np.divide(2 * correct, n_pred + n_true, out=zeros.copy(), where=(n_pred + n_true) > 0)
    return precision, recall, f1


def entity_scores(frame: pd.DataFrame, labels: Sequence[str], *,
                  ignore: Sequence[str] = ("other",), true_col: str = "label",
                  pred_col: str = "predicted", entity_col: str = "entity_id",
                  doc_cols: Sequence[str] = ("doc_id", "page"),
                  order_col: str | None = None) -> EntityScores:
    """Entity precision, recall and F1 under the rule in this module's docstring."""
    spans, runs = entity_tables(frame, labels, ignore=ignore, true_col=true_col,
                                pred_col=pred_col, entity_col=entity_col, doc_cols=doc_cols,
                                order_col=order_col)
    scored = [str(label) for label in labels if label not in set(ignore)]
    support = spans["label"].value_counts().reindex(scored, fill_value=0)
    n_pred = runs["label"].value_counts().reindex(scored, fill_value=0)
    n_correct = runs.loc[runs["correct"], "label"].value_counts().reindex(scored, fill_value=0)
    precision, recall, f1 = prf(n_correct.to_numpy(), n_pred.to_numpy(), support.to_numpy())
    per_class = pd.DataFrame({"precision": precision, "recall": recall, "f1": f1,
                              "support": support.to_numpy(dtype=int),
                              "n_pred": n_pred.to_numpy(dtype=int),
                              "n_correct": n_correct.to_numpy(dtype=int)},
                             index=pd.Index(scored, name="label"))
    total = prf(n_correct.sum(), n_pred.sum(), support.sum())
    return EntityScores(precision=float(total[0]), recall=float(total[1]), f1=float(total[2]),
                        per_class=per_class, n_true=int(support.sum()), n_pred=int(n_pred.sum()),
                        n_correct=int(n_correct.sum()),
                        n_true_fragmented=int((~spans["contiguous"]).sum()))
