"""What a graph builder makes of a set of pages: size, connectivity, relation mix, homophily,
and whether table cells that share a row or a column end up close in the graph.

Conventions: ``edges`` counts every typed edge the builder emits (self-loops and reverse
relations included: what a model sees); isolation, components, homophily and reachability
ignore self-loops and edge direction. Shares are pooled over pages (micro averages).
Homophily is the edge homophily ratio of Zhu et al., "Beyond Homophily in Graph Neural
Networks", NeurIPS 2020: the share of edges whose two ends carry the same label; per class c,
of the edges whose target has class c, the share whose source has class c too. Words with an
empty label and pages without labels are left out of it (and a note says so).

Candidate recall (:func:`candidate_recall`) tells before training whether a builder's edges
can reach the true links at all: same-entity word links and key -> value segment links.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from dochar.data.word_table import Page
from dochar.graphs.base import GraphBuilder, TypedEdges
from dochar.graphs.candidates import CandidateOptions, candidate_pairs, missed_links
from dochar.data.links_table import ROW_KIND
from dochar.tasks.links import link_pages

SAME_BAND = 0.5   # overlap, as a share of the smaller extent, for two cells to share a row/column


@dataclass
class GraphStats:
    relations: tuple[str, ...]
    pages: int = 0
    nodes: int = 0
    edges: int = 0
    self_loops: int = 0
    isolated_words: int = 0
    components_mean: float = float("nan")
    components_max: int = 0
    relation_counts: dict[str, int] = field(default_factory=dict)
    labelled_edges: int = 0
    same_label_edges: int = 0
    row_pairs: int = 0
    row_reach: tuple[int, int] = (0, 0)      # pairs reachable within 1 and within 2 hops
    column_pairs: int = 0
    column_reach: tuple[int, int] = (0, 0)
    per_class: pd.DataFrame = field(default_factory=pd.DataFrame)
    notes: list[str] = field(default_factory=list)

    @property
    def homophily(self) -> float:
        return _share(self.same_label_edges, self.labelled_edges)

    def to_dict(self) -> dict[str, float | int]:
        """Flat scalars, NaN where a measure does not apply (see ``notes``)."""
        out: dict[str, float | int] = {
            "pages": self.pages, "nodes": self.nodes, "edges": self.edges,
            "self_loops": self.self_loops,
            "edges_per_node": _share(self.edges, self.nodes),
            "isolated_words": self.isolated_words,
            "isolated_share": _share(self.isolated_words, self.nodes),
            "components_mean": self.components_mean, "components_max": self.components_max,
            "homophily": self.homophily,
            "same_row_pairs": self.row_pairs,
            "same_row_1hop": _share(self.row_reach[0], self.row_pairs),
            "same_row_2hop": _share(self.row_reach[1], self.row_pairs),
            "same_column_pairs": self.column_pairs,
            "same_column_1hop": _share(self.column_reach[0], self.column_pairs),
            "same_column_2hop": _share(self.column_reach[1], self.column_pairs),
        }
        for relation in self.relations:
            out[f"relation_share_{relation}"] = _share(self.relation_counts.get(relation, 0),
                                                       self.edges)
        return out


def _share(part: int, whole: int) -> float:
    return part / whole if whole else float("nan")


def same_band(lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Pairwise (n, n): intervals overlap by at least SAME_BAND of the smaller length."""
    overlap = np.minimum(hi[:, None], hi[None, :]) - np.maximum(lo[:, None], lo[None, :])
    smaller = np.minimum((hi - lo)[:, None], (hi - lo)[None, :])
    return (overlap >= 0) & (overlap >= SAME_BAND * smaller)


def _reach(adjacency, pairs: tuple[np.ndarray, np.ndarray]) -> tuple[int, int]:
    """Pairs joined by a path of at most 1, and at most 2, undirected edges."""
    a, b = pairs
    if not len(a):
        return 0, 0
    one = np.asarray(adjacency[a, b]).ravel() > 0
    two = one | (np.asarray((adjacency @ adjacency)[a, b]).ravel() > 0)
    return int(one.sum()), int(two.sum())


def graph_stats(pages: Iterable[Page], builder: GraphBuilder,
                table_labels: Sequence[str] = (), *,
                edges: Sequence[TypedEdges] | None = None) -> GraphStats:
    """Diagnostics of ``builder`` on ``pages``; pass ``edges`` (one per page, in order) when
    the graphs are already built, so they are not built twice."""
    pages = list(pages)
    if edges is not None and len(edges) != len(pages):
        raise ValueError(f"graph_stats: {len(edges)} edge sets for {len(pages)} pages")
    relations = tuple(builder.relations)
    stats = GraphStats(relations)
    counts = np.zeros(len(relations), dtype=np.int64)
    components: list[int] = []
    empty_pages = unlabelled_pages = unlabelled_words = 0
    per_class: dict[str, np.ndarray] = {}    # class -> [words, isolated, edges_in, same_class]
    table_set = set(table_labels)
    row_tally = np.zeros(3, dtype=np.int64)       # pairs, within 1 hop, within 2 hops
    column_tally = np.zeros(3, dtype=np.int64)
    for index, page in enumerate(pages):
        n = len(page)
        edges_of_page = builder(page) if edges is None else edges[index]
        edges_of_page.check_nodes(n, f"graph_stats, page {page.key}")
        stats.pages += 1
        stats.nodes += n
        stats.edges += edges_of_page.num_edges
        counts += np.bincount(edges_of_page.edge_type, minlength=len(relations))
        source, target = edges_of_page.edge_index
        loop = source == target
        stats.self_loops += int(loop.sum())
        source, target = source[~loop], target[~loop]
        touched = np.zeros(n, dtype=bool)
        touched[source] = touched[target] = True
        stats.isolated_words += int(n - touched.sum())
        if n == 0:
            empty_pages += 1
            continue
        adjacency = coo_matrix((np.ones(2 * len(source)), (np.concatenate([source, target]),
                                                           np.concatenate([target, source]))),
                               shape=(n, n)).tocsr()
        components.append(int(connected_components(adjacency, directed=False)[0]))
        if page.labels is None:
            unlabelled_pages += 1
            continue
        labels = np.asarray(page.labels, dtype=object)
        known = labels != ""
        unlabelled_words += int((~known).sum())
        for name in np.unique(labels[known]):
            row = per_class.setdefault(str(name), np.zeros(4, dtype=np.int64))
            mine = labels == name
            row[0] += int(mine.sum())
            row[1] += int((mine & ~touched).sum())
        both = known[source] & known[target]
        same = labels[source[both]] == labels[target[both]]
        stats.labelled_edges += int(both.sum())
        stats.same_label_edges += int(same.sum())
        for name, hits in pd.Series(same).groupby(labels[target[both]]):
            per_class[str(name)][2:] += (len(hits), int(hits.sum()))
        cells = np.flatnonzero(np.isin(labels, list(table_set)))
        if len(cells) > 1:
            box = np.asarray(page.boxes, dtype=np.float64)[cells]
            upper = np.triu(np.ones((len(cells), len(cells)), dtype=bool), k=1)
            for tally, lo, hi in ((row_tally, 1, 3), (column_tally, 0, 2)):
                a, b = np.nonzero(same_band(box[:, lo], box[:, hi]) & upper)
                tally += (len(a), *_reach(adjacency, (cells[a], cells[b])))
    stats.row_pairs, stats.row_reach = int(row_tally[0]), (int(row_tally[1]), int(row_tally[2]))
    stats.column_pairs = int(column_tally[0])
    stats.column_reach = (int(column_tally[1]), int(column_tally[2]))
    stats.relation_counts = {r: int(c) for r, c in zip(relations, counts)}
    if components:
        stats.components_mean = float(np.mean(components))
        stats.components_max = int(max(components))
    stats.per_class = _class_table(per_class)
    stats.notes = _notes(stats, empty_pages, unlabelled_pages, unlabelled_words, table_set)
    return stats


def _class_table(per_class: dict[str, np.ndarray]) -> pd.DataFrame:
    table = pd.DataFrame.from_dict(per_class, orient="index",
                                   columns=["words", "isolated", "edges_in", "same_class"],
                                   dtype="int64")
    table = table.sort_index()
    table.index.name = "label"
    with np.errstate(invalid="ignore", divide="ignore"):
        table["homophily"] = table["same_class"] / table["edges_in"].where(table["edges_in"] > 0)
    return table


def _notes(stats: GraphStats, empty_pages: int, unlabelled_pages: int, unlabelled_words: int,
           table_set: set[str]) -> list[str]:
    notes = []
    if empty_pages:
        notes.append(f"{empty_pages} page(s) without words: left out of the component count")
    if unlabelled_pages and unlabelled_pages == stats.pages - empty_pages:
        notes.append("no page has labels: homophily and table reachability are NaN")
    elif unlabelled_pages:
        notes.append(f"{unlabelled_pages} page(s) without labels: left out of homophily "
                     f"and table reachability")
    if unlabelled_words:
        notes.append(f"{unlabelled_words} word(s) with an empty label: their edges are left "
                     f"out of homophily")
    labelled_pages = stats.pages - empty_pages - unlabelled_pages
    if labelled_pages and not stats.row_pairs and not stats.column_pairs:
        notes.append(f"no two table words ({', '.join(sorted(table_set))}) share a row or "
                     f"column: table reachability is NaN")
    return notes


def format_stats(stats: GraphStats) -> str:
    """A plain-text block for the terminal: scalars, per-class table, notes."""
    lines = []
    for key, value in stats.to_dict().items():
        shown = f"{value:.4f}" if isinstance(value, float) else str(value)
        lines.append(f"  {key:<28} {shown}")
    if len(stats.per_class):
        lines.append("  per class:")
        table = stats.per_class.to_string(float_format=lambda v: f"{v:.4f}")
        lines.extend("    " + line for line in table.splitlines())
    lines.extend(f"  note: {note}" for note in stats.notes)
    return "\n".join(lines)


@dataclass
class CandidateRecall:
    """Per link kind: true links, and those the candidate pairs can supply."""

    true_links: dict[str, int] = field(default_factory=dict)
    found: dict[str, int] = field(default_factory=dict)
    candidate_pairs: dict[str, int] = field(default_factory=dict)

    def to_dict(self) -> dict[str, float | int]:
        out: dict[str, float | int] = {}
        for kind, total in self.true_links.items():
            out[f"candidate_recall_{kind}"] = _share(self.found[kind], total)
            out[f"true_links_{kind}"] = total
            out[f"candidate_pairs_{kind}"] = self.candidate_pairs[kind]
        return out


def candidate_recall(pages: Iterable[Page], builder: GraphBuilder,
                     links: pd.DataFrame | None = None,
                     options: CandidateOptions | None = None) -> CandidateRecall:
    """Share of true links the builder's candidate pairs can supply, for word grouping
    (``same_entity``, on the words) and, when a links table is given, ``key_value`` (its links
    other than ``row``) and ``rows`` (its ``row`` links), on the segments; see
    :mod:`dochar.graphs.candidates`. Pages without entity ids are left out."""
    pages = [page for page in pages if page.entity_ids is not None]
    options = options or CandidateOptions()
    recall = CandidateRecall()
    present = set() if links is None else set(links["kind"].astype(str))
    kinds = (["same_entity"] + (["key_value"] if present - {ROW_KIND} else [])
             + (["rows"] if ROW_KIND in present else []))
    for kind in kinds:
        total = found = pair_count = 0
        for page in link_pages(pages, kind, links):
            nodes = page.nodes
            pairs = candidate_pairs(nodes, options, directed=page.directed, builder=builder)
            entities = None if page.directed else np.asarray(page.entities, dtype=object)
            missed = missed_links(page.true_links, pairs, len(nodes), page.directed, entities)
            total += page.true_links.shape[1]
            found += page.true_links.shape[1] - missed.shape[1]
            pair_count += pairs.shape[1]
        recall.true_links[kind], recall.found[kind] = total, found
        recall.candidate_pairs[kind] = pair_count
    return recall
