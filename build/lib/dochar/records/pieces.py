"""Pieces: the values a record is built from, cut out of labelled words.

A piece is one label's text in one place: a group of words (the task's groups, or the word
table's ``entity_id`` for the truth) or, without groups, a run of same-label words in reading
order that stays on one line (:func:`dochar.data.word_table.line_ids`) and ends at a gap wider
than the taller of the two words beside it (so two dates side by side stay two values, and a
title in large type stays one). Only labels of the
record shape become pieces. A value written over several lines is joined later, by the layout
rules of :mod:`dochar.records.rows`.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from dochar.data.word_table import line_ids, reading_order


@dataclass(frozen=True)
class Value:
    """One value of a record: its text and where it came from."""

    label: str
    text: str
    page: int
    box: tuple[float, float, float, float]
    probability: float               # the least probability of its words (1.0 for the truth)
    word_ids: tuple[int, ...]
    group: str = ""                  # the entity it was cut from, "" for a run of words

    @property
    def height(self) -> float:
        return self.box[3] - self.box[1]

    def join(self, other: Value) -> Value:
        """This value continued by ``other`` (the next line of the same value)."""
        box = (min(self.box[0], other.box[0]), min(self.box[1], other.box[1]),
               max(self.box[2], other.box[2]), max(self.box[3], other.box[3]))
        return replace(self, text=f"{self.text} {other.text}", box=box,
                       probability=min(self.probability, other.probability),
                       word_ids=self.word_ids + other.word_ids)

    def to_dict(self) -> dict:
        return {"text": self.text, "page": self.page, "box": [round(v, 2) for v in self.box],
                "probability": round(self.probability, 4), "word_ids": list(self.word_ids)}


def _value(words: pd.DataFrame, label: str, group: str = "") -> Value:
    return Value(label, " ".join(words["text"].astype(str)), int(words["page"].iloc[0]),
                 (float(words["x0"].min()), float(words["y0"].min()),
                  float(words["x1"].max()), float(words["y1"].max())),
                 float(words["probability"].min()) if "probability" in words else 1.0,
                 tuple(int(w) for w in words["word_id"]), group)


def cut_pieces(page: pd.DataFrame, labels: tuple[str, ...], label_col: str,
               group_col: str | None = None) -> list[Value]:
    """The pieces of one page's words (columns of the word table plus ``label_col``, and a
    ``probability`` where predicted), in reading order."""
    if page.empty:
        return []
    boxes = page[["x0", "y0", "x1", "y1"]].to_numpy(dtype=float)
    order = reading_order(boxes, page["word_id"].to_numpy())
    ordered = page.iloc[order]
    wanted = ordered[label_col].astype(str).isin(labels).to_numpy()
    if group_col is not None:
        groups = ordered[group_col].fillna("").astype(str)
        alone = groups == ""   # a word of no group is a value of its own
        groups = groups.where(~alone, "~" + ordered["word_id"].astype(str))
        return [_value(words, str(words[label_col].iloc[0]), "" if key.startswith("~") else key)
                for key, words in ordered[wanted].groupby(groups[wanted], sort=False)]
    line = line_ids(boxes)[order]
    box = boxes[order]
    taller = np.maximum(box[1:, 3] - box[1:, 1], box[:-1, 3] - box[:-1, 1])
    label = ordered[label_col].astype(str).to_numpy()
    cut = np.ones(len(ordered), dtype=bool)
    cut[1:] = ((label[1:] != label[:-1]) | (line[1:] != line[:-1])
               | (box[1:, 0] - box[:-1, 2] > taller))
    run = np.cumsum(cut)
    return [_value(ordered.iloc[np.flatnonzero(run == r)], label[run == r][0])
            for r in np.unique(run[wanted])]

