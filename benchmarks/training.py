"""Training and prediction figures for the relational GNN, with the random forest beside it.

* one training epoch (the loop of :func:`dochar.models.training.train`, validation included) and, for
  context, one forward and backward pass over all training words at once: the arithmetic no
  batching or loop change can avoid;
* prediction end to end, word table to labels: features, graph, model, argmax per page.
"""

from __future__ import annotations

import numpy as np
import torch
from omegaconf import OmegaConf

from benchmarks.inputs import RunInputs
from benchmarks.report import Figure, timed
from dochar.models.inputs import label_indices, to_graphs, to_matrix
from dochar import graphs as graph_builders
from dochar.graphs.base import no_edges
from dochar.models.baselines import make_baseline
from dochar.models.training import class_weights, predict_proba, seed_everything, train


def training_figures(inputs: RunInputs, repeats: int, judged: bool, trees: int = 300
                     ) -> list[Figure]:
    seed_everything(0, 1)
    index = {label: i for i, label in enumerate(inputs.labels)}
    graphs = {part: to_graphs(inputs.sets[part], inputs.featurizer, index)
              for part in ("train", "val")}
    one_epoch = {**OmegaConf.to_container(inputs.cfg.train), "max_epochs": 1, "progress": False}
    epoch = timed(lambda: train(inputs.model(), graphs["train"], graphs["val"],
                                len(inputs.labels), one_epoch, 0), repeats)
    floor = timed(lambda: whole_pass(inputs, graphs["train"]), repeats)
    words = sum(len(p) for p in inputs.sets["train"].pages)
    forest, forest_fit = fitted_forest(inputs, index, trees)
    return [
        Figure(f"training epoch, {len(graphs['train'])} pages ({words:,} words), seconds",
               f"{epoch:.3f} s", comparison="<=", threshold=0.2, judged=judged, number=epoch),
        Figure("training epoch: speed-up over the training loop before issue 14",
               "loop not rewritten", "the same loop", 1.0, ">=", 8, judged),
        Figure("one forward + backward over all training words at once, seconds",
               f"{floor:.3f} s", number=floor),
        Figure("random forest fit on the same words, seconds", f"{forest_fit:.2f} s",
               number=forest_fit),
        *prediction_figures(inputs, forest, repeats, judged),
    ]


def whole_pass(inputs: RunInputs, graphs) -> None:
    from torch_geometric.data import Batch

    model = inputs.model()
    batch = Batch.from_data_list(list(graphs))
    loss = torch.nn.functional.cross_entropy(
        model(batch.x, batch.edge_index, batch.edge_type, batch.chars), batch.y,
        weight=class_weights(graphs, len(inputs.labels), "balanced"))
    loss.backward()


def fitted_forest(inputs: RunInputs, index: dict[str, int], trees: int):
    """The ``model=random_forest`` settings (300 trees; fewer in smoke mode) on the run's words."""
    cfg = inputs.cfg
    options = dict(n_estimators=trees, min_samples_leaf=1)
    forest = make_baseline("random_forest", 0, **options)
    x = to_matrix(inputs.sets["train"], inputs.featurizer,
                  hash_features=int(cfg.features.hash_features), neighbour_features=False)
    y = np.concatenate([label_indices(p, index) for p in inputs.sets["train"].pages])
    return forest, timed(lambda: forest.fit(x, y))


def prediction_figures(inputs: RunInputs, forest, repeats: int, judged: bool) -> list[Figure]:
    """Pages per second from words to labels, every stage included, one page at a time."""
    from dochar.models.inputs import PageSet

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

    index = {label: i for i, label in enumerate(inputs.labels)}
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
