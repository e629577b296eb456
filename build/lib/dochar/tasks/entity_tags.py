"""Entity tags: every word is a node, its target a boundary tag (BIO or BIOES) of its entity.

**Encoding.** Words are read in dochar's one reading order
(:func:`dochar.data.word_table.reading_order`). A *chunk* is a maximal run of consecutive words
of one page with the same ``entity_id`` (a word with an empty ``entity_id`` is a chunk of its
own) whose label is not in ``outside``. BIO (IOB2): ``B-<label>`` on a chunk's first word,
``I-<label>`` on the others. BIOES (IOBES): ``S-`` on a one-word chunk, else ``B-``, ``I-``...,
``E-``. Outside labels get ``O``. An entity that the reading order splits (another word falls
between its words) becomes one chunk per piece: the tags must describe a sequence, and the
pieces are what a tagger reading in that order can find (counted as ``entity_pieces_extra``).

**Decoding, with repair.** A predicted sequence is cut into chunks by the conlleval rule, which
is also seqeval's default-mode chunking: a chunk starts at ``B-x`` or ``S-x``, and also at an
``I-x`` / ``E-x`` that does not continue an open chunk of type ``x`` (read as ``B-x`` / ``S-x``);
it ends after ``E-x`` or ``S-x`` and wherever the next tag does not continue it (``O``, a new
``B``/``S``, another type). Scoring the repaired sequence in seqeval's strict mode gives the same
chunks as scoring the raw one in its default mode.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import ClassVar

import numpy as np
import pandas as pd

from dochar.data.word_table import Page, reading_order
from dochar.tasks.base import ENTITY_F1, MACRO_F1, MICRO_F1, NodeTask, TaskError, require_labels

SCHEMES: dict[str, tuple[str, ...]] = {"bio": ("B", "I"), "bioes": ("B", "I", "E", "S")}
OUTSIDE = "O"
Chunk = tuple[int, int, str]     # first position, last position (inclusive), label


def check_scheme(scheme: str) -> str:
    if scheme not in SCHEMES:
        raise TaskError(f"task entity_tags: scheme must be one of {sorted(SCHEMES)}, "
                        f"got {scheme!r}")
    return scheme


def tag_classes(labels: Sequence[str], outside: Sequence[str], scheme: str) -> list[str]:
    """``O`` then every prefix of every scored label: B-x, I-x (, E-x, S-x)."""
    prefixes = SCHEMES[check_scheme(scheme)]
    return [OUTSIDE] + [f"{prefix}-{label}" for label in labels if label not in set(outside)
                        for prefix in prefixes]


def split_tag(tag: str) -> tuple[str, str | None]:
    if tag == OUTSIDE:
        return OUTSIDE, None
    prefix, _, label = tag.partition("-")
    return prefix, label


def chunks_of(labels: Sequence[str], entities: Sequence[str], outside: Sequence[str]
              ) -> list[Chunk]:
    """Chunks of a sequence in order: runs of one entity id (blank ids stand alone)."""
    ignored, found = set(outside), []
    start = None
    for i, (label, entity) in enumerate(zip(labels, entities)):
        if start is not None and (entity == "" or entity != entities[i - 1]
                                  or label != labels[i - 1]):
            found.append((start, i - 1, labels[start]))
            start = None
        if label not in ignored and start is None:
            start = i
    if start is not None:
        found.append((start, len(labels) - 1, labels[start]))
    return found


def encode(chunks: Sequence[Chunk], length: int, scheme: str) -> list[str]:
    """Tags of a sequence of ``length`` words holding ``chunks``."""
    check_scheme(scheme)
    tags = [OUTSIDE] * length
    for start, end, label in chunks:
        if scheme == "bioes" and start == end:
            tags[start] = f"S-{label}"
            continue
        tags[start] = f"B-{label}"
        for i in range(start + 1, end + 1):
            tags[i] = f"I-{label}"
        if scheme == "bioes":
            tags[end] = f"E-{label}"
    return tags


def decode(tags: Sequence[str], scheme: str) -> list[Chunk]:
    """Chunks of a predicted tag sequence under the repair rule of the module docstring."""
    check_scheme(scheme)
    found: list[Chunk] = []
    start, open_label = None, None
    for i, tag in enumerate(tags):
        prefix, label = split_tag(tag)
        continues = (start is not None and label == open_label and prefix in ("I", "E"))
        if start is not None and not continues:
            found.append((start, i - 1, open_label))
            start, open_label = None, None
        if prefix != OUTSIDE and start is None:
            start, open_label = i, label
        if start is not None and prefix in ("E", "S"):
            found.append((start, i, open_label))
            start, open_label = None, None
    if start is not None:
        found.append((start, len(tags) - 1, open_label))
    return found


def repair(tags: Sequence[str], scheme: str) -> list[str]:
    """The valid sequence the repair rule reads ``tags`` as."""
    return encode(decode(tags, scheme), len(tags), scheme)


@dataclass(frozen=True)
class EntityTags(NodeTask):
    name: ClassVar[str] = "entity_tags"
    scores: ClassVar[dict[str, str]] = {ENTITY_F1: "tag_chunks", MACRO_F1: "word_macro",
                                        MICRO_F1: "word_micro"}
    scheme: str = "bio"
    outside: tuple[str, ...] = field(default=("other",))

    def __post_init__(self) -> None:
        check_scheme(self.scheme)
        object.__setattr__(self, "outside", tuple(self.outside))

    @property
    def label(self) -> str:
        return f"{self.name}[{self.scheme}]"

    def classes(self, labels: Sequence[str]) -> list[str]:
        return tag_classes(labels, self.outside, self.scheme)

    def tags(self, page: Page) -> list[str]:
        """True tags of the page's words (in word order), encoded in reading order."""
        labels = require_labels(page, self.name)
        entities = page.entity_ids or [""] * len(page)
        order = reading_order(page.boxes, page.word_ids)
        ordered = chunks_of([labels[i] for i in order], [entities[i] for i in order],
                            self.outside)
        in_order = encode(ordered, len(page), self.scheme)
        tags = [OUTSIDE] * len(page)
        for position, word in enumerate(order):
            tags[word] = in_order[position]
        return tags

    def nodes(self, page: Page) -> Page:
        return dataclasses.replace(page, labels=self.tags(page))

    def word_predictions(self, pages: Sequence[Page], frame: pd.DataFrame) -> pd.DataFrame:
        """Word labels from tags: a word in a decoded chunk gets its label and the chunk as its
        ``entity`` (the position of the chunk's first word in reading order), others
        ``outside``."""
        rows = []
        fallback = self.outside[0] if self.outside else OUTSIDE
        for (_, _), words in frame.groupby(["doc_id", "page"], sort=False):
            order = reading_order(words[["x0", "y0", "x1", "y1"]].to_numpy(float),
                                  words["word_id"].to_numpy())
            predicted = np.full(len(words), fallback, dtype=object)
            entity = np.full(len(words), "", dtype=object)
            tags = words["predicted"].to_numpy(dtype=object)[order]
            for start, end, label in decode(list(tags), self.scheme):
                predicted[order[start:end + 1]] = label
                entity[order[start:end + 1]] = f"chunk{start}"
            true = [split_tag(t)[1] or fallback for t in words["label"]]
            found = pd.DataFrame({"doc_id": words["doc_id"].to_numpy(),
                                  "page": words["page"].to_numpy(),
                                  "word_id": words["word_id"].to_numpy(),
                                  "label": true, "predicted": predicted, "entity": entity})
            if "confidence" in words:
                found["confidence"] = words["confidence"].to_numpy()
            rows.append(found)
        return pd.concat(rows, ignore_index=True)
