"""Prediction figures: pages per second from the word table to labels, relational GNN and the
random forest beside it (features, graph, model, argmax per page)."""

from __future__ import annotations

import torch

from benchmarks.inputs import RunInputs
from benchmarks.report import Figure, timed
from benchmarks.training import fitted_forest
from dochar import graphs as graph_builders
from dochar.graphs.base import no_edges
from dochar.models.inputs import PageSet, to_graphs, to_matrix
from dochar.models.training import predict_proba


def prediction_figures(inputs: RunInputs, repeats: int, judged: bool, trees: int = 300
                       ) -> list[Figure]:
    """Pages per second from words to labels, every stage included, one page at a time."""
    index = {label: i for i, label in enumerate(inputs.labels)}
    forest, _ = fitted_forest(inputs, index, trees)
    pages = inputs.sets["test"].pages
    builder = graph_builders.from_config(inputs.cfg.graph)
    model = inputs.model().eval()
    featurizer = inputs.featurizer
    hashes = int(inputs.cfg.features.hash_features)

    def gnn() -> None:
        with torch.no_grad():
            for page in pages:
                edges = builder(page)
                x = torch.from_numpy(featurizer.transform(page))
                chars = torch.from_numpy(featurizer.char_ids(page))
                logits = model(x, torch.from_numpy(edges.edge_index),
                               torch.from_numpy(edges.edge_type), chars)
                logits.argmax(dim=1).numpy()

    def forest_labels() -> None:        # no graph: the forest reads each word's own features
        for page in pages:
            one = PageSet([page], [no_edges(builder.relations)], tuple(builder.relations))
            forest.predict(to_matrix(one, featurizer, hash_features=hashes,
                                     neighbour_features=False))

    def gnn_together() -> None:      # as a run predicts its test pages: one disjoint graph
        page_set = PageSet(list(pages), [builder(page) for page in pages],
                           tuple(builder.relations))
        graphs = to_graphs(page_set, featurizer, index)
        predict_proba(model, graphs)

    def forest_together() -> None:
        page_set = PageSet(list(pages), [no_edges(builder.relations)] * len(pages),
                           tuple(builder.relations))
        forest.predict(to_matrix(page_set, featurizer, hash_features=hashes,
                                 neighbour_features=False))

    rates = {name: len(pages) / timed(work, repeats) for name, work in (
        ("gnn", gnn_together), ("forest", forest_together), ("gnn one", gnn),
        ("forest one", forest_labels))}
    words = sum(len(p) for p in pages) / len(pages)
    return [
        Figure(f"prediction end to end, relational GNN, {len(pages)} pages in one batch, pages/s "
               f"({words:.0f} words a page)", f"{rates['gnn']:.0f} pages/s", comparison=">=",
               threshold=200, judged=judged, number=rates["gnn"]),
        Figure("prediction end to end, random forest (same features), pages/s",
               f"{rates['forest']:.0f} pages/s", number=rates["forest"]),
        Figure("prediction end to end one page at a time: relational GNN, random forest",
               f"{rates['gnn one']:.0f}, {rates['forest one']:.0f} pages/s"),
    ]
