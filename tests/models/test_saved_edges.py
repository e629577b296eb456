"""A saved model keeps its edge features: the loaded builder adds the same attributes, so a
forest trained on edge aggregates labels new pages exactly as the live one (dochar/models/saved.py).
"""

from __future__ import annotations

import json

import numpy as np
import pytest

import data_synth
from dochar import graphs
from dochar.data.word_table import iter_pages, validate_word_table
from dochar.features import WordFeaturizer
from dochar.models.builders import baseline_arguments, build_baseline
from dochar.models.fit import FittedModel
from dochar.models.inputs import PageSet, label_indices, to_matrix
from dochar.models.saved import MANIFEST, SavedModelError, load_model, save_model
from tests.models.test_saved import config


def test_a_forest_on_edge_attributes_is_applied_with_them(tmp_path):
    table = validate_word_table(data_synth.generate(4, seed=11), list(data_synth.LABELS)).table
    pages = list(iter_pages(table))
    cfg = config("model=random_forest_neighbours", "features=geometry", "edges=geometry",
                 "graph=knn")
    builder = graphs.from_config(cfg["graph"], cfg["edges"])
    page_set = PageSet.build(pages, builder)
    featurizer = WordFeaturizer.from_config(cfg["features"], cfg["data"]).fit(pages)
    index = {label: i for i, label in enumerate(cfg["data"]["labels"])}
    x = to_matrix(page_set, featurizer, hash_features=cfg["features"]["hash_features"],
                  neighbour_features=True)
    arguments = {**baseline_arguments({**cfg, "seed": 0}), "options": {"n_estimators": 5}}
    forest = build_baseline(arguments).fit(
        x, np.concatenate([label_indices(page, index) for page in pages]))
    expected = np.zeros((len(x), len(index)))
    expected[:, forest.classes_] = forest.predict_proba(x)
    folder = save_model(tmp_path / "model",
                        FittedModel(forest, arguments, [], {}, featurizer=featurizer), cfg)
    loaded = load_model(folder)
    assert loaded.builder.edge_attr_names == builder.edge_attr_names != ()
    np.testing.assert_array_equal(np.vstack(loaded.predict_proba(pages)), expected)

    manifest = json.loads((folder / MANIFEST).read_text())
    manifest["edge_attr_names"] = manifest["edge_attr_names"][:-1]
    (folder / MANIFEST).write_text(json.dumps(manifest))
    with pytest.raises(SavedModelError, match="edge features"):
        load_model(folder)
