"""Word labels: every word is a node and its target is its own label (dochar's first task)."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import ClassVar

import pandas as pd

from dochar.data.word_table import Page

WORD_COLUMNS = ["doc_id", "page", "word_id", "label", "predicted"]


@dataclass(frozen=True)
class WordLabels:
    name: ClassVar[str] = "word_labels"

    def classes(self, labels: Sequence[str]) -> list[str]:
        return [str(label) for label in labels]

    def nodes(self, page: Page) -> Page:
        return page

    def word_predictions(self, pages: Sequence[Page], frame: pd.DataFrame) -> pd.DataFrame:
        return frame[WORD_COLUMNS].copy()
