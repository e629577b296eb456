"""The links task: what its nodes are and which pairs of them are true links.

Two kinds (``task.link_kind``):

* ``same_entity``: nodes are the words of a page; two words are linked when they share a
  non-empty ``entity_id``. The *true links* are the consecutive pairs of each entity in word_id
  order (a path through the entity, undirected): enough to recover every entity as a connected
  component, and what candidate recall counts. A word with an empty ``entity_id`` is an entity
  of its own.
* ``key_value``: nodes are the given segments, the ``entity_id`` groups of a page, built as the
  segment labelling task builds them (:func:`dochar.tasks.segment_labels.segment_page`: union
  box, words' text joined in reading order; here with the label of the segment's first word);
  the true links are the links table's rows of that page, directed ``source -> target``. ``task.link_table_kinds``
  chooses which of the table's kinds count (null: every kind but ``row``).
* ``rows``: nodes are the given segments, as for ``key_value``; the links table's ``row`` links
  (the entities of one table row or line item, e.g. CORD's ``group_id``) join segments into
  rows, undirected. Any two segments of one row are a true pair; a segment in no row is a row
  of its own. Decoding: predicted rows are the connected components of the predicted links
  (a link joins two rows whole, so one false link merges them: precision of links matters
  more than recall). Headline: ``row_f1`` (:class:`dochar.metrics.links.RowF1`).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, ClassVar

import numpy as np
import pandas as pd
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from dochar.data.links_table import ROW_KIND
from dochar.data.word_table import Page
from dochar.tasks.base import (
    ENTITY_F1,
    LINK_F1,
    LINK_PRECISION,
    LINK_RECALL,
    MACRO_F1,
    MICRO_F1,
    PAIRS,
    ROW_F1,
    TaskError,
)
from dochar.tasks.segment_labels import segment_page

LINK_KINDS: tuple[str, ...] = ("same_entity", "key_value", "rows")
LINK, NO_LINK = "link", "none"
LINK_LABELS: tuple[str, ...] = (NO_LINK, LINK)
CANDIDATE_SOURCES: tuple[str, ...] = ("graph", "distance")
THRESHOLD_BY: tuple[str, ...] = ("links", "rows")
UNASSIGNED = "~w"   # prefix of the entity id a word without entity_id gets (its own entity)


class LinkTaskError(TaskError):
    """A links task asked of data that cannot answer it (no entity ids, no links table)."""


@dataclass
class LinkPage:
    """One page as the links task sees it: its nodes and its true links."""

    nodes: Page                # words (same_entity) or segments (key_value, rows), one node each
    true_links: np.ndarray     # (2, T) int64 node indices, row 0 = source, row 1 = target
    entities: list[str]        # true group of each node: entity (same_entity) or row (rows)
    directed: bool
    segments: bool = False     # nodes are segments (named by entity id), not words

    @property
    def key(self) -> str:
        return self.nodes.key


def word_entities(page: Page) -> list[str]:
    """Each word's entity id; a word without one is an entity of its own."""
    ids = page.entity_ids or [""] * len(page)
    return [e if e else f"{UNASSIGNED}{w}" for e, w in zip(ids, page.word_ids.tolist())]


def _same_entity_page(page: Page) -> LinkPage:
    entities = word_entities(page)
    position: dict[str, int] = {}
    source, target = [], []
    for node, entity in enumerate(entities):
        if entity in position:
            source.append(position[entity])
            target.append(node)
        position[entity] = node
    return LinkPage(page, np.array([source, target], dtype=np.int64).reshape(2, -1), entities,
                    directed=False)


def _segment_links(page: Page, links: pd.DataFrame) -> tuple[Page, np.ndarray]:
    """The page's segments (labelled by their first word) and the links between them."""
    nodes = segment_page(page, word_entities(page), None)
    if page.labels is not None:
        nodes.labels = [page.labels[int(members[0])] for members in nodes.members]
    index = {entity: i for i, entity in enumerate(nodes.entity_ids)}
    pairs = [(index[s], index[t]) for s, t in zip(links["source"], links["target"])
             if s in index and t in index]
    return nodes, np.array(pairs, dtype=np.int64).T.reshape(2, -1)


def _key_value_page(page: Page, links: pd.DataFrame) -> LinkPage:
    nodes, true_links = _segment_links(page, links)
    return LinkPage(nodes, true_links, list(nodes.entity_ids), directed=True, segments=True)


def _rows_page(page: Page, links: pd.DataFrame) -> LinkPage:
    """Rows are the connected components of the row links; a lone segment names its own."""
    nodes, true_links = _segment_links(page, links)
    n = len(nodes)
    graph = coo_matrix((np.ones(true_links.shape[1]), (true_links[0], true_links[1])),
                       shape=(n, n))
    _, component = connected_components(graph, directed=False)
    sizes = np.bincount(component, minlength=n) if n else np.zeros(0, int)
    rows = [f"row{component[i]}" if sizes[component[i]] > 1 else str(entity)
            for i, entity in enumerate(nodes.entity_ids)]
    return LinkPage(nodes, true_links, rows, directed=False, segments=True)


def link_pages(pages: Iterable[Page], kind: str, links: pd.DataFrame | None = None,
               table_kinds: Sequence[str] | None = None) -> list[LinkPage]:
    """The task's view of ``pages``; ``links`` is the validated links table (key_value)."""
    if kind not in LINK_KINDS:
        raise LinkTaskError(f"task.link_kind={kind!r}: choose one of {list(LINK_KINDS)}")
    pages = list(pages)
    if any(p.entity_ids is None for p in pages):
        raise LinkTaskError("the links task needs the word table's entity_id column")
    if kind == "same_entity":
        return [_same_entity_page(page) for page in pages]
    if links is None or links.empty:
        raise LinkTaskError(f"task.link_kind={kind} needs a links table: data=synth, "
                            "data=funsd and data=cord bring one; for data=word_table set "
                            "data.links_path")
    present = set(links["kind"].astype(str))
    if kind == "rows":
        if ROW_KIND not in present:
            raise LinkTaskError(f"task.link_kind=rows needs links of kind {ROW_KIND!r}; the "
                                f"links table has {sorted(present)}")
        table_kinds = (ROW_KIND,)
    elif table_kinds is None:
        table_kinds = tuple(sorted(present - {ROW_KIND}))
        if not table_kinds:
            raise LinkTaskError(f"task.link_kind=key_value: the links table has only "
                                f"{ROW_KIND!r} links; use task.link_kind=rows")
    unknown = sorted(set(table_kinds) - present)
    if unknown:
        raise LinkTaskError(f"task.link_table_kinds: {unknown} not in the links table "
                            f"(it has {sorted(present)})")
    links = links[links["kind"].astype(str).isin(list(table_kinds))]
    by_page = {key: rows for key, rows in links.groupby([links["doc_id"].astype(str),
                                                          links["page"].astype(int)])}
    empty = links.iloc[:0]
    build = _rows_page if kind == "rows" else _key_value_page
    return [build(page, by_page.get((page.doc_id, page.page), empty)) for page in pages]


@dataclass(frozen=True)
class Links:
    """Links between the nodes of a page: the model scores candidate pairs, not nodes.

    Candidates come from the graph builder's edges (``candidates.source: graph``) or from every
    pair within ``candidates.max_distance`` of the page diagonal (``distance``); the decision
    threshold is chosen on validation pairs only, by link F1 or (``threshold_by: rows``, for
    ``link_kind: rows``) by the row F1 its connected components give.
    """

    name: ClassVar[str] = "links"
    target: ClassVar[str] = PAIRS
    validation: ClassVar[str] = LINK_F1
    nodes_are_word_labels: ClassVar[bool] = False
    link_kind: str = "key_value"
    link_table_kinds: tuple[str, ...] | None = None
    candidates: Mapping[str, Any] = field(default_factory=lambda: {"source": "graph",
                                                                   "max_distance": 0.1})
    negative_ratio: float | None = None
    threshold_by: str = "links"       # the validation score of the link cut: links | rows
    embedding_dim: int = 64
    pair_head: Mapping[str, Any] = field(default_factory=lambda: {"hidden_dim": 64,
                                                                  "dropout": 0.2})

    def __post_init__(self) -> None:
        if self.link_kind not in LINK_KINDS:
            raise LinkTaskError(f"task.link_kind={self.link_kind!r}: choose one of "
                                f"{list(LINK_KINDS)}")
        candidates = {"source": "graph", "max_distance": 0.1, **dict(self.candidates or {})}
        if candidates["source"] not in CANDIDATE_SOURCES or set(candidates) - {"source",
                                                                              "max_distance"}:
            raise LinkTaskError(f"task.candidates: source must be one of "
                                f"{list(CANDIDATE_SOURCES)} with an optional max_distance, "
                                f"got {candidates}")
        head = {"hidden_dim": 64, "dropout": 0.2, **dict(self.pair_head or {})}
        if set(head) - {"hidden_dim", "dropout"}:
            raise LinkTaskError(f"task.pair_head: options are hidden_dim and dropout, got "
                                f"{sorted(head)}")
        if self.negative_ratio is not None and not float(self.negative_ratio) > 0:
            raise LinkTaskError(f"task.negative_ratio must be null or positive, "
                                f"got {self.negative_ratio!r}")
        if self.threshold_by not in THRESHOLD_BY or (self.threshold_by == "rows"
                                                     and self.link_kind != "rows"):
            raise LinkTaskError(f"task.threshold_by={self.threshold_by!r}: choose one of "
                                f"{list(THRESHOLD_BY)} ('rows' with link_kind=rows only)")
        if int(self.embedding_dim) < 1:
            raise LinkTaskError(f"task.embedding_dim must be a positive int, "
                                f"got {self.embedding_dim!r}")
        object.__setattr__(self, "candidates", candidates)
        object.__setattr__(self, "pair_head", head)
        if self.link_table_kinds is not None:
            object.__setattr__(self, "link_table_kinds", tuple(self.link_table_kinds))

    @classmethod
    def variants(cls) -> list[Links]:
        """One task per link kind: together they name every score a links run can carry."""
        return [cls(link_kind=kind) for kind in LINK_KINDS]

    @property
    def scores(self) -> dict[str, str]:
        found = {LINK_F1: "link_f1", LINK_PRECISION: "link_precision",
                 LINK_RECALL: "link_recall"}
        if self.link_kind == "same_entity":
            found[ENTITY_F1] = "word_grouping"
        if self.link_kind == "rows":
            found = {ROW_F1: "row_grouping", **found}
        return {**found, MACRO_F1: "word_macro", MICRO_F1: "word_micro"}

    @property
    def threshold_by_rows(self) -> bool:
        """The link cut is chosen by validation row F1 (not link F1)."""
        return self.threshold_by == "rows"

    @property
    def label(self) -> str:
        return f"links:{self.link_kind}"

    def classes(self, labels: Sequence[str]) -> list[str]:
        return list(LINK_LABELS)

    def pages(self, pages: Iterable[Page], links: pd.DataFrame | None = None) -> list[LinkPage]:
        return link_pages(pages, self.link_kind, links, self.link_table_kinds)

    def graph_page(self, task_page: LinkPage) -> Page:
        return task_page.nodes

    def input_pages(self, pages: Iterable[Page]) -> list[LinkPage]:
        """Link pages of new pages, with no true links (a word without entity id stands alone)."""
        if self.link_kind == "same_entity":
            return [_same_entity_page(page) for page in pages]
        build = _rows_page if self.link_kind == "rows" else _key_value_page
        return [build(page, pd.DataFrame(columns=["source", "target"])) for page in pages]

    def word_predictions(self, pages: Sequence[Page], frame: pd.DataFrame) -> pd.DataFrame:
        """Links are not word labels: the pair rows are the predictions (no word view)."""
        return frame.iloc[:0]
