"""The saved unit's edges (dochar/models/saved.py): a forest on edge aggregates and a pair forest
applied as the live ones; a manifest that disagrees with its parts refused with a located, whole
message; what save_model records; what a loaded unit tells its user.

References: the live fitted objects (their own predict_proba on the training-time inputs), the
libraries' own refusals (json, NumPy, torch), and messages worked out by hand from each check.
"""

from __future__ import annotations

import io
import json
import shutil
import zipfile
from collections.abc import Callable
from importlib import metadata
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import torch
from omegaconf import OmegaConf

import data_synth
from dochar import graphs, tasks
from dochar.data.word_table import iter_pages, validate_word_table
from dochar.features import WordFeaturizer
from dochar.graphs.candidates import CandidateOptions
from dochar.models import saved
from dochar.models.builders import (
    baseline_arguments,
    build_baseline,
    build_gnn,
    build_template,
    template_arguments,
)
from dochar.models.fit import FittedModel
from dochar.models.inputs import PageSet, label_indices, to_matrix
from dochar.models.pairs import page_candidates, pair_matrix
from dochar.models.saved import (
    ESTIMATOR,
    MANIFEST,
    WEIGHTS,
    SavedModelError,
    load_model,
    save_model,
)
from dochar.tasks.links import LINK_LABELS
from tests.models.test_saved import (  # noqa: F401 (fixtures)
    config,
    pages,
    plant,
    saved_forest,
    saved_gnn,
)


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

    names = list(builder.edge_attr_names)
    manifest = json.loads((folder / MANIFEST).read_text())
    for recorded in (names[:-1], None):   # one name short; no record at all (none, by default)
        if recorded is None:
            manifest.pop("edge_attr_names")
        else:
            manifest["edge_attr_names"] = recorded
        (folder / MANIFEST).write_text(json.dumps(manifest))
        with pytest.raises(SavedModelError) as error:
            load_model(folder)
        assert str(error.value) == (f"{folder}: this dochar's edge features are {names}, the "
                                    f"model was trained on {recorded or []}")


# --- a saved pair forest (task links) -----------------------------------------------------------

PAIR_OPTIONS = ("task=links", "task.link_kind=same_entity", "task.candidates.source=distance",
                "task.candidates.max_distance=0.05", "model=random_forest", "features=geometry")


def training_candidates(cfg: dict, pages: list, max_distance: float
                        ) -> tuple[list, PageSet, list]:
    """The link pages, page set and candidate pairs as training builds them, with the distance
    written out (not read through the saved unit)."""
    task = tasks.from_config(cfg["task"])
    link_pages = task.input_pages(pages)
    page_set = PageSet.build([task.graph_page(p) for p in link_pages],
                             graphs.from_config(cfg["graph"]))
    options = CandidateOptions("distance", max_distance)
    return link_pages, page_set, [page_candidates(page, edges, options)
                                  for page, edges in zip(link_pages, page_set.edges)]


def saved_pair_forest(folder: Path, cfg: dict, pages: list, *, links_seen: bool
                      ) -> tuple[Path, Any, np.ndarray, list]:
    """A forest on the pair rows of ``pages`` saved to ``folder``; without ``links_seen`` it is
    trained on negatives only (its classes lack ``link``). Returns the unit, the live forest,
    its rows and the candidate pairs they came from."""
    _, page_set, candidates = training_candidates(cfg, pages, 0.05)
    featurizer = WordFeaturizer.from_config(cfg["features"], cfg["data"]).fit(pages)
    rows = pair_matrix(page_set, candidates, featurizer,
                       hash_features=cfg["features"]["hash_features"], neighbour_features=False)
    truth = np.concatenate([c.y for c in candidates]).astype(int)
    arguments = {**baseline_arguments({**cfg, "seed": 0}), "options": {"n_estimators": 3}}
    forest = build_baseline(arguments).fit(rows, truth if links_seen else truth * 0)
    fitted = FittedModel(forest, arguments, [], {}, threshold=0.5, featurizer=featurizer)
    return save_model(folder, fitted, cfg, labels=list(LINK_LABELS)), forest, rows, candidates


@pytest.fixture(scope="module")
def pair_pages():
    table = validate_word_table(data_synth.generate(2, seed=11), list(data_synth.LABELS)).table
    return list(iter_pages(table))


@pytest.fixture(scope="module")
def saved_pairs(tmp_path_factory, pair_pages):
    return saved_pair_forest(tmp_path_factory.mktemp("pairs") / "model", config(*PAIR_OPTIONS),
                             pair_pages, links_seen=True)


def test_a_loaded_pair_forest_scores_the_candidates_training_made(saved_pairs, pair_pages):
    folder, forest, rows, candidates = saved_pairs
    _, found, scores = load_model(folder).score_pairs(pair_pages)
    for mine, theirs in zip(found, candidates):
        np.testing.assert_array_equal(mine.pairs, theirs.pairs)
    link = list(forest.classes_).index(1)   # the reference: the live forest on the same rows
    np.testing.assert_array_equal(np.concatenate(scores), forest.predict_proba(rows)[:, link])
    # the recorded distance matters: the default 0.1 would give more pairs
    _, _, farther = training_candidates(config(*PAIR_OPTIONS), pair_pages, 0.1)
    assert sum(c.pairs.shape[1] for c in farther) > sum(c.pairs.shape[1] for c in candidates)


def test_a_pair_forest_that_never_saw_a_link_scores_every_pair_zero(tmp_path, pair_pages):
    folder, forest, _, candidates = saved_pair_forest(tmp_path / "model", config(*PAIR_OPTIONS),
                                                      pair_pages, links_seen=False)
    assert list(forest.classes_) == [0]
    _, _, scores = load_model(folder).score_pairs(pair_pages)
    # worked by hand: a link it never saw has probability 0 on every candidate
    assert [s.tolist() for s in scores] == [[0.0] * c.pairs.shape[1] for c in candidates]


def test_no_pages_give_no_pair_scores(saved_pairs):
    link_pages, found, scores = load_model(saved_pairs[0]).score_pairs([])
    # worked by hand: no page, no candidate pair, no score (and no estimator call on 0 rows)
    assert link_pages == [] and found == []
    assert np.concatenate(scores).shape == (0,)


def test_a_page_of_one_word_has_no_pairs_and_no_scores(saved_pairs, pair_pages):
    words = data_synth.generate(2, seed=11)      # the table pair_pages was cut from
    first = words[(words["doc_id"] == pair_pages[0].doc_id)
                  & (words["page"] == pair_pages[0].page)].iloc[:1]   # its first word alone
    alone = list(iter_pages(validate_word_table(first, list(data_synth.LABELS)).table))
    _, found, scores = load_model(saved_pairs[0]).score_pairs([*alone, pair_pages[1]])
    # worked by hand: one word makes no pair; the other page scores as when scored alone
    assert found[0].pairs.shape == (2, 0) and found[0].geometry.shape == (0, 17)
    assert scores[0].shape == (0,)
    np.testing.assert_array_equal(scores[1], load_model(saved_pairs[0]).score_pairs(
        [pair_pages[1]])[2][0])


# --- a unit whose manifest disagrees with its parts: located, whole messages --------------------

def tampered(folder: Path, tmp_path: Path, change: Callable[[dict], object]) -> Path:
    """A copy of a unit whose manifest ``change`` edits (the model file stays as saved)."""
    target = tmp_path / "tampered"
    shutil.copytree(folder, target)
    manifest = json.loads((target / MANIFEST).read_text())
    change(manifest)
    (target / MANIFEST).write_text(json.dumps(manifest))
    return target


LABELS = list(data_synth.LABELS)   # 14 labels; the GNN of test_saved.saved_gnn has 14 outputs
KNN_RELATIONS = ["above", "below", "left", "right"]   # what the knn builder makes (its config)
# each: the manifest edit, and the message worked out by hand from the check it breaks
MANIFEST_FAULTS: dict[str, tuple[Callable[[dict], object], Callable[[Path], str]]] = {
    "older-format": (lambda m: m.update(format="dochar-model/1"),
                     lambda f: f"{f / MANIFEST}: format 'dochar-model/1', this dochar reads "
                               "'dochar-model/2'"),
    "no-format": (lambda m: m.pop("format"),
                  lambda f: f"{f / MANIFEST}: format None, this dochar reads 'dochar-model/2'"),
    "no-files": (lambda m: m.update(files={}),
                 lambda f: f"{f / MANIFEST}: a gnn model lists files [], expected ['weights.pt']"),
    "two-files": (lambda m: m["files"].update({"estimator.skops": "0" * 64}),
                  lambda f: f"{f / MANIFEST}: a gnn model lists files ['estimator.skops', "
                            "'weights.pt'], expected ['weights.pt']"),
    "unknown-kind": (lambda m: m.update(kind="mystery"),
                     lambda f: f"{f / MANIFEST}: a mystery model lists files ['weights.pt'], "
                               "expected [None]"),
    "edge-features": (lambda m: m.update(edge_attr_names=["gap_x"]),
                      lambda f: f"{f}: this dochar's edge features are [], the model was "
                                "trained on ['gap_x']"),
    "relations": (lambda m: m.update(relations=["above", "below"]),
                  lambda f: f"{f}: this dochar's knn builder makes relations {KNN_RELATIONS}, "
                            "the model was trained on ['above', 'below']"),
    "fewer-labels": (lambda m: m.update(labels=LABELS[:-1]),
                     lambda f: f"{f}: the network has 14 outputs for 13 labels"),
    "edge-dim": (lambda m: m["arguments"]["stack"].update(edge_dim=3),
                 lambda f: f"{f}: the network reads 3 edge attributes, this dochar's graph config "
                           "gives 0"),
    "char-vocab": (lambda m: m["featurizer"].update(char_vocab="abc"),
                   lambda f: "the model was trained with another character vocabulary than this "
                             "dochar's; character ids would mean other characters"),
}


@pytest.mark.parametrize("fault", sorted(MANIFEST_FAULTS))
def test_a_manifest_that_disagrees_is_refused_with_its_place(saved_gnn, tmp_path, fault):
    change, message = MANIFEST_FAULTS[fault]
    folder = tampered(saved_gnn[0], tmp_path, change)
    with pytest.raises(SavedModelError) as error:
        load_model(folder)
    assert str(error.value) == message(folder)


def test_feature_columns_other_than_the_trained_ones_are_refused(saved_gnn, tmp_path):
    names = json.loads((saved_gnn[0] / MANIFEST).read_text())["featurizer"]["feature_names"]
    folder = tampered(saved_gnn[0], tmp_path,
                      lambda m: m["featurizer"]["feature_names"].append("extra"))
    with pytest.raises(SavedModelError) as error:
        load_model(folder)
    assert str(error.value) == (f"the featurizer rebuilt from the model gives columns {names}, "
                                f"the model was trained on {[*names, 'extra']}")


@pytest.mark.parametrize("text,found", [("{", None), ("[]", "'list'")], ids=["cut", "a-list"])
def test_a_manifest_that_is_no_json_object_is_refused(saved_gnn, tmp_path, text, found):
    folder = tmp_path / "unit"
    shutil.copytree(saved_gnn[0], folder)
    (folder / MANIFEST).write_text(text)
    with pytest.raises(SavedModelError) as error:
        load_model(folder)
    if found is None:   # the json module's own refusal is quoted
        with pytest.raises(json.JSONDecodeError) as reason:
            json.loads(text)
        assert str(error.value) == (f"{folder / MANIFEST}: not a readable model manifest "
                                    f"({reason.value})")
    else:
        assert str(error.value) == (f"{folder / MANIFEST}: format {found}, this dochar reads "
                                    "'dochar-model/2'")


def test_a_missing_or_changed_weights_file_is_refused(saved_gnn, tmp_path):
    folder = tmp_path / "unit"
    shutil.copytree(saved_gnn[0], folder)
    weights = (folder / WEIGHTS).read_bytes()
    (folder / WEIGHTS).write_bytes(weights[:-1] + bytes([weights[-1] ^ 1]))   # one bit flipped
    with pytest.raises(SavedModelError) as error:
        load_model(folder)
    assert str(error.value) == (f"{folder / WEIGHTS}: refused, its SHA-256 differs from the one "
                                "dochar recorded in manifest.json when it saved the model (the "
                                "file was changed or replaced); nothing was loaded from it")
    (folder / WEIGHTS).unlink()
    with pytest.raises(SavedModelError) as error:
        load_model(folder)
    assert str(error.value) == f"{folder / WEIGHTS}: missing from the model folder"


@pytest.mark.parametrize("changed", [
    lambda state: {name: torch.zeros(3) for name in state},   # same names, other shapes
    lambda state: dict(list(state.items())[1:]),   # strict loading: every tensor must be there
], ids=["another-network", "missing-tensor"])
def test_weights_that_do_not_fit_the_network_are_refused(saved_gnn, tmp_path, changed):
    state = torch.load(saved_gnn[0] / WEIGHTS, weights_only=True)
    buffer = io.BytesIO()
    torch.save(changed(state), buffer)
    folder = plant(saved_gnn[0], tmp_path, WEIGHTS, buffer.getvalue(), rehash=True)
    network = type(load_model(saved_gnn[0]).model).__name__
    with pytest.raises(SavedModelError) as error:
        load_model(folder)
    # torch's load_state_dict opens its report with this line (its documented format)
    assert str(error.value) == (f"{folder / WEIGHTS}: does not fit the architecture in "
                                f"manifest.json: Error(s) in loading state_dict for {network}:")


def test_a_manifest_without_edge_records_loads_as_a_network_without_edge_attributes(
        saved_gnn, pages, tmp_path):
    # the edge records default to none: a network that reads no edge attributes (GNNStack's
    # edge_dim default), so the unit labels pages as the live network did
    folder, expected = saved_gnn

    def forget_edges(manifest: dict) -> None:
        for key in ("edges", "edge_attr_names"):
            manifest.pop(key)
        manifest["arguments"]["stack"].pop("edge_dim")

    loaded = load_model(tampered(folder, tmp_path, forget_edges))
    assert loaded.builder.edge_attr_names == ()
    for mine, theirs in zip(loaded.predict_proba(pages), expected):
        np.testing.assert_allclose(mine, theirs, rtol=0, atol=1e-6)


def test_an_estimator_without_classes_is_refused(pages, tmp_path):
    from sklearn.linear_model import LinearRegression

    cfg = config("model=random_forest", "features=all")
    featurizer = WordFeaturizer.from_config(cfg["features"], cfg["data"]).fit(pages)
    regression = LinearRegression().fit(np.eye(3), [0.0, 1.0, 2.0])   # no classes_ at all
    arguments = baseline_arguments({**cfg, "seed": 0})
    folder = save_model(tmp_path / "model",
                        FittedModel(regression, arguments, [], {}, featurizer=featurizer), cfg)
    with pytest.raises(SavedModelError) as error:
        load_model(folder)
    assert str(error.value) == (f"{folder / ESTIMATOR}: estimator classes [] do not index the "
                                f"{len(cfg['data']['labels'])} labels")


# --- what a loaded unit tells its user -------------------------------------------------------

def test_task_and_label_set_must_agree(saved_gnn):
    loaded = load_model(saved_gnn[0])
    loaded.expect(labels=LABELS, task="word_labels")   # the same: accepted
    with pytest.raises(SavedModelError) as error:
        loaded.expect(task="links")
    assert str(error.value) == (f"{saved_gnn[0]}: the model was trained for task 'word_labels', "
                                "the config asks for task 'links'")
    # the detail, worked by hand: labels only the config has, labels only the model has, or
    # (neither) the same labels in another order
    swapped = [*LABELS[:-1], "stamp"]
    fewer = LABELS[:-1]
    reordered = LABELS[::-1]
    for given, detail in [
            (swapped, "labels the model does not know: ['stamp']; labels the config lacks: "
                      "['other']"),
            (fewer, "labels the config lacks: ['other']"),
            (reordered, "the same labels in another order")]:
        with pytest.raises(SavedModelError) as error:
            loaded.expect(labels=given)
        assert str(error.value) == (f"{saved_gnn[0]}: the model was trained on the label set "
                                    f"{LABELS}, the config gives {given} ({detail})")


def test_a_pair_model_labels_no_nodes(saved_pairs, pair_pages):
    with pytest.raises(SavedModelError) as error:
        load_model(saved_pairs[0]).predict_proba(pair_pages)
    assert str(error.value) == (f"{saved_pairs[0]}: a links model scores pairs of nodes; dochar "
                                "predict labels nodes (word, tag or segment models)")


def test_a_unit_is_found_in_a_run_folder_or_below(saved_gnn, tmp_path):
    """The order the docstring names: the folder itself, its model/, then any unit below."""
    run = tmp_path / "run"
    shutil.copytree(saved_gnn[0], run / "model")              # a run folder: model/ ...
    shutil.copytree(saved_gnn[0], run / "archive")            # ... before a unit sorted earlier
    nested = tmp_path / "tracked"
    shutil.copytree(saved_gnn[0], nested / "artifacts" / "unit")   # a tracking store, deeper
    assert load_model(run).folder == run / "model"
    assert load_model(nested).folder == nested / "artifacts" / "unit"
    shutil.copytree(saved_gnn[0], run, dirs_exist_ok=True)     # run is a unit itself now
    assert load_model(run).folder == run
    assert load_model(run / "model").folder == run / "model"   # not the unit around it
    with pytest.raises(SavedModelError) as error:
        load_model(tmp_path / "run" / "empty")
    assert str(error.value) == (f"{tmp_path / 'run' / 'empty'}: no dochar model here (no "
                                "manifest.json in it, in model/ or below)")


def test_version_notes_name_the_libraries_that_changed(saved_gnn, tmp_path):
    folder = tampered(saved_gnn[0], tmp_path, lambda m: m["libraries"].update(torch="0.1"))
    # the reference for "now": the installed distribution's own version
    assert load_model(folder).version_notes() == [
        f"torch 0.1 when saved, {metadata.version('torch')} now"]
    assert load_model(saved_gnn[0]).version_notes() == []


def test_label_words_gives_each_word_its_box_and_best_three_labels(saved_forest):
    loaded = load_model(saved_forest[0])
    table = validate_word_table(data_synth.generate(2, seed=11), LABELS).table
    words = list(iter_pages(table))
    found = loaded.label_words(table)
    proba = np.vstack(loaded.predict_proba(words))   # checked against the live forest elsewhere
    # reference: each word's labels by falling probability, ties to the earlier label (Python's
    # sort is stable), the best three kept
    ranked = [sorted(range(len(LABELS)), key=lambda j: -row[j])[:3] for row in proba]
    assert list(found.columns) == ["doc_id", "page", "word_id", "text", "x0", "y0", "x1", "y1",
                                   "label", "predicted", "probability", "top2",
                                   "top2_probability", "top3", "top3_probability"]
    assert found["doc_id"].tolist() == [p.doc_id for p in words for _ in range(len(p))]
    assert found["page"].tolist() == [p.page for p in words for _ in range(len(p))]
    assert found["word_id"].tolist() == [w for p in words for w in p.word_ids]
    assert found["text"].tolist() == [t for p in words for t in p.texts]
    np.testing.assert_array_equal(found[["x0", "y0", "x1", "y1"]].to_numpy(float),
                                  np.vstack([p.boxes for p in words]))
    for rank, (name, chance) in enumerate([("predicted", "probability"),
                                           ("top2", "top2_probability"),
                                           ("top3", "top3_probability")]):
        assert found[name].tolist() == [LABELS[r[rank]] for r in ranked]
        assert found[chance].tolist() == [row[r[rank]] for row, r in zip(proba, ranked)]


# --- what save_model writes ----------------------------------------------------------------------

def resave(saved_forest, tmp_path: Path, cfg: dict, **options: Any) -> dict:
    """The test forest saved again with ``cfg``; its manifest as written."""
    loaded = load_model(saved_forest[0])
    arguments = loaded.manifest["arguments"]
    fitted = FittedModel(loaded.model, arguments, [], {}, threshold=0.25,
                         featurizer=loaded.featurizer)
    folder = save_model(tmp_path / "again", fitted, cfg, **options)
    return json.loads((folder / MANIFEST).read_text())


def test_the_manifest_records_the_run_around_the_model(saved_forest, tmp_path):
    cfg = config("model=random_forest_neighbours", "features=all", "seed=7", "run_name=r7",
                 "evaluation.entity_ignore=[other,key]")
    cfg["data"]["record"].update(row_anchor=None, items_name="results", amount_fields=[2024])
    manifest = resave(saved_forest, tmp_path, cfg)
    # each field worked by hand from the config given
    assert manifest["name"] == "r7" and manifest["seed"] == 7 and manifest["threshold"] == 0.25
    assert manifest["labels"] == LABELS and manifest["task"] == {"name": "word_labels"}
    assert manifest["data"] == {"name": cfg["data"]["name"], "labels": LABELS, "record": {
        **{key: value for key, value in cfg["data"]["record"].items() if value is not None},
        "amount_fields": ["2024"]}}   # plain values: None left out, list items as text
    assert manifest["entity_ignore"] == ["other", "key"]
    assert manifest["edges"] == cfg["edges"] and manifest["model"] == cfg["model"]
    assert manifest["features"] == cfg["features"] and manifest["graph"] == cfg["graph"]
    assert manifest["libraries"]["torch"] == torch.__version__
    assert (tmp_path / "again" / MANIFEST).read_text().splitlines()[1] == (
        '  "format": "dochar-model/2",')   # two-space indented JSON, format first


def test_the_manifest_has_defaults_for_what_a_config_lacks(saved_forest, tmp_path):
    cfg = config("model=random_forest_neighbours", "features=all")
    for key in ("task", "edges", "evaluation", "run_name"):
        cfg.pop(key)
    cfg["model"]["origin"] = Path("runs") / "r1"   # not JSON: written as its text
    manifest = resave(saved_forest, tmp_path, cfg, name="kept", labels=LABELS[::-1])
    assert manifest["name"] == "kept" and manifest["labels"] == LABELS[::-1]
    assert manifest["task"] == {"name": "word_labels"} and manifest["edges"] == {}
    assert manifest["entity_ignore"] == ["other"] and manifest["model"]["origin"] == "runs/r1"
    cfg["data"].pop("name")
    cfg["data"].pop("record")
    bare = resave(saved_forest, tmp_path / "bare", cfg)
    assert bare["name"] == "" and bare["data"]["name"] == "" and bare["data"]["record"] == {}


def test_a_library_that_is_not_installed_is_recorded_so(monkeypatch):
    monkeypatch.setattr(saved, "LIBRARIES", ("dochar-no-such-distribution", "numpy"))
    # the reference for numpy: the installed distribution's own version
    assert saved.library_versions() == {"dochar-no-such-distribution": "not installed",
                                        "numpy": metadata.version("numpy")}


def test_the_estimator_file_is_compressed(saved_forest):
    members = zipfile.ZipFile(saved_forest[0] / ESTIMATOR).infolist()
    assert members and {m.compress_type for m in members} == {zipfile.ZIP_DEFLATED}


def test_a_network_with_a_stray_tensor_is_not_saved(saved_gnn, tmp_path):
    loaded = load_model(saved_gnn[0])
    network = build_gnn(loaded.manifest["arguments"])
    network.register_buffer("stray", torch.zeros(1))   # a tensor the recorded arguments lack
    fitted = FittedModel(network, loaded.manifest["arguments"], [], {},
                         featurizer=loaded.featurizer)
    cfg = config("model=attention", "graph=knn", "features=all", "++model.hidden_dim=8")
    with pytest.raises(RuntimeError, match='Unexpected key\\(s\\) in state_dict: "stray"'):
        save_model(tmp_path / "model", fitted, cfg)
    assert list(tmp_path.iterdir()) == []


# --- predict_proba gives one array per page ------------------------------------------------------

def test_each_page_gets_its_own_rows(saved_forest, saved_gnn, pages, tmp_path):
    # references: the live forest's rows cut at the page sizes; the live template on each page
    got = load_model(saved_forest[0]).predict_proba(pages)
    cuts = np.cumsum([len(page) for page in pages])[:-1]
    assert len(got) == len(pages) >= 3
    for mine, theirs in zip(got, np.split(saved_forest[1], cuts)):
        np.testing.assert_array_equal(mine, theirs)
    cfg = config("model=layout_template")
    arguments = template_arguments(OmegaConf.create(cfg), cfg["data"]["labels"])
    template = build_template(arguments).fit(pages)
    folder = save_model(tmp_path / "template", FittedModel(template, arguments, [], {}), cfg)
    got = load_model(folder).predict_proba(pages)
    assert len(got) == len(pages)
    for mine, page in zip(got, pages):
        np.testing.assert_array_equal(mine, template.predict_proba([page]))
    assert load_model(saved_gnn[0]).predict_proba([]) == []   # no page, no array
