"""Segment labels: every node is a segment of words, its target the segment's label.

Segments are either given, as the word table's ``entity_id`` groups (FUNSD's entity-labelling
protocol; a word with a blank ``entity_id`` is a segment of its own), or found, as text lines
(:func:`dochar.data.word_table.line_segments`: reading-order lines cut at wide gaps). A segment
page has one box per segment (the union of its words' boxes) and one text (its words joined by
a space in reading order), so every graph builder and featurizer works on it unchanged; it also
keeps its word page and members, for features that pool the words and for mapping predictions
back. A segment's target is its words' label; for found lines, whose words may disagree, the
most frequent label (ties go to the label met first in reading order), and the word scores then tell how
much the lines cost.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from typing import ClassVar

import numpy as np
import pandas as pd

from dochar.data.word_table import Page, line_segments, reading_order
from dochar.tasks.base import MACRO_F1, MICRO_F1, NodeTask, TaskError, require_labels

SEGMENT_SOURCES = ("entities", "lines")


@dataclass
class SegmentPage(Page):
    """A page whose nodes are segments; ``members[i]`` are the word positions of segment i."""

    words: Page | None = None
    members: list[np.ndarray] = field(default_factory=list)


def segment_page(page: Page, keys: Sequence[str], labels: Sequence[str] | None) -> SegmentPage:
    """Group the words by ``keys``; segments ordered by the reading position of their first
    word, words inside a segment in reading order. ``labels``: one per segment, in key order of
    first appearance in reading order (None: no labels)."""
    order = reading_order(page.boxes, page.word_ids)
    groups: dict[str, list[int]] = {}
    for word in order:
        groups.setdefault(keys[word], []).append(int(word))
    members = [np.array(words, dtype=np.int64) for words in groups.values()]
    boxes = np.array([[page.boxes[m, 0].min(), page.boxes[m, 1].min(),
                       page.boxes[m, 2].max(), page.boxes[m, 3].max()] for m in members],
                     dtype=np.float64).reshape(-1, 4)
    texts = [" ".join(page.texts[i] for i in m) for m in members]
    return SegmentPage(doc_id=page.doc_id, page=page.page,
                       word_ids=np.arange(len(members), dtype=np.int64), texts=texts,
                       boxes=boxes, width=page.width, height=page.height,
                       labels=None if labels is None else list(labels),
                       entity_ids=list(groups), layout_id=page.layout_id, split=page.split,
                       image=page.image, words=page, members=members)


@dataclass(frozen=True)
class SegmentLabels(NodeTask):
    name: ClassVar[str] = "segment_labels"
    scores: ClassVar[dict[str, str]] = {MACRO_F1: "word_macro", MICRO_F1: "word_micro"}
    segments: str = "entities"
    max_gap: float = 1.0          # lines: cut where the gap exceeds this many word heights

    def __post_init__(self) -> None:
        if self.segments not in SEGMENT_SOURCES:
            raise TaskError(f"task segment_labels: segments must be one of {SEGMENT_SOURCES}, "
                            f"got {self.segments!r}")

    @property
    def label(self) -> str:
        return f"{self.name}[{self.segments}]"

    def classes(self, labels: Sequence[str]) -> list[str]:
        return [str(label) for label in labels]

    def keys(self, page: Page) -> list[str]:
        if self.segments == "lines":
            return [f"line{i}" for i in line_segments(page.boxes, page.word_ids,
                                                      max_gap=self.max_gap)]
        if page.entity_ids is None:
            raise TaskError(f"page {page.key}: segments=entities needs the word table's "
                            "'entity_id' column (or use task.segments=lines)")
        return [entity or f"\0word{word}" for entity, word in zip(page.entity_ids,
                                                                   page.word_ids)]

    def input_pages(self, pages: Iterable[Page]) -> list[SegmentPage]:
        return [segment_page(page, self.keys(page), None) for page in pages]

    def nodes(self, page: Page) -> SegmentPage:
        labels = require_labels(page, self.name)
        keys = self.keys(page)
        grouped = segment_page(page, keys, None)
        targets = []
        for key, members in zip(grouped.entity_ids, grouped.members):
            votes = Counter(labels[i] for i in members)
            if self.segments == "entities" and len(votes) > 1:
                word = int(page.word_ids[members[0]])
                raise TaskError(f"page {page.key}, entity '{key}' (first word_id {word}): its "
                                f"words have different labels {sorted(votes)}; a given "
                                "segment has one label")
            targets.append(votes.most_common(1)[0][0])   # ties: the earliest word's label
        grouped.labels = targets
        return grouped

    def word_predictions(self, pages: Sequence[Page], frame: pd.DataFrame) -> pd.DataFrame:
        """Each word gets its segment's prediction (and confidence) and the segment as its
        ``entity``; the true label is the word's own."""
        indexed = frame.set_index(["doc_id", "page", "word_id"])
        rows = []
        for page in pages:
            if not isinstance(page, SegmentPage) or page.words is None:
                raise TaskError(f"page {page.key}: not a segment page")
            words = page.words
            guess = np.empty(len(words), dtype=object)
            confidence = np.zeros(len(words))
            entity = np.empty(len(words), dtype=object)
            for segment, members in enumerate(page.members):
                row = indexed.loc[(page.doc_id, page.page, segment)]
                guess[members] = row["predicted"]
                confidence[members] = row.get("confidence", np.nan)
                entity[members] = str(page.entity_ids[segment]).lstrip("\0")
            found = pd.DataFrame({"doc_id": words.doc_id, "page": words.page,
                                  "word_id": words.word_ids, "label": words.labels,
                                  "predicted": guess, "entity": entity})
            if "confidence" in frame:
                found["confidence"] = confidence
            rows.append(found)
        return pd.concat(rows, ignore_index=True)
