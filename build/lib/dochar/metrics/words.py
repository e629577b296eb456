"""Word-level scores: per-class precision / recall / F1, the confusion matrix and their averages.

Every word is one classification decision, so these are plain multi-class scores computed with
scikit-learn over a fixed, ordered label set. The only choice of ours is which classes enter the
macro average (see :func:`score_words`).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np
import pandas as pd
from sklearn.metrics import confusion_matrix, precision_recall_fscore_support

from dochar.errors import DocharError

MacroOver = Literal["present", "all"]


class MetricInputError(DocharError):
    """Raised for scoring input that cannot be scored as given (says what and where)."""


@dataclass
class WordScores:
    """Per-class and averaged word scores over one ordered label set."""

    labels: list[str]
    per_class: pd.DataFrame          # index = label; precision, recall, f1, support
    macro_f1: float
    micro_f1: float
    weighted_f1: float
    accuracy: float
    confusion: np.ndarray            # counts; rows = true, columns = predicted, order = labels
    confusion_normalised: np.ndarray  # row-normalised; rows without support are all zero

    def to_flat(self, prefix: str = "") -> dict[str, float]:
        """Flat ``name -> value`` map for trackers, e.g. ``f1/analyte`` and ``macro_f1``."""
        flat = {f"{prefix}{name}": float(getattr(self, name))
                for name in ("macro_f1", "micro_f1", "weighted_f1", "accuracy")}
        for label, row in self.per_class.iterrows():
            for column in ("precision", "recall", "f1", "support"):
                flat[f"{prefix}{column}/{label}"] = float(row[column])
        return flat


def check_labels(values: Sequence[str], labels: Sequence[str], what: str) -> None:
    """Refuse values outside the label set instead of letting scikit-learn drop them silently."""
    if len(set(labels)) != len(labels):
        raise MetricInputError(f"label set has duplicates: {list(labels)}")
    unknown = sorted(set(map(str, values)) - set(labels))
    if unknown:
        raise MetricInputError(f"{what} contains label(s) {unknown[:10]} outside the label set "
                               f"{list(labels)}")


def score_words(y_true: Sequence[str], y_pred: Sequence[str], labels: Sequence[str], *,
                macro_over: MacroOver = "present") -> WordScores:
    """Score word predictions against the truth over the ordered ``labels``.

    ``macro_over="present"`` (default) averages F1 over the classes that occur in ``y_true`` or
    ``y_pred``: a class that a small test split happens not to contain, and that the model never
    predicts, says nothing about the model and would otherwise pull the average down by a whole
    class worth of zero. A class that is predicted but never true stays in (its F1 is 0).
    ``macro_over="all"`` averages over every label, as scikit-learn's ``average="macro"`` with
    ``labels=`` does. Micro F1 equals accuracy here because every word has exactly one true and
    one predicted class inside the label set.
    """
    labels = [str(label) for label in labels]
    y_true = [str(v) for v in y_true]
    y_pred = [str(v) for v in y_pred]
    if len(y_true) != len(y_pred):
        raise MetricInputError(f"y_true has {len(y_true)} words but y_pred has {len(y_pred)}")
    if not y_true:
        raise MetricInputError("no words to score")
    if macro_over not in ("present", "all"):
        raise MetricInputError(f"macro_over must be 'present' or 'all', not {macro_over!r}")
    check_labels(y_true, labels, "y_true")
    check_labels(y_pred, labels, "y_pred")
    precision, recall, f1, support = precision_recall_fscore_support(
        y_true, y_pred, labels=labels, average=None, zero_division=0)
    _, _, weighted, _ = precision_recall_fscore_support(
        y_true, y_pred, labels=labels, average="weighted", zero_division=0)
    _, _, micro, _ = precision_recall_fscore_support(
        y_true, y_pred, labels=labels, average="micro", zero_division=0)
    counts = confusion_matrix(y_true, y_pred, labels=labels)
    per_class = pd.DataFrame({"precision": precision, "recall": recall, "f1": f1,
                              "support": support.astype(int)}, index=pd.Index(labels, name="label"))
    return WordScores(
        labels=labels, per_class=per_class,
        macro_f1=float(macro_f1_from_confusion(counts, macro_over=macro_over)),
        micro_f1=float(micro), weighted_f1=float(weighted),
        accuracy=float(np.trace(counts) / counts.sum()),
        confusion=counts, confusion_normalised=row_normalise(counts),
    )


def row_normalise(counts: np.ndarray) -> np.ndarray:
    totals = counts.sum(axis=-1, keepdims=True)
    return np.divide(counts, totals, out=np.zeros(counts.shape, dtype=float), where=totals > 0)


def f1_from_confusion(counts: np.ndarray) -> np.ndarray:
    """Per-class F1 = 2·TP / (2·TP + FP + FN) for confusion matrices of shape (..., L, L).

    Same value as 2PR/(P+R); a class with no true and no predicted word gets 0 (zero_division=0).
    """
    counts = np.asarray(counts, dtype=float)
    true_positive = np.diagonal(counts, axis1=-2, axis2=-1)
    denominator = counts.sum(axis=-1) + counts.sum(axis=-2)   # (TP+FN) + (TP+FP)
    return np.divide(2 * true_positive, denominator, out=np.zeros(denominator.shape),
                     where=denominator > 0)


def macro_f1_from_confusion(counts: np.ndarray, *, macro_over: MacroOver = "present") -> np.ndarray:
    """Macro F1 straight from confusion counts, vectorised over leading axes (for resampling)."""
    counts = np.asarray(counts, dtype=float)
    if counts.ndim < 2 or counts.shape[-1] != counts.shape[-2]:
        raise MetricInputError(f"confusion counts must have shape (..., L, L), got {counts.shape}")
    f1 = f1_from_confusion(counts)
    if macro_over == "all":
        return f1.mean(axis=-1)
    present = (counts.sum(axis=-1) + counts.sum(axis=-2)) > 0
    n_present = present.sum(axis=-1)
    return np.divide((f1 * present).sum(axis=-1), n_present,
                     out=np.zeros(n_present.shape), where=n_present > 0)


def micro_f1_from_confusion(counts: np.ndarray) -> np.ndarray:
    """Micro F1 (= accuracy for single-label words) from counts of shape (..., L, L)."""
    counts = np.asarray(counts, dtype=float)
    total = counts.sum(axis=(-2, -1))
    correct = np.trace(counts, axis1=-2, axis2=-1)
    return np.divide(correct, total, out=np.zeros(np.shape(total)), where=total > 0)


def grouped_confusion(frame: pd.DataFrame, labels: Sequence[str], group_col: str, *,
                      true_col: str = "label", pred_col: str = "predicted"
                      ) -> tuple[np.ndarray, np.ndarray]:
    """One confusion matrix per group, in one pass: (sorted group ids, counts (G, L, L))."""
    for column in (group_col, true_col, pred_col):
        if column not in frame.columns:
            raise MetricInputError(f"scoring needs column '{column}'; the frame has "
                                   f"{list(frame.columns)}")
    labels = [str(label) for label in labels]
    true = frame[true_col].astype(str)
    pred = frame[pred_col].astype(str)
    check_labels(true, labels, f"column '{true_col}'")
    check_labels(pred, labels, f"column '{pred_col}'")
    groups, group_codes = np.unique(frame[group_col].astype(str).to_numpy(), return_inverse=True)
    index = {label: i for i, label in enumerate(labels)}
    true_codes = true.map(index).to_numpy(dtype=np.int64)
    pred_codes = pred.map(index).to_numpy(dtype=np.int64)
    n = len(labels)
    flat = (group_codes * n + true_codes) * n + pred_codes
    counts = np.bincount(flat, minlength=len(groups) * n * n).reshape(len(groups), n, n)
    return groups, counts


def per_group_scores(frame: pd.DataFrame, labels: Sequence[str], group_col: str = "layout_id", *,
                     true_col: str = "label", pred_col: str = "predicted",
                     doc_col: str = "doc_id", macro_over: MacroOver = "present") -> pd.DataFrame:
    """Macro-F1, micro-F1, word and document counts for each layout (or any other group)."""
    if doc_col not in frame.columns:
        raise MetricInputError(f"per-group scores need column '{doc_col}'")
    groups, counts = grouped_confusion(frame, labels, group_col, true_col=true_col,
                                       pred_col=pred_col)
    n_docs = frame.groupby(frame[group_col].astype(str))[doc_col].nunique()
    return pd.DataFrame({
        "macro_f1": macro_f1_from_confusion(counts, macro_over=macro_over),
        "micro_f1": micro_f1_from_confusion(counts),
        "n_words": counts.sum(axis=(1, 2)).astype(int),
        "n_docs": n_docs.reindex(groups).to_numpy(dtype=int),
    }, index=pd.Index(groups, name=group_col))
