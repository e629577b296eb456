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
  chooses which of the table's kinds count (null: all).
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from dochar.data.word_table import Page
from dochar.errors import DocharError
from dochar.tasks.segment_labels import segment_page

LINK_KINDS: tuple[str, ...] = ("same_entity", "key_value")
UNASSIGNED = "~w"   # prefix of the entity id a word without entity_id gets (its own entity)


class LinkTaskError(DocharError):
    """A links task asked of data that cannot answer it (no entity ids, no links table)."""


@dataclass
class LinkPage:
    """One page as the links task sees it: its nodes and its true links."""

    nodes: Page                # words (same_entity) or segments (key_value), one node each
    true_links: np.ndarray     # (2, T) int64 node indices, row 0 = source, row 1 = target
    entities: list[str]        # true entity id of each node (grouping truth)
    directed: bool

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


def _key_value_page(page: Page, links: pd.DataFrame) -> LinkPage:
    nodes = segment_page(page, word_entities(page), None)
    if page.labels is not None:
        nodes.labels = [page.labels[int(members[0])] for members in nodes.members]
    index = {entity: i for i, entity in enumerate(nodes.entity_ids)}
    pairs = [(index[s], index[t]) for s, t in zip(links["source"], links["target"])
             if s in index and t in index]
    true_links = np.array(pairs, dtype=np.int64).T.reshape(2, -1)
    return LinkPage(nodes, true_links, list(nodes.entity_ids), directed=True)


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
        raise LinkTaskError("task.link_kind=key_value needs a links table: data=synth and "
                            "data=funsd bring one; for data=word_table set data.links_path")
    if table_kinds is not None:
        unknown = sorted(set(table_kinds) - set(links["kind"].astype(str)))
        if unknown:
            raise LinkTaskError(f"task.link_table_kinds: {unknown} not in the links table "
                                f"(it has {sorted(set(links['kind'].astype(str)))})")
        links = links[links["kind"].astype(str).isin(list(table_kinds))]
    by_page = {key: rows for key, rows in links.groupby([links["doc_id"].astype(str),
                                                          links["page"].astype(int)])}
    empty = links.iloc[:0]
    return [_key_value_page(page, by_page.get((page.doc_id, page.page), empty))
            for page in pages]
