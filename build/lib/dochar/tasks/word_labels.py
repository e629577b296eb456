"""Word labels: every word is a node and its target is its own label (dochar's first task)."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import ClassVar

import pandas as pd

from dochar.data.word_table import Page
from dochar.tasks.base import ENTITY_F1, MACRO_F1, MICRO_F1, NodeTask

WORD_COLUMNS = ["doc_id", "page", "word_id", "label", "predicted"]


@dataclass(frozen=True)
class WordLabels(NodeTask):
    name: ClassVar[str] = "word_labels"
    scores: ClassVar[dict[str, str]] = {MACRO_F1: "word_macro", MICRO_F1: "word_micro",
                                        ENTITY_F1: "label_runs"}
    label: ClassVar[str] = ""
    nodes_are_word_labels: ClassVar[bool] = True

    def classes(self, labels: Sequence[str]) -> list[str]:
        return [str(label) for label in labels]

    def word_predictions(self, pages: Sequence[Page], frame: pd.DataFrame) -> pd.DataFrame:
        return frame[WORD_COLUMNS + [c for c in ("confidence",) if c in frame]].copy()
