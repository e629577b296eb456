"""Edge attributes travel from the graph builder to the network: into each page's ``Data``, into
the stack's width (``edge_dim``), through training, and into the saved model."""

from __future__ import annotations

import json

import numpy as np
import pytest
import torch

from dochar import graphs
from dochar.experiment import run_experiment
from dochar.features import WordFeaturizer
from dochar.models.builders import build_gnn, gnn_arguments
from dochar.models.fit import FittedModel
from dochar.models.inputs import PageSet, to_graphs
from dochar.models.saved import MANIFEST, SavedModelError, load_model, save_model
from dochar.models.training import predict_proba
from dochar.tasks import WordLabels
from tests.models.test_saved import config, pages  # noqa: F401  (pages is a fixture)
from tests.test_combinations import SYNTH, make_config

EDGES = ["edges=geometry", "graph=knn"]


def _inputs(cfg, pages):  # noqa: F811
    builder = graphs.from_config(cfg["graph"], cfg["edges"])
    page_set = PageSet.build(pages, builder)
    featurizer = WordFeaturizer.from_config(cfg["features"], cfg["data"]).fit(pages)
    return builder, page_set, featurizer


def test_graphs_carry_the_builders_edge_attributes(pages):  # noqa: F811
    cfg = config("model=edge_attention", "features=geometry", *EDGES)
    builder, page_set, featurizer = _inputs(cfg, pages)
    assert page_set.edge_attr_names == builder.edge_attr_names and builder.edge_attr_names
    index = {label: i for i, label in enumerate(cfg["data"]["labels"])}
    for data, edges in zip(to_graphs(page_set, featurizer, index), page_set.edges):
        assert data.edge_attr.dtype == torch.float32
        np.testing.assert_array_equal(data.edge_attr.numpy(), edges.edge_attr)
    plain = PageSet.build(pages, graphs.from_config(cfg["graph"]))
    assert plain.edge_attr_names == ()
    assert all("edge_attr" not in data for data in to_graphs(plain, featurizer, index))


def test_a_saved_edge_aware_gnn_labels_pages_as_the_live_one(tmp_path, pages):  # noqa: F811
    cfg = config("model=transformer", "features=geometry", "++model.hidden_dim=8", *EDGES)
    builder, page_set, featurizer = _inputs(cfg, pages)
    torch.manual_seed(0)
    arguments = gnn_arguments(cfg, featurizer, WordLabels(), len(cfg["data"]["labels"]),
                              len(page_set.relations), len(builder.edge_attr_names))
    model = build_gnn(arguments).eval()
    index = {label: i for i, label in enumerate(cfg["data"]["labels"])}
    live = to_graphs(page_set, featurizer, index)
    expected = predict_proba(model, live)
    for graph in live:   # the attributes matter to this model
        graph.edge_attr = torch.zeros_like(graph.edge_attr)
    assert not np.allclose(np.vstack(predict_proba(model, live)), np.vstack(expected))
    folder = save_model(tmp_path / "model",
                        FittedModel(model, arguments, [], {}, featurizer=featurizer), cfg)
    manifest = json.loads((folder / MANIFEST).read_text())
    assert manifest["arguments"]["stack"]["edge_dim"] == len(builder.edge_attr_names)
    for mine, theirs in zip(load_model(folder).predict_proba(pages), expected):
        np.testing.assert_allclose(mine, theirs, rtol=0, atol=1e-6)
    manifest["arguments"]["stack"]["edge_dim"] = 3
    (folder / MANIFEST).write_text(json.dumps(manifest))
    with pytest.raises(SavedModelError, match="reads 3 edge attributes"):
        load_model(folder)


@pytest.mark.parametrize("model", ["edge_attention", "gated_relational"])
def test_a_run_sizes_the_network_from_the_edge_attributes(model):
    cfg = make_config("knn", model, "geometry_text", [*SYNTH, "edges=geometry"])
    names = graphs.from_config(cfg.graph, cfg.edges).edge_attr_names
    bundle, fitted = run_experiment(cfg)
    assert fitted.model.edge_dim == len(names) > 0
    assert fitted.model.edge_norm.num_features == len(names)
    assert np.isfinite(bundle.cost["val_macro_f1"])
