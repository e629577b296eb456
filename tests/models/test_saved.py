"""The saved model: one folder that labels pages exactly as the live model did, loads without
executing anything from its files, and refuses a label set or task it was not trained for.

The reference for "exactly as the live model" is the fitted object itself, applied through the
training-time inputs (``to_graphs`` / ``to_matrix``); the reference for "nothing ran" is a marker
file that the crafted payload creates when it is unpickled the unsafe way (shown in each test).
"""

from __future__ import annotations

import json
import os
import pickle
from pathlib import Path

import numpy as np
import pytest
import torch
from hydra import compose, initialize_config_dir
from omegaconf import OmegaConf

import data_synth
from dochar import graphs
from dochar.data.word_table import iter_pages, validate_word_table
from dochar.features import WordFeaturizer
from dochar.models.builders import baseline_arguments, build_baseline, build_gnn, gnn_arguments
from dochar.models.fit import FittedModel
from dochar.models.inputs import PageSet, label_indices, to_graphs, to_matrix
from dochar.models.saved import (
    ESTIMATOR,
    MANIFEST,
    WEIGHTS,
    SavedModelError,
    featurizer_from_state,
    featurizer_state,
    load_model,
    save_model,
)
from dochar.models.training import predict_proba
from dochar.tasks import WordLabels
from tests.helpers import CONFIGS


def config(*overrides: str) -> dict:
    with initialize_config_dir(config_dir=str(CONFIGS), version_base="1.3"):
        return OmegaConf.to_container(compose("config", overrides=list(overrides)), resolve=True)


@pytest.fixture(scope="module")
def pages():
    table = validate_word_table(data_synth.generate(4, seed=11), list(data_synth.LABELS)).table
    return list(iter_pages(table))


def gnn_for(cfg: dict, page_set: PageSet, featurizer: WordFeaturizer) -> FittedModel:
    """A GNN built the way a run builds one (untrained weights are as good as any to compare)."""
    torch.manual_seed(0)
    arguments = gnn_arguments(cfg, featurizer, WordLabels(), len(cfg["data"]["labels"]),
                              len(page_set.relations))
    return FittedModel(build_gnn(arguments).eval(), arguments, [], {}, featurizer=featurizer)


@pytest.fixture(scope="module")
def saved_gnn(tmp_path_factory, pages):
    cfg = config("model=attention", "graph=knn", "features=all", "++model.hidden_dim=8")
    page_set = PageSet.build(pages, graphs.from_config(cfg["graph"]))
    featurizer = WordFeaturizer.from_config(cfg["features"], cfg["data"]).fit(pages)
    fitted = gnn_for(cfg, page_set, featurizer)
    index = {label: i for i, label in enumerate(cfg["data"]["labels"])}
    expected = predict_proba(fitted.model, to_graphs(page_set, featurizer, index))
    folder = save_model(tmp_path_factory.mktemp("gnn") / "model", fitted, cfg)
    return folder, expected


@pytest.fixture(scope="module")
def saved_forest(tmp_path_factory, pages):
    cfg = config("model=random_forest_neighbours", "features=all")
    page_set = PageSet.build(pages, graphs.from_config(cfg["graph"]))
    featurizer = WordFeaturizer.from_config(cfg["features"], cfg["data"]).fit(pages)
    index = {label: i for i, label in enumerate(cfg["data"]["labels"])}
    x = to_matrix(page_set, featurizer, hash_features=cfg["features"]["hash_features"],
                  neighbour_features=True)
    y = np.concatenate([label_indices(page, index) for page in pages])
    arguments = {**baseline_arguments({**cfg, "seed": 0}), "options": {"n_estimators": 5}}
    forest = build_baseline(arguments).fit(x, y)
    expected = np.zeros((len(x), len(index)))
    expected[:, forest.classes_] = forest.predict_proba(x)
    folder = save_model(tmp_path_factory.mktemp("forest") / "model",
                        FittedModel(forest, arguments, [], {}, featurizer=featurizer), cfg)
    return folder, expected


def test_a_loaded_gnn_labels_pages_as_the_live_one(saved_gnn, pages):
    folder, expected = saved_gnn
    loaded = load_model(folder)
    assert loaded.kind == "gnn" and loaded.task == WordLabels()
    got = loaded.predict_proba(pages)
    for mine, theirs in zip(got, expected):
        np.testing.assert_allclose(mine, theirs, rtol=0, atol=1e-6)


def test_a_loaded_baseline_labels_pages_as_the_live_one(saved_forest, pages):
    folder, expected = saved_forest
    loaded = load_model(folder)
    assert sorted(p.name for p in folder.iterdir()) == [ESTIMATOR, MANIFEST]
    np.testing.assert_array_equal(np.vstack(loaded.predict_proba(pages)), expected)


def test_the_manifest_records_what_the_brief_asks(saved_gnn):
    manifest = json.loads((saved_gnn[0] / MANIFEST).read_text())
    assert manifest["labels"] == list(data_synth.LABELS)
    assert manifest["task"]["name"] == "word_labels"
    assert manifest["graph"]["name"] == "knn" and manifest["model"]["layer"] == "attention"
    params = manifest["featurizer"]["params"]
    assert params["groups"] == ["geometry", "text_flags", "char_cnn"]
    assert set(params["lexicons"]) == {"unit", "verdict"}
    # every constructor argument of the featurizer is recorded (scikit-learn's get_params rule)
    import inspect
    assert set(params) == set(inspect.signature(WordFeaturizer.__init__).parameters) - {"self"}
    assert manifest["arguments"]["stack"]["layer"] == "attention"
    assert {"torch", "torch-geometric", "scikit-learn", "numpy", "dochar"} <= set(
        manifest["libraries"])


def test_featurizer_state_keeps_standardisation_and_lexicons(pages):
    featurizer = WordFeaturizer(groups=["geometry", "text_flags"],
                                lexicons={"unit": ["mg/L", "MG/KG", "µg/L"]},
                                standardize=True).fit(pages[:2])
    rebuilt = featurizer_from_state(json.loads(json.dumps(featurizer_state(featurizer, 16))))
    for page in pages:
        np.testing.assert_array_equal(rebuilt.transform(page), featurizer.transform(page))


def test_task_and_label_set_must_agree(saved_forest):
    loaded = load_model(saved_forest[0])
    loaded.expect(labels=list(data_synth.LABELS), task="word_labels")   # the same: accepted
    with pytest.raises(SavedModelError, match=r"task 'word_labels'.*asks for task 'links'"):
        loaded.expect(task="links")
    with pytest.raises(SavedModelError, match=r"labels the model does not know: \['stamp'\]"):
        loaded.expect(labels=[*data_synth.LABELS, "stamp"])
    with pytest.raises(SavedModelError, match="another order"):
        loaded.expect(labels=list(reversed(data_synth.LABELS)))


def test_a_failed_save_leaves_the_previous_model_whole(saved_gnn, pages, tmp_path):
    folder, expected = saved_gnn
    copy = tmp_path / "model"
    os.system(f"cp -r {folder} {copy}")
    cfg = config("model=attention", "graph=knn", "features=all", "++model.hidden_dim=16")
    page_set = PageSet.build(pages, graphs.from_config(cfg["graph"]))
    featurizer = WordFeaturizer.from_config(cfg["features"], cfg["data"]).fit(pages)
    wrong = gnn_for(config("model=attention", "graph=knn", "features=all",
                           "++model.hidden_dim=8"), page_set, featurizer)
    recorded = gnn_for(cfg, page_set, featurizer).arguments
    with pytest.raises(RuntimeError, match="size mismatch"):   # weights do not fit the record
        save_model(copy, FittedModel(wrong.model, recorded, [], {}, featurizer=featurizer), cfg)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["model"]   # no half-written folder
    np.testing.assert_allclose(load_model(copy).predict_proba(pages[:1])[0], expected[0],
                               atol=1e-6)


# --- crafted files ----------------------------------------------------------------------------

class RunsCommand:
    """Unpickling this calls os.system: the classic pickle payload."""

    def __init__(self, marker: Path) -> None:
        self.marker = marker

    def __reduce__(self):
        return os.system, (f"touch {self.marker}",)


def plant(folder: Path, tmp_path: Path, name: str, payload: bytes, *, rehash: bool) -> Path:
    """A copy of a unit with ``name`` replaced; with ``rehash`` the manifest is edited to match,
    as an attacker who can write the folder would."""
    import hashlib

    target = tmp_path / "planted"
    os.system(f"cp -r {folder} {target}")
    (target / name).write_bytes(payload)
    if rehash:
        manifest = json.loads((target / MANIFEST).read_text())
        manifest["files"][name] = hashlib.sha256(payload).hexdigest()
        (target / MANIFEST).write_text(json.dumps(manifest))
    return target


def proof_that_payload_runs(payload: bytes, marker: Path) -> None:
    """The payload is real: a plain pickle load runs the command (common practice)."""
    pickle.loads(payload)
    assert marker.exists()
    marker.unlink()


@pytest.mark.parametrize("rehash", [False, True], ids=["hash-unchanged", "hash-forged"])
def test_malicious_weights_are_refused_and_nothing_runs(saved_gnn, tmp_path, rehash):
    marker = tmp_path / "weights-ran"
    buffer = tmp_path / "payload.pt"
    torch.save({"input_projection.weight": RunsCommand(marker)}, buffer)
    payload = buffer.read_bytes()
    torch.load(buffer, weights_only=False)   # the same file through the unsafe loader runs it
    assert marker.exists()
    marker.unlink()
    planted = plant(saved_gnn[0], tmp_path, WEIGHTS, payload, rehash=rehash)
    expected = "weights-only loader" if rehash else "SHA-256 differs"
    with pytest.raises(SavedModelError, match=expected):
        load_model(planted)
    assert not marker.exists()


@pytest.mark.parametrize("rehash", [False, True], ids=["hash-unchanged", "hash-forged"])
def test_a_pickle_in_place_of_the_estimator_is_refused(saved_forest, tmp_path, rehash):
    marker = tmp_path / "estimator-ran"
    payload = pickle.dumps(RunsCommand(marker))
    proof_that_payload_runs(payload, marker)
    planted = plant(saved_forest[0], tmp_path, ESTIMATOR, payload, rehash=rehash)
    expected = "not a skops model file" if rehash else "SHA-256 differs"
    with pytest.raises(SavedModelError, match=expected):
        load_model(planted)
    assert not marker.exists()


class Trojan:
    """A plain object skops can store; loading it would mean trusting this module's code."""

    def __init__(self) -> None:
        self.classes_ = np.arange(3)


def test_a_skops_file_with_an_untrusted_type_is_refused(saved_forest, tmp_path):
    import skops.io

    source = tmp_path / "trojan.skops"
    skops.io.dump(Trojan(), source)
    planted = plant(saved_forest[0], tmp_path, ESTIMATOR, source.read_bytes(), rehash=True)
    with pytest.raises(SavedModelError, match=r"outside dochar's trusted list: \[.*Trojan"):
        load_model(planted)


def test_a_folder_without_a_model_says_so(tmp_path):
    with pytest.raises(SavedModelError, match="no dochar model here"):
        load_model(tmp_path)


@pytest.mark.parametrize("offset,refused", [(0, False), (1, True)], ids=["last-label", "one-past"])
def test_estimator_classes_must_index_the_labels(pages, tmp_path, offset, refused):
    # the labels are positions 0 .. L-1 of the manifest's list (common practice for class
    # indices); a forest trained on class L - 1 + offset either indexes the last label or none
    cfg = config("model=random_forest", "features=all")
    featurizer = WordFeaturizer.from_config(cfg["features"], cfg["data"]).fit(pages)
    n_labels = len(cfg["data"]["labels"])
    x = np.random.default_rng(0).normal(size=(8, 3))
    y = np.array([0, 1] * 3 + [n_labels - 1 + offset] * 2)
    arguments = {**baseline_arguments({**cfg, "seed": 0}), "options": {"n_estimators": 3}}
    forest = build_baseline(arguments).fit(x, y)
    folder = save_model(tmp_path / "model",
                        FittedModel(forest, arguments, [], {}, featurizer=featurizer), cfg)
    if refused:
        with pytest.raises(SavedModelError, match=rf"classes \[0, 1, {n_labels}\] do not index "
                                                  rf"the {n_labels} labels"):
            load_model(folder)
    else:
        assert list(load_model(folder).model.classes_) == [0, 1, n_labels - 1]
