"""Scores that are a function of counts summed over documents.

Resampling documents (bootstrap, randomisation) then needs no re-scoring of words: count each
document once, and every resample is a weighted sum of those count arrays followed by one
vectorised ``from_counts``. Each scorer is also a plain ``frame -> float`` callable, so any code
that takes a score function accepts it; code that sees ``group_counts`` can take the fast road.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Protocol, runtime_checkable

import numpy as np
import pandas as pd

from dochar.metrics.entities import entity_tables
from dochar.metrics.words import (
    MacroOver,
    MetricInputError,
    grouped_confusion,
    macro_f1_from_confusion,
    micro_f1_from_confusion,
)


@runtime_checkable
class AdditiveScore(Protocol):
    def __call__(self, frame: pd.DataFrame) -> float: ...

    def group_counts(self, frame: pd.DataFrame, group_col: str | None
                     ) -> tuple[np.ndarray, np.ndarray]:
        """(sorted group ids as str, counts of shape (G, *count_shape)); one group if None."""
        ...

    def from_counts(self, counts: np.ndarray) -> np.ndarray:
        """The score for each count array, vectorised over leading axes."""
        ...


def _groups(frame: pd.DataFrame, group_col: str | None) -> tuple[pd.DataFrame, str]:
    if group_col is None:
        return frame.assign(_all_words=""), "_all_words"
    if group_col not in frame.columns:
        raise MetricInputError(f"grouping needs column '{group_col}'; the frame has "
                               f"{list(frame.columns)}")
    return frame, group_col


class _CountScore:
    def __call__(self, frame: pd.DataFrame) -> float:
        _, counts = self.group_counts(frame, None)
        return float(self.from_counts(counts.sum(axis=0)))

    def group_counts(self, frame: pd.DataFrame, group_col: str | None
                     ) -> tuple[np.ndarray, np.ndarray]:
        raise NotImplementedError

    def from_counts(self, counts: np.ndarray) -> np.ndarray:
        raise NotImplementedError


class WordF1(_CountScore):
    """Word macro- or micro-F1 (as :func:`~dochar.metrics.score_words`) from confusion counts."""

    def __init__(self, labels: Sequence[str], average: str = "macro", *,
                 macro_over: MacroOver = "present", true_col: str = "label",
                 pred_col: str = "predicted") -> None:
        if average not in ("macro", "micro"):
            raise MetricInputError(f"average must be 'macro' or 'micro', not {average!r}")
        self.labels = [str(label) for label in labels]
        self.average, self.macro_over = average, macro_over
        self.true_col, self.pred_col = true_col, pred_col

    def group_counts(self, frame, group_col):
        frame, group_col = _groups(frame, group_col)
        return grouped_confusion(frame, self.labels, group_col, true_col=self.true_col,
                                 pred_col=self.pred_col)

    def from_counts(self, counts):
        if self.average == "micro":
            return micro_f1_from_confusion(counts)
        return macro_f1_from_confusion(counts, macro_over=self.macro_over)

    def __repr__(self) -> str:
        return f"WordF1({self.average})"


class EntityF1(_CountScore):
    """Entity micro-F1 (as :func:`~dochar.metrics.entity_scores`) from (correct, predicted, true).

    Counts per group: an entity belongs to the group of its first word in reading order.
    """

    def __init__(self, labels: Sequence[str], *, ignore: Sequence[str] = ("other",),
                 true_col: str = "label", pred_col: str = "predicted",
                 entity_col: str = "entity_id", doc_cols: Sequence[str] = ("doc_id", "page"),
                 order_col: str | None = None) -> None:
        self.labels = [str(label) for label in labels]
        self.options = dict(ignore=tuple(ignore), true_col=true_col, pred_col=pred_col,
                            entity_col=entity_col, doc_cols=tuple(doc_cols), order_col=order_col)

    def group_counts(self, frame, group_col):
        frame, group_col = _groups(frame, group_col)
        spans, runs = entity_tables(frame, self.labels, group_col=group_col, **self.options)
        groups = np.unique(frame[group_col].astype(str).to_numpy())
        counts = pd.DataFrame({
            "correct": runs.groupby("group")["correct"].sum(),
            "predicted": runs.groupby("group").size(),
            "true": spans.groupby("group").size(),
        }).reindex(groups).fillna(0)
        return groups, counts.to_numpy(dtype=float)

    def from_counts(self, counts):
        counts = np.asarray(counts, dtype=float)
        correct, denominator = 2 * counts[..., 0], counts[..., 1] + counts[..., 2]
        return np.divide(correct, denominator, out=np.zeros(denominator.shape),
                         where=denominator > 0)

    def __repr__(self) -> str:
        return "EntityF1()"


class ColumnMean(_CountScore):
    """Mean of a numeric column over all words (e.g. a 0/1 ``correct`` column = accuracy)."""

    def __init__(self, column: str) -> None:
        self.column = column

    def group_counts(self, frame, group_col):
        frame, group_col = _groups(frame, group_col)
        if self.column not in frame.columns:
            raise MetricInputError(f"column '{self.column}' not in the frame")
        values = pd.to_numeric(frame[self.column], errors="coerce")
        if values.isna().any():
            raise MetricInputError(f"column '{self.column}' has non-numeric values at rows "
                                   f"{list(np.flatnonzero(values.isna())[:10])}")
        grouped = values.groupby(frame[group_col].astype(str)).agg(["sum", "size"]).sort_index()
        return grouped.index.to_numpy(dtype=str), grouped.to_numpy(dtype=float)

    def from_counts(self, counts):
        counts = np.asarray(counts, dtype=float)
        return np.divide(counts[..., 0], counts[..., 1], out=np.zeros(counts.shape[:-1]),
                         where=counts[..., 1] > 0)

    def __repr__(self) -> str:
        return f"ColumnMean({self.column!r})"
