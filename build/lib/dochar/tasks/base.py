"""What a task is: what a graph node stands for, what the model predicts (a class per node or
a link per candidate pair), how it is scored, and how predictions go back onto the words.

Every consumer of a run (evaluation, comparison, sweeps, console tables, saved models,
prediction, the gate) asks the task, never its name: :attr:`Task.scores` names the scores that
get intervals, headline first, each with the kind of scorer that computes it
(:data:`dochar.metrics.evaluate.SCORER_KINDS`); :attr:`Task.target` says whether the model
classifies nodes or candidate pairs; :attr:`Task.validation` is the score early stopping and
sweeps optimise on validation documents.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from typing import Any, ClassVar, Protocol

import pandas as pd

from dochar.data.word_table import Page
from dochar.errors import DocharError

NODES, PAIRS = "nodes", "pairs"            # what a model of the task predicts
MACRO_F1, MICRO_F1, ENTITY_F1 = "macro_f1", "micro_f1", "entity_f1"
LINK_F1, LINK_PRECISION, LINK_RECALL = "link_f1", "link_precision", "link_recall"
ROW_F1 = "row_f1"                          # rows of entities (line items) recovered exactly
VALIDATION_SCORE = "val_score"             # the one validation figure every fitter logs


class TaskError(DocharError):
    """A task config or a page the task cannot turn into nodes (names the page and word)."""


class Task(Protocol):
    name: ClassVar[str]
    target: ClassVar[str]                  # NODES or PAIRS
    validation: ClassVar[str]              # score optimised on validation documents
    nodes_are_word_labels: ClassVar[bool]  # predictions need no decoding to be word labels

    @property
    def scores(self) -> Mapping[str, str]:
        """Scores with intervals and paired tests, headline first: name -> scorer kind."""
        ...

    @property
    def label(self) -> str:
        """How run names show the task and its options ("" for the default task)."""
        ...

    def classes(self, labels: Sequence[str]) -> list[str]:
        """Node (or pair) classes, in a fixed order, for the data's word labels."""
        ...

    def pages(self, pages: Iterable[Page], links: pd.DataFrame | None = None) -> list[Any]:
        """The task's view of word pages (node pages, or link pages with their true links)."""
        ...

    def graph_page(self, task_page: Any) -> Page:
        """The page the graph builder and featurizer see for one of :meth:`pages`' items."""
        ...

    def input_pages(self, pages: Iterable[Page]) -> list[Page]:
        """The node pages of new, unlabelled word pages (what a saved model predicts on)."""
        ...

    def word_predictions(self, pages: Sequence[Page], frame: pd.DataFrame) -> pd.DataFrame:
        """Node predictions back on words: doc_id, page, word_id, label, predicted (word
        labels), the node's ``confidence`` when the frame has one, and ``entity`` (the group a
        word was put in, "" for none) where the task groups words."""
        ...


def headline(task: Task) -> str:
    return next(iter(task.scores))


class NodeTask:
    """Shared behaviour of the tasks whose model classifies every node."""

    target: ClassVar[str] = NODES
    validation: ClassVar[str] = MACRO_F1
    nodes_are_word_labels: ClassVar[bool] = False

    def nodes(self, page: Page) -> Page:
        return page

    def pages(self, pages: Iterable[Page], links: pd.DataFrame | None = None) -> list[Page]:
        return [self.nodes(page) for page in pages]

    def graph_page(self, task_page: Page) -> Page:
        return task_page

    def input_pages(self, pages: Iterable[Page]) -> list[Page]:
        return list(pages)


def require_labels(page: Page, task: str) -> list[str]:
    if page.labels is None:
        raise TaskError(f"page {page.key}: task '{task}' needs the word table's 'label' column")
    return page.labels
