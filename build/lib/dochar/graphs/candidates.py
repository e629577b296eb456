"""Candidate pairs for link classification, and how many true links they can reach.

A links model only scores candidate pairs, so a true link that is no candidate is lost before
training: candidate recall (true links the candidates can supply / true links) is its ceiling; for word
grouping a true link counts as supplied when candidate pairs inside its entity connect the
entity's words (see :func:`missed_links`).
Candidates come either from a graph builder's edges (``source="graph"``: every edge, whatever
its direction or type) or from every pair of nodes whose boxes lie within ``max_distance`` of
each other (``source="distance"``: the shortest gap between the boxes, as a fraction of the page
diagonal; 0 when they touch). Directed tasks score both orientations of each pair (a model must
tell the key from the value); undirected tasks score each unordered pair once, lower index first.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from dochar.data.word_table import Page
from dochar.graphs.base import GraphBuilder, GraphBuilderError, TypedEdges
from dochar.tasks.links import CANDIDATE_SOURCES



@dataclass(frozen=True)
class CandidateOptions:
    source: str = "graph"
    max_distance: float = 0.1    # distance source: fraction of the page diagonal

    def __post_init__(self) -> None:
        if self.source not in CANDIDATE_SOURCES:
            raise GraphBuilderError(f"task.candidates.source={self.source!r}: choose one of "
                                    f"{list(CANDIDATE_SOURCES)}")
        if not self.max_distance >= 0:
            raise GraphBuilderError(f"task.candidates.max_distance must be >= 0, got "
                                    f"{self.max_distance!r}")


def _canonical(source: np.ndarray, target: np.ndarray, directed: bool) -> np.ndarray:
    """(2, P) distinct pairs without self-pairs: both orientations, or lower index first."""
    source, target = np.asarray(source, np.int64), np.asarray(target, np.int64)
    keep = source != target
    source, target = source[keep], target[keep]
    if directed:
        pairs = np.stack([np.concatenate([source, target]), np.concatenate([target, source])])
    else:
        pairs = np.stack([np.minimum(source, target), np.maximum(source, target)])
    if not pairs.shape[1]:
        return pairs.reshape(2, 0)
    return np.unique(pairs, axis=1)


def box_gaps(boxes: np.ndarray) -> np.ndarray:
    """(n, n) shortest distance between every two boxes, 0 when they touch or overlap."""
    b = np.asarray(boxes, dtype=np.float64)
    gx = np.maximum(0.0, np.maximum(b[None, :, 0] - b[:, None, 2], b[:, None, 0] - b[None, :, 2]))
    gy = np.maximum(0.0, np.maximum(b[None, :, 1] - b[:, None, 3], b[:, None, 1] - b[None, :, 3]))
    return np.sqrt(gx * gx + gy * gy)


def candidate_pairs(page: Page, options: CandidateOptions, *, directed: bool,
                    edges: TypedEdges | None = None,
                    builder: GraphBuilder | None = None) -> np.ndarray:
    """(2, P) int64 candidate pairs of ``page``'s nodes (row 0 = source, row 1 = target)."""
    if options.source == "graph":
        if edges is None:
            if builder is None:
                raise GraphBuilderError("graph candidates need the page's edges or a builder")
            edges = builder(page)
        return _canonical(edges.edge_index[0], edges.edge_index[1], directed)
    diagonal = float(np.hypot(page.width, page.height))
    near = box_gaps(page.boxes) <= options.max_distance * diagonal
    source, target = np.nonzero(near)
    return _canonical(source, target, directed)


def pair_keys(pairs: np.ndarray, n: int, directed: bool) -> np.ndarray:
    """One integer per pair (unordered pairs map to the same key either way round)."""
    source, target = np.asarray(pairs, np.int64).reshape(2, -1)
    if not directed:
        source, target = np.minimum(source, target), np.maximum(source, target)
    return source * max(n, 1) + target


def candidate_hits(true_links: np.ndarray, pairs: np.ndarray, n: int,
                   directed: bool) -> np.ndarray:
    """Boolean per true link: is it among the candidate pairs?"""
    return np.isin(pair_keys(true_links, n, directed), pair_keys(pairs, n, directed))


def missed_links(true_links: np.ndarray, pairs: np.ndarray, n: int, directed: bool,
                 entities: np.ndarray | None = None) -> np.ndarray:
    """(2, M) true links the candidates cannot supply.

    Without ``entities``: the true links that are no candidate pair. With ``entities`` (word
    grouping, undirected): an entity is recoverable when its candidate pairs that stay inside it
    connect all its words, whichever true links they are; an entity they split into c pieces
    misses c - 1 links, reported as pairs joining the first words of consecutive pieces.
    """
    if entities is None:
        return true_links[:, ~candidate_hits(true_links, pairs, n, directed)]
    entities = np.asarray(entities, dtype=object)
    source, target = np.asarray(pairs, np.int64).reshape(2, -1)
    inside = entities[source] == entities[target]
    graph = coo_matrix((np.ones(int(inside.sum())), (source[inside], target[inside])),
                       shape=(n, n))
    _, piece = connected_components(graph, directed=False)
    # pieces of one entity side by side (stable: node order within it), so entities that
    # interleave in node order (rows of a table read column by column) miss their links too
    first = pd.DataFrame({"node": np.arange(n), "entity": entities, "piece": piece}
                         ).drop_duplicates(["entity", "piece"]).sort_values("entity",
                                                                            kind="stable")
    same = first["entity"].to_numpy()[1:] == first["entity"].to_numpy()[:-1]
    nodes = first["node"].to_numpy()
    return np.stack([nodes[:-1][same], nodes[1:][same]]).astype(np.int64).reshape(2, -1)
