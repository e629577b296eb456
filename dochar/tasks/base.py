"""What a task is: what a graph node stands for, what its target is, and how node predictions
go back onto the words of the page.

A task turns each word page into the page its model sees (:meth:`Task.nodes`), names the node
classes (:meth:`Task.classes`) and maps a node prediction frame back to one row per word
(:meth:`Task.word_predictions`), so every task can also be read as word labels.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import ClassVar, Protocol

import pandas as pd

from dochar.data.word_table import Page
from dochar.errors import DocharError


class TaskError(DocharError):
    """A task config or a page the task cannot turn into nodes (names the page and word)."""


class Task(Protocol):
    name: ClassVar[str]

    def classes(self, labels: Sequence[str]) -> list[str]:
        """Node classes, in a fixed order, for the data's word labels."""
        ...

    def nodes(self, page: Page) -> Page:
        """The page the graph builder, featurizer and model see, its labels the node targets."""
        ...

    def word_predictions(self, pages: Sequence[Page], frame: pd.DataFrame) -> pd.DataFrame:
        """Node predictions back on words: doc_id, page, word_id, label, predicted (word labels)."""
        ...


def require_labels(page: Page, task: str) -> list[str]:
    if page.labels is None:
        raise TaskError(f"page {page.key}: task '{task}' needs the word table's 'label' column")
    return page.labels
