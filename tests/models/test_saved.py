"""The saved model: one folder that labels pages exactly as the live model did, loads without
executing anything from its files, and refuses a label set or task it was not trained for.

The reference for "exactly as the live model" is the fitted object itself, applied through the
training-time inputs (``to_graphs`` / ``to_matrix``); the reference for "nothing ran" is a marker
file that the crafted payload creates when it is unpickled the unsafe way (shown in each test).
"""

from __future__ import annotations

import io
import json
import os
import pickle
import zipfile
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
from dochar.models.builders import (
    baseline_arguments,
    build_baseline,
    build_gnn,
    build_template,
    gnn_arguments,
    template_arguments,
)
from dochar.models.fit import FittedModel
from dochar.models.inputs import PageSet, label_indices, to_graphs, to_matrix
from dochar.models.saved import (
    ESTIMATOR,
    MANIFEST,
    TEMPLATES,
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


@pytest.mark.parametrize("extra,refused", [("last", False), ("one-past", True),
                                           ("negative", True)])
def test_estimator_classes_must_index_the_labels(pages, tmp_path, extra, refused):
    # the labels are positions 0 .. L-1 of the manifest's list (common practice for class
    # indices); a forest trained on one more class, the last label, L or -1, indexes them or not
    cfg = config("model=random_forest", "features=all")
    featurizer = WordFeaturizer.from_config(cfg["features"], cfg["data"]).fit(pages)
    n_labels = len(cfg["data"]["labels"])
    extra_class = {"last": n_labels - 1, "one-past": n_labels, "negative": -1}[extra]
    x = np.random.default_rng(0).normal(size=(8, 3))
    y = np.array([0, 1] * 3 + [extra_class] * 2)
    arguments = {**baseline_arguments({**cfg, "seed": 0}), "options": {"n_estimators": 3}}
    forest = build_baseline(arguments).fit(x, y)
    folder = save_model(tmp_path / "model",
                        FittedModel(forest, arguments, [], {}, featurizer=featurizer), cfg)
    if refused:
        with pytest.raises(SavedModelError) as error:
            load_model(folder)
        assert str(error.value) == (f"{folder / ESTIMATOR}: estimator classes "
                                    f"{sorted([0, 1, extra_class])} do not index the "
                                    f"{n_labels} labels")
    else:
        assert list(load_model(folder).model.classes_) == [0, 1, n_labels - 1]


# --- weights that torch's safe loader refuses: the message quotes why -------------------------

def weights_file(state: object) -> bytes:
    buffer = io.BytesIO()
    torch.save(state, buffer)
    return buffer.getvalue()


def torch_refusal(path: Path) -> str:
    """torch's own message for a file its weights-only loader refuses (the reference)."""
    with pytest.raises(Exception) as error:
        torch.load(path, map_location="cpu", weights_only=True)
    return str(error.value)


def line_with(text: str, piece: str) -> str:
    """The one line of torch's message that holds ``piece``."""
    found = [line.strip() for line in text.splitlines() if piece in line]
    assert len(found) == 1, text
    return found[0]


def the_whole_line(text: str) -> str:
    assert "\n" not in text, text
    return text


def the_type_of_a_silent_end(text: str) -> str:
    assert text == "", text   # EOFError() says nothing: its type name is quoted
    return "EOFError"


SYSTEM = f"GLOBAL {os.system.__module__}.system"
WEIGHT_FAULTS = {   # payload(marker, real weights), and what of torch's refusal is quoted
    "pickled-command": (lambda marker, real: weights_file({"w": RunsCommand(marker)}),
                        lambda text: line_with(text, SYSTEM)),   # the refused global
    "not-a-pickle": (lambda marker, real: b"plain text, no tensors",
                     lambda text: line_with(text, "WeightsUnpickler error")),
    "cut-short": (lambda marker, real: real[:len(real) // 2], the_whole_line),
    "empty": (lambda marker, real: b"", the_type_of_a_silent_end),
}


@pytest.mark.parametrize("fault", sorted(WEIGHT_FAULTS))
def test_refused_weights_name_the_reason_torch_gave(saved_gnn, tmp_path, fault):
    """The message quotes the line of torch's refusal naming the refused global or the
    unpickler's complaint, else torch's one line, else the error's type (the error's rule)."""
    payload, quoted = WEIGHT_FAULTS[fault]
    marker = tmp_path / "ran"
    planted = plant(saved_gnn[0], tmp_path, WEIGHTS,
                    payload(marker, (saved_gnn[0] / WEIGHTS).read_bytes()), rehash=True)
    reason = quoted(torch_refusal(planted / WEIGHTS))
    with pytest.raises(SavedModelError) as error:
        load_model(planted)
    assert str(error.value) == (f"{planted / WEIGHTS}: refused, not a plain tensor file; "
                                f"torch's weights-only loader stopped at: {reason}")
    assert not marker.exists()


def test_weights_that_are_not_all_tensors_are_refused(saved_gnn, tmp_path):
    state = torch.load(saved_gnn[0] / WEIGHTS, weights_only=True)
    planted = plant(saved_gnn[0], tmp_path, WEIGHTS, weights_file({**state, "extra": 1}),
                    rehash=True)
    with pytest.raises(SavedModelError) as error:
        load_model(planted)
    assert str(error.value) == (f"{planted / WEIGHTS}: refused, expected a mapping of names to "
                                "tensors")


def test_an_environment_asking_for_unsafe_loads_is_not_obeyed(saved_gnn, tmp_path, monkeypatch):
    # torch lets TORCH_FORCE_NO_WEIGHTS_ONLY_LOAD turn the safe loader off unless the caller
    # asked for weights_only explicitly (torch.load's documentation)
    marker = tmp_path / "ran"
    planted = plant(saved_gnn[0], tmp_path, WEIGHTS,
                    weights_file({"w": RunsCommand(marker)}), rehash=True)
    monkeypatch.setenv("TORCH_FORCE_NO_WEIGHTS_ONLY_LOAD", "1")
    with pytest.raises(SavedModelError, match="weights-only loader stopped at"):
        load_model(planted)
    assert not marker.exists()


def as_if_on_gpu(payload: bytes) -> bytes:
    """The same tensors, their storages tagged ``cuda:0`` as torch.save tags a GPU's tensors."""
    source = zipfile.ZipFile(io.BytesIO(payload))
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w") as target:
        for item in source.infolist():
            data = source.read(item)
            if item.filename.endswith("/data.pkl"):   # pickled str: 'X', 4-byte length, text
                data = data.replace(b"X\x03\x00\x00\x00cpu", b"X\x06\x00\x00\x00cuda:0")
            target.writestr(item, data)
    return out.getvalue()


def test_weights_written_on_a_gpu_load_on_the_cpu(saved_gnn, pages, tmp_path):
    folder, expected = saved_gnn
    payload = as_if_on_gpu((folder / WEIGHTS).read_bytes())
    (tmp_path / "gpu.pt").write_bytes(payload)
    with pytest.raises(RuntimeError, match="CUDA"):   # the tags are real: unmapped, they fail
        torch.load(tmp_path / "gpu.pt", weights_only=True)
    loaded = load_model(plant(folder, tmp_path, WEIGHTS, payload, rehash=True))
    for mine, theirs in zip(loaded.predict_proba(pages), expected):
        np.testing.assert_allclose(mine, theirs, rtol=0, atol=1e-6)


# --- other refusals, asserted whole ----------------------------------------------------------

def test_an_estimator_file_that_is_no_zip_is_refused(saved_forest, tmp_path):
    planted = plant(saved_forest[0], tmp_path, ESTIMATOR, pickle.dumps({"a": 1}), rehash=True)
    with pytest.raises(zipfile.BadZipFile) as reason:   # skops files are zip archives
        zipfile.ZipFile(planted / ESTIMATOR)
    with pytest.raises(SavedModelError) as error:
        load_model(planted)
    assert str(error.value) == (f"{planted / ESTIMATOR}: refused, not a skops model file "
                                f"(BadZipFile: {reason.value})")


def test_an_estimator_whose_arrays_skops_cannot_read_is_refused(saved_forest, tmp_path):
    # every type in the file is trusted, but one array member is not a .npy array any more
    broken = b"no array here"
    source = zipfile.ZipFile(saved_forest[0] / ESTIMATOR)
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w") as target:
        first = next(name for name in source.namelist() if name.endswith(".npy"))
        for item in source.infolist():
            target.writestr(item, broken if item.filename == first else source.read(item))
    planted = plant(saved_forest[0], tmp_path, ESTIMATOR, out.getvalue(), rehash=True)
    with pytest.raises(ValueError) as reason:   # NumPy's own refusal of those bytes
        np.load(io.BytesIO(broken), allow_pickle=False)
    with pytest.raises(SavedModelError) as error:
        load_model(planted)
    assert str(error.value) == (f"{planted / ESTIMATOR}: refused by skops "
                                f"(ValueError: {reason.value})")


def test_a_template_file_that_is_no_json_is_refused(pages, tmp_path):
    cfg = config("model=layout_template")
    arguments = template_arguments(OmegaConf.create(cfg), cfg["data"]["labels"])
    fitted = FittedModel(build_template(arguments).fit(pages), arguments, [], {})
    folder = save_model(tmp_path / "model", fitted, cfg)
    planted = plant(folder, tmp_path, TEMPLATES, b"{templates", rehash=True)
    with pytest.raises(json.JSONDecodeError) as reason:   # the json module's own refusal
        json.loads("{templates")
    with pytest.raises(SavedModelError) as error:
        load_model(planted)
    assert str(error.value) == (f"{planted / TEMPLATES}: not a readable template file "
                                f"(JSONDecodeError: {reason.value})")


def test_a_word_model_scores_no_pairs_and_needs_words(saved_forest, pages):
    loaded = load_model(saved_forest[0])
    with pytest.raises(SavedModelError) as error:
        loaded.score_pairs(pages)
    assert str(error.value) == (f"{saved_forest[0]}: a word_labels model labels nodes, it scores "
                                "no pairs")
    table = validate_word_table(data_synth.generate(1, seed=11), list(data_synth.LABELS)).table
    with pytest.raises(SavedModelError) as error:
        loaded.label_words(table.iloc[:0])
    assert str(error.value) == "no words to label"


def test_label_words_carries_the_inputs_labels_when_it_has_them(saved_forest):
    loaded = load_model(saved_forest[0])
    table = validate_word_table(data_synth.generate(1, seed=11), list(data_synth.LABELS)).table
    with_labels = loaded.label_words(table)
    # worked by hand from the docstring: the input's own labels are carried through per word
    assert with_labels["label"].tolist() == table["label"].tolist()
    without = loaded.label_words(table.drop(columns=["label"]))
    assert "label" not in without.columns
    assert without["predicted"].tolist() == with_labels["predicted"].tolist()
