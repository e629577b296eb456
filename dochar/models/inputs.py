"""Pages → graphs: typed edges from a builder plus node features, as torch-geometric ``Data``.

Also the flat per-word matrices the scikit-learn baselines read, cut from the same pages with
the same featurizer, so a GNN and a baseline never see different inputs by accident.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import torch
from torch_geometric.data import Data
from tqdm import tqdm

from dochar.data.word_table import Page
from dochar.features import WordFeaturizer, char_ngram_hashes
from dochar.graphs.base import GraphBuilder, TypedEdges


@dataclass
class PageSet:
    """Pages with their edges, built once and shared by every model of a run."""

    pages: list[Page]
    edges: list[TypedEdges]
    relations: tuple[str, ...]
    edge_attr_names: tuple[str, ...] = ()   # the builder's continuous edge attributes, if any

    @classmethod
    def build(cls, pages: Sequence[Page], builder: GraphBuilder, *, progress: bool = False,
              desc: str = "graphs") -> PageSet:
        pages = list(pages)
        build_all = getattr(builder, "build_all", None)
        if build_all is not None and not progress:   # all pages in one pass, the same edges
            edges = build_all(pages)
        else:   # disable=None: tqdm draws the bar only when its stream is a terminal
            edges = [builder(page) for page in tqdm(pages, desc=desc,
                                                    disable=None if progress else True,
                                                    leave=False)]
        return cls(pages, edges, tuple(builder.relations),
                   tuple(getattr(builder, "edge_attr_names", ())))


def label_indices(page: Page, label_index: dict[str, int]) -> np.ndarray:
    if page.labels is None:
        raise ValueError(f"page {page.key}: no 'label' column, cannot train or score on it")
    return np.array([label_index[label] for label in page.labels], dtype=np.int64)


def to_graphs(page_set: PageSet, featurizer: WordFeaturizer,
              label_index: dict[str, int] | None) -> list[Data]:
    """One graph per page; node targets ``y`` when ``label_index`` is given."""
    graphs = []
    features = featurizer.transform_all(page_set.pages)
    chars = featurizer.char_ids_all(page_set.pages) if featurizer.uses_char_cnn else None
    for index, (page, edges) in enumerate(zip(page_set.pages, page_set.edges)):
        data = Data(x=torch.from_numpy(features[index]),
                    edge_index=torch.from_numpy(edges.edge_index.astype(np.int64)),
                    edge_type=torch.from_numpy(edges.edge_type.astype(np.int64)),
                    num_nodes=len(page))
        if label_index is not None:
            data.y = torch.from_numpy(label_indices(page, label_index))
        if featurizer.uses_char_cnn:
            data.chars = torch.from_numpy(chars[index])
        edge_attr = getattr(edges, "edge_attr", None)
        if edge_attr is not None:
            data.edge_attr = torch.from_numpy(np.asarray(edge_attr, dtype=np.float32))
        if featurizer.uses_crop_cnn:
            data.crops = torch.from_numpy(featurizer.crops(page))
        graphs.append(data)
    return graphs


def stacked_graph(page_set: PageSet, featurizer: WordFeaturizer) -> Data:
    """All pages as one graph, nodes laid end to end (a page's node ids offset by the nodes
    before it; no edge crosses a page): the tensors ``Batch.from_data_list(to_graphs(...))``
    holds, without a graph object per page (what prediction feeds the model)."""
    pages, edges = page_set.pages, page_set.edges
    starts = np.cumsum([0] + [len(page) for page in pages])[:-1]
    data = Data(x=torch.from_numpy(np.concatenate(featurizer.transform_all(pages))),
                edge_index=torch.from_numpy(np.concatenate(
                    [e.edge_index.astype(np.int64) + start for e, start in zip(edges, starts)],
                    axis=1)),
                edge_type=torch.from_numpy(np.concatenate(
                    [e.edge_type.astype(np.int64) for e in edges])),
                num_nodes=int(sum(len(page) for page in pages)))
    if featurizer.uses_char_cnn:
        data.chars = torch.from_numpy(np.concatenate(featurizer.char_ids_all(pages)))
    if edges and getattr(edges[0], "edge_attr", None) is not None:
        data.edge_attr = torch.from_numpy(np.concatenate(
            [np.asarray(e.edge_attr, dtype=np.float32) for e in edges]))
    if featurizer.uses_crop_cnn:
        data.crops = torch.from_numpy(np.concatenate([featurizer.crops(p) for p in pages]))
    return data


def to_matrix(page_set: PageSet, featurizer: WordFeaturizer, *, hash_features: int,
              neighbour_features: bool) -> np.ndarray:
    """Per-word rows for a baseline; hashed n-grams stand in for the char CNN, the
    ``page_image`` columns for the crop CNN (unless already among the features). With
    ``neighbour_features``, the neighbours' aggregates follow, then those of the incoming edge
    attributes when the edges carry any."""
    from dochar.models.baselines import edge_attr_aggregates, neighbour_aggregates

    blocks = []
    features = featurizer.transform_all(page_set.pages)
    for page, edges, own in zip(page_set.pages, page_set.edges, features):
        parts = [own]
        if featurizer.uses_char_cnn:
            parts.append(char_ngram_hashes(page.texts, n_features=hash_features))
        if featurizer.uses_crop_cnn and "page_image" not in featurizer.groups:
            parts.append(featurizer.image_features(page))
        dense = np.hstack(parts)
        if neighbour_features:
            dense = np.hstack([dense, neighbour_aggregates(dense, edges.edge_index,
                                                            edges.edge_type,
                                                            len(page_set.relations))])
            if edges.edge_attr is not None:   # the edges' own attributes, as the GNN sees them
                dense = np.hstack([dense, edge_attr_aggregates(edges.edge_attr, edges.edge_index[1],
                                                               len(page))])
        blocks.append(dense)
    return np.vstack(blocks).astype(np.float32)
