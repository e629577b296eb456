"""``dochar predict`` labels all pages in one pass (:func:`dochar.predict.label_table`): the words
and fields it gives must be those of labelling each page alone, and each word's label and
probability those of the live model's own probabilities.

References: the live model applied through the training-time inputs (``to_graphs`` and
``predict_proba``), with the top label worked out by ``numpy.argmax``; one-page-at-a-time
labelling as the oracle for the batched path (each page's graph and features do not depend on
the other pages, so only float summation order may differ: 1e-6).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import torch
from hydra import compose, initialize_config_dir
from omegaconf import OmegaConf

import data_synth
from dochar import graphs
from dochar.data.word_table import iter_pages, validate_word_table
from dochar.features import WordFeaturizer
from dochar.models.builders import build_gnn, gnn_arguments
from dochar.models.fit import FittedModel
from dochar.models.inputs import PageSet, to_graphs
from dochar.models.saved import load_model, save_model
from dochar.models.training import predict_proba
from dochar.predict import fields, label_table
from dochar.tasks import WordLabels
from tests.helpers import CONFIGS


@pytest.fixture(scope="module")
def labelled(tmp_path_factory):
    """An R-GCN (kNN graph, every feature group with the char CNN) saved, loaded, and the live
    model's probabilities on six synthetic certificates."""
    with initialize_config_dir(config_dir=str(CONFIGS), version_base="1.3"):
        cfg = OmegaConf.to_container(compose("config", overrides=[
            "model=relational", "graph=knn", "features=all", "++model.hidden_dim=16"]),
            resolve=True)
    table = validate_word_table(data_synth.generate(6, seed=5), list(data_synth.LABELS)).table
    pages = list(iter_pages(table))
    page_set = PageSet.build(pages, graphs.from_config(cfg["graph"]))
    featurizer = WordFeaturizer.from_config(cfg["features"], cfg["data"]).fit(pages)
    torch.manual_seed(3)
    arguments = gnn_arguments(cfg, featurizer, WordLabels(), len(cfg["data"]["labels"]),
                              len(page_set.relations))
    model = build_gnn(arguments).eval()
    live = predict_proba(model, to_graphs(page_set, featurizer, None))
    folder = save_model(tmp_path_factory.mktemp("rgcn") / "model",
                        FittedModel(model, arguments, [], {}, featurizer=featurizer), cfg)
    return load_model(folder), table, pages, live, list(cfg["data"]["labels"])


def test_each_word_gets_the_live_models_top_label_and_probability(labelled):
    saved, table, pages, live, labels = labelled
    words, _ = label_table(saved, table)
    proba = np.concatenate(live)
    keys = pd.DataFrame({"doc_id": [p.doc_id for p in pages for _ in range(len(p))],
                         "page": [p.page for p in pages for _ in range(len(p))],
                         "word_id": np.concatenate([p.word_ids for p in pages])})
    got = keys.merge(words, on=["doc_id", "page", "word_id"], how="left")
    assert got["predicted"].tolist() == [labels[i] for i in proba.argmax(axis=1)]
    np.testing.assert_allclose(got["probability"], proba.max(axis=1), rtol=0, atol=1e-6)
    second = np.sort(proba, axis=1)[:, -2]
    np.testing.assert_allclose(got["top2_probability"], second, rtol=0, atol=1e-6)


def test_all_pages_at_once_give_the_words_and_fields_of_each_page_alone(labelled):
    saved, table, pages, _, _ = labelled
    words, found = label_table(saved, table)
    alone = [label_table(saved, part) for _, part in table.groupby(["doc_id", "page"])]
    by_page = pd.concat([w for w, _ in alone], ignore_index=True)
    fields_by_page = pd.concat([f for _, f in alone], ignore_index=True)
    order = ["doc_id", "page", "word_id"]
    words = words.sort_values(order).reset_index(drop=True)
    by_page = by_page.sort_values(order).reset_index(drop=True)
    assert len(words) == sum(len(p) for p in pages) and list(words.columns) == list(
        by_page.columns)
    numbers = [c for c in words.columns if c.endswith("probability")]
    pd.testing.assert_frame_equal(words.drop(columns=numbers), by_page.drop(columns=numbers))
    np.testing.assert_allclose(words[numbers], by_page[numbers], rtol=0, atol=1e-6)
    assert len(found) > len(pages)   # several fields a page: the runs were cut, not merged
    fields_order = ["doc_id", "page", "word_ids"]
    found = found.sort_values(fields_order).reset_index(drop=True)
    fields_by_page = fields_by_page.sort_values(fields_order).reset_index(drop=True)
    pd.testing.assert_frame_equal(found.drop(columns="probability"),
                                  fields_by_page.drop(columns="probability"))
    np.testing.assert_allclose(found["probability"], fields_by_page["probability"], rtol=0,
                               atol=1e-4)


def test_a_run_of_one_label_stops_at_the_end_of_a_page_and_of_a_document():
    """Worked by hand: the label ``cert_no`` goes on across a page break and a document break;
    each page keeps its own field."""
    rows = [  # doc, page, word, text, x0, y0, x1, y1, predicted, probability
        ("d", 1, 0, "Lot", 10, 10, 30, 20, "key", 0.9),
        ("d", 1, 1, "A-12", 40, 10, 70, 20, "cert_no", 0.8),
        ("d", 2, 0, "B7", 10, 10, 20, 20, "cert_no", 0.6),
        ("d", 2, 1, "C9", 30, 10, 40, 20, "cert_no", 0.7),
        ("e", 1, 0, "D1", 10, 10, 20, 20, "cert_no", 0.5),
    ]
    words = pd.DataFrame(rows, columns=["doc_id", "page", "word_id", "text", "x0", "y0", "x1",
                                        "y1", "predicted", "probability"])
    found = fields(words, ignore=["other"])
    assert found[["doc_id", "page", "label", "text", "word_ids", "probability"]].values.tolist(
        ) == [["d", 1, "key", "Lot", "0", 0.9], ["d", 1, "cert_no", "A-12", "1", 0.8],
              ["d", 2, "cert_no", "B7 C9", "0 1", 0.6], ["e", 1, "cert_no", "D1", "0", 0.5]]
