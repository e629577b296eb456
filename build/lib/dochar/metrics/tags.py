"""Entity scores of boundary tags (task ``entity_tags``): the way the field scores taggers.

True chunks are those of the true tag sequence, predicted chunks those of the predicted one
under :func:`dochar.tasks.entity_tags.decode` (the conlleval repair rule), both per page in
dochar's one reading order. A predicted chunk is correct iff its first word, last word and
label equal a true chunk's. Precision = correct / predicted, recall = correct / true,
F1 = 2·correct / (predicted + true), micro-averaged over chunks: seqeval's ``f1_score`` in strict
mode on the repaired tags (and in default mode on the raw tags), checked against seqeval in
tests/metrics/test_tags.py. Per-document counts make it a resampling-ready additive score.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from dochar.data.word_table import reading_order
from dochar.metrics.entities import EntityScores, prf
from dochar.metrics.scorers import EntityF1, _groups
from dochar.metrics.words import MetricInputError
from dochar.tasks.entity_tags import check_scheme, decode, split_tag

BOX_COLUMNS = ["x0", "y0", "x1", "y1"]


def tag_chunks(frame: pd.DataFrame, scheme: str, *, true_col: str = "label",
               pred_col: str = "predicted", group_col: str | None = None
               ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """True and predicted chunks: one row each with label, group and (for predicted) correct."""
    check_scheme(scheme)
    needed = ["doc_id", "page", "word_id", *BOX_COLUMNS, true_col, pred_col,
              *([group_col] if group_col else [])]
    missing = [c for c in needed if c not in frame.columns]
    if missing:
        raise MetricInputError(f"tag scores need column(s) {missing}")
    if len(frame) == 0:
        raise MetricInputError("no words to score")
    true_rows, pred_rows = [], []
    for _, words in frame.groupby(["doc_id", "page"], sort=True, observed=True):
        order = reading_order(words[BOX_COLUMNS].to_numpy(float), words["word_id"].to_numpy())
        group = "" if group_col is None else str(words[group_col].iloc[0])
        true = decode(words[true_col].astype(str).to_numpy()[order].tolist(), scheme)
        pred = decode(words[pred_col].astype(str).to_numpy()[order].tolist(), scheme)
        truth = set(true)
        true_rows += [(label, group) for _, _, label in true]
        pred_rows += [(label, group, chunk in truth) for chunk in pred
                      for label in [chunk[2]]]
    return (pd.DataFrame(true_rows, columns=["label", "group"]),
            pd.DataFrame(pred_rows, columns=["label", "group", "correct"]))


def scored_labels(tags: Sequence[str]) -> list[str]:
    return list(dict.fromkeys(label for _, label in map(split_tag, tags) if label))


def tag_entity_scores(frame: pd.DataFrame, tags: Sequence[str], scheme: str, *,
                      true_col: str = "label", pred_col: str = "predicted") -> EntityScores:
    """Chunk precision, recall and F1, overall and per label (the module rule)."""
    true, pred = tag_chunks(frame, scheme, true_col=true_col, pred_col=pred_col)
    labels = scored_labels(tags)
    support = true["label"].value_counts().reindex(labels, fill_value=0)
    n_pred = pred["label"].value_counts().reindex(labels, fill_value=0)
    n_correct = pred.loc[pred["correct"].astype(bool), "label"].value_counts().reindex(
        labels, fill_value=0)
    precision, recall, f1 = prf(n_correct.to_numpy(), n_pred.to_numpy(), support.to_numpy())
    per_class = pd.DataFrame({"precision": precision, "recall": recall, "f1": f1,
                              "support": support.to_numpy(dtype=int),
                              "n_pred": n_pred.to_numpy(dtype=int),
                              "n_correct": n_correct.to_numpy(dtype=int)},
                             index=pd.Index(labels, name="label"))
    total = prf(n_correct.sum(), n_pred.sum(), support.sum())
    return EntityScores(precision=float(total[0]), recall=float(total[1]), f1=float(total[2]),
                        per_class=per_class, n_true=int(support.sum()),
                        n_pred=int(n_pred.sum()), n_correct=int(n_correct.sum()))


class TagEntityF1(EntityF1):
    """Chunk micro-F1 of boundary tags from per-group (correct, predicted, true) counts."""

    def __init__(self, scheme: str, *, true_col: str = "label",
                 pred_col: str = "predicted") -> None:
        self.scheme = check_scheme(scheme)
        self.true_col, self.pred_col = true_col, pred_col

    def group_counts(self, frame, group_col):
        frame, group_col = _groups(frame, group_col)
        true, pred = tag_chunks(frame, self.scheme, true_col=self.true_col,
                                pred_col=self.pred_col, group_col=group_col)
        groups = np.unique(frame[group_col].astype(str).to_numpy())
        counts = pd.DataFrame({
            "correct": pred.groupby("group")["correct"].sum(),
            "predicted": pred.groupby("group").size(),
            "true": true.groupby("group").size(),
        }).reindex(groups).fillna(0)
        return groups, counts.to_numpy(dtype=float)

    def __repr__(self) -> str:
        return f"TagEntityF1({self.scheme})"
